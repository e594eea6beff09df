"""Compare plain run directories, no sweep needed: ``marl-core compare RUN_DIR ... --out DIR``.

Each argument is a run directory written by ``marl-core train``, or ``LABEL=RUN_DIR``: runs given the same
label are seeds of one condition (as in cross-play), and a run without a label is its own condition, named
after its directory. The first label is the baseline unless ``--baseline`` names another. The statistics,
tables and figures are the sweep report's (:mod:`marl_core.ablation.report`: per-condition mean and IQM
with intervals, each non-learning team beside them, each condition against the baseline, learning curves
per env step and per wall-clock minute with every seed drawn), written to ``DIR``:

    summary.md    a short table: each condition's seeds and headline metrics beside its strongest
                  non-learning team
    report.md     the full report, runs.csv, findings.json and figures/ (as for a sweep)

``DIR`` must be new or empty. Runs that have not finished (no ``summary.json``) are listed as failed and
left out of the numbers. This module reads files only; it never imports torch.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

from marl_core.ablation.report import summarize_runs, write_summary
from marl_core.errors import RunDirError

__all__ = ["compare", "parse_runs"]

#: the headline metrics of summary.md, where the game declares them
HEADLINE = ("return_mean", "efficiency", "equality", "sustainability", "peace")


def parse_runs(items: list[str]) -> list[tuple[str, Path]]:
    """``(label, run_dir)`` pairs from ``RUN_DIR`` / ``LABEL=RUN_DIR`` arguments, each checked."""
    if not items:
        raise RunDirError("compare: no RUN_DIR given; expected at least one run directory")
    out: list[tuple[str, Path]] = []
    plain: set[str] = set()
    labelled: set[str] = set()
    for item in items:
        label, sep, path = item.partition("=")
        if not sep:
            label, path = Path(item).name or item, item
            if label in plain or label in labelled:
                raise RunDirError(f"compare: two runs are named {label!r}; label them (LABEL=RUN_DIR), giving "
                                  "one label to runs that are seeds of one condition")
            plain.add(label)
        else:
            if not label:
                raise RunDirError(f"compare: {item!r} has an empty label; expected LABEL=RUN_DIR or RUN_DIR")
            if label in plain:
                raise RunDirError(f"compare: label {label!r} is also the name of a run given without a label")
            labelled.add(label)
        run = Path(path)
        if not run.exists():
            raise RunDirError(f"compare: run directory '{run}' does not exist")
        if not (run / "config.yaml").is_file():
            raise RunDirError(f"compare: '{run}' is not a run directory (no config.yaml)")
        out.append((label, run))
    return out


def _cell(metric: dict[str, Any]) -> str:
    mean, (low, high) = metric["mean"], metric["mean_ci"]
    if not math.isfinite(mean):
        return "n/a"
    band = f" [{low:.3g}, {high:.3g}]" if math.isfinite(low) and math.isfinite(high) else ""
    return f"{mean:.3g}{band}"


def short_table(summary: dict[str, Any]) -> str:
    """summary.md: one row per condition, the headline metrics the game declares (mean [95% t interval]),
    and the strongest non-learning team's mean on the first of them after the return."""
    metrics = [m for m in HEADLINE if m in summary["measures"]]
    key = next((m for m in metrics if m != "return_mean"), "return_mean")
    lines = [f"| condition | seeds | {' | '.join(metrics)} | strongest non-learning team ({key}) |",
             "|---|---|" + "---|" * len(metrics) + "---|"]
    for a in summary["arm_order"]:
        info = summary["arms"][a]
        m = info["metrics"]
        best = m[key]["best_team"]
        team = f"`{best}` {m[key]['best_team_mean']:.3g}" if best else "none measured"
        label = f"`{a}`" + (" (baseline)" if a == summary["baseline"] else "")
        lines.append(f"| {label} | {info['done']} | " + " | ".join(_cell(m[x]) for x in metrics) + f" | {team} |")
    return "\n".join(lines) + "\n"


def compare(items: list[str], out: str | Path, baseline: str | None = None, test: str = "mannwhitney",
            figures: bool = True) -> dict[str, Any]:
    """Compare the runs ``items`` (module docstring) into the new directory ``out``; return the summary."""
    out = Path(out)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise RunDirError(f"compare: --out '{out}' already exists and is not empty; choose a new directory")
    runs = parse_runs(items)
    labels = list(dict.fromkeys(label for label, _ in runs))
    if baseline is not None and baseline not in labels:
        raise RunDirError(f"compare: --baseline {baseline!r} is not a label; expected one of {', '.join(labels)}")
    summary = summarize_runs(runs, str(out), baseline=baseline, test=test)
    write_summary(summary, out, figures)
    (out / "summary.md").write_text(short_table(summary), encoding="utf-8")
    return summary
