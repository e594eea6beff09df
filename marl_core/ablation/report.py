"""The sweep report: tables, comparisons with the baseline, figures and a CSV of every run, from files only.

``write_report(sweep_dir)`` reads a sweep directory written by :func:`marl_core.ablation.runner.ablate`
and writes ``sweep_dir/report/``::

    report.md                     header (first, when the spec says ``smoke_test: true``, a note that the
                                  sweep is a smoke test whose numbers say nothing about the arms), notes on method (test, intervals and their measured coverage,
                                  correction), warnings, failed runs, Table 1 per metric (per-arm mean
                                  and IQM with 95% intervals, each non-learning team's mean), the arms
                                  that are not better than the strongest non-learning team, Table 2 per
                                  metric (each arm vs the baseline arm), links to the figures
    runs.csv                      one row per run of the ledger, every state
    figures/curve_<metric>.png    learning curves: each seed thin, mean over seeds, 95% Student t band, random
                                  team dashed
    figures/time_<metric>.png     the same against wall-clock minutes (runs that recorded their times)
    figures/bars_<metric>.png     IQM per arm with its 95% trimmed-mean t interval, the baseline hatched
    figures/axis_<key>_<metric>.png  for every numeric override key: the metric (mean, Student t) against it

What is read: ``ledger.sqlite`` (through :class:`~marl_core.ablation.ledger.Ledger`), and for each done run
``runs/<run_id>/summary.json`` (its final metrics; the ledger's copy when the file is missing),
``metrics.jsonl`` (the curves) and ``config.yaml`` (the value of an override key for an arm that does not set
it, and the game and learner names in the header). Nothing is trained or loaded: this module never imports
torch, and matplotlib is imported only when the figures are drawn (with the Agg canvas, no pyplot and no
global backend change).

Statistics (all from :mod:`marl_core.ablation.stats`): per arm and metric the mean with its Student t
interval and the interquartile mean (Agarwal et al. 2021) with its trimmed-mean t interval (Tukey–McLaughlin);
against the baseline arm, the difference of means with its Welch t interval, a two-sided Mann–Whitney U test
by default (no normality assumption; ``test="welch"`` for Welch's t-test), Holm's correction and the
probability of improvement; learning curves with the Student t interval of the mean at each step. The
coverage of every interval, measured by simulation at 3, 5 and 10 seeds (``stats.MEASURED_COVERAGE``), is
printed in the notes on method. No interval resamples, so ``reps`` and ``seed`` change nothing (they are kept
for callers). Findings use one Holm family rule: within each measure, the tests the Findings section
makes on it (every arm against the baseline; one test along an axis or against a team, so no correction
there). In Table 2 the Holm family is, by default, the same: one metric's comparisons of every arm with the
baseline
(``holm_family="metric"``); ``"all"`` corrects over every arm × metric comparison at once. NaN values
(sustainability when no agent scores, equality when returns sum to <= 0) are dropped and counted.

Non-learning teams: each run's ``summary.json`` may carry ``baselines`` (team name -> the learned team's
metric keys, e.g. ``random``, ``stay``, ``greedy``); an older summary without it contributes its top-level
``random`` as the one team. Per arm and metric the report shows each team's mean over the arm's runs, and
says in words where the arm is not better than the strongest team: where the lower end of the arm's
interval of the mean is not above that team's mean.

:func:`report_summary` returns every number the report shows as a dict; :func:`write_report` renders that
dict, so the tables, figures and tests read one code path.
"""

from __future__ import annotations

import csv
import io
import json
import math
import numbers
import os
import re
from pathlib import Path
from typing import Any

import numpy as np
import yaml

from envs.metrics import BEHAVIOUR_NAMES, METRIC_NAMES
from marl_core.ablation import stats
from marl_core.ablation.ledger import Ledger
from marl_core.ablation.spec import flat_config
from marl_core.errors import ConfigError, MissingExtraError, RunDirError
from marl_core.files import atomic_write, write_json
from marl_core.hints import command

__all__ = ["write_report", "write_summary", "summarize_runs", "report_summary", "is_smoke_test", "METRICS", "BEHAVIOUR", "HOLM_FAMILIES", "FEW_SEEDS",
           "CONFIDENCE"]

#: The metrics of the tables and figures, in display order; every one is higher-is-better.
METRICS: tuple[str, ...] = ("return_mean", *METRIC_NAMES)
HIGHER_IS_BETTER: dict[str, bool] = dict.fromkeys(METRICS, True)
#: Behaviour measures (per agent per episode, mean over agents), reported beside the metrics when the runs
#: record them; they have no better direction, so no arm is judged better or worse on them.
BEHAVIOUR: tuple[str, ...] = BEHAVIOUR_NAMES
#: ``holm_family`` values: one family per metric, or one family of every arm x metric comparison.
HOLM_FAMILIES: tuple[str, ...] = ("metric", "all")
#: Below this many done seeds an arm is flagged in the warnings (common practice (no source)).
FEW_SEEDS = 5
CONFIDENCE = 0.95
DPI = 110

_SEED_KEY = "train.seed"
_MISSING = object()
_DESCRIPTIONS = {
    "return_mean": "mean episode return per agent (evaluation, exploration off)",
    "efficiency": "sum of all agents' returns per time step",
    "equality": "1 − Gini coefficient of the agents' returns (NaN when returns differ and sum to ≤ 0)",
    "sustainability": "mean time step at which agents receive positive rewards (NaN when nobody scores)",
    "peace": "mean number of agents not tagged out per time step, in [0, N]",
    "resources_taken": "resources taken per agent per episode (behaviour)",
    "tags_fired": "tag beams fired per agent per episode (behaviour)",
    "times_tagged": "times tagged out per agent per episode (behaviour)",
    "waste_removed": "waste cells cleaned per agent per episode (behaviour)",
}
_TEST_NAMES = {"mannwhitney": "Mann–Whitney U", "welch": "Welch's t"}


# ================================================================================== argument checks
def _check_args(test: Any, reps: Any, seed: Any, holm_family: Any) -> None:
    if test not in stats.TESTS:
        raise ConfigError(f"test = {test!r} is not allowed; expected one of {', '.join(stats.TESTS)}")
    if isinstance(reps, bool) or not isinstance(reps, numbers.Integral) or reps < 1:
        raise ConfigError(f"reps = {reps!r} is not allowed; expected an integer >= 1 (kept for callers; unused)")
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, numbers.Integral) or seed < 0):
        raise ConfigError(f"seed = {seed!r} is not allowed; expected an integer >= 0 or None")
    if holm_family not in HOLM_FAMILIES:
        raise ConfigError(f"holm_family = {holm_family!r} is not allowed; expected one of "
                          f"{', '.join(HOLM_FAMILIES)}")


# ================================================================================== reading files
def _float(x: Any) -> float:
    """A number as a float; None, text and other values as NaN (JSON writes NaN as null)."""
    if isinstance(x, bool) or not isinstance(x, numbers.Real):
        return math.nan
    return float(x)


def _last_line(text: str | None) -> str | None:
    lines = [line.strip() for line in (text or "").strip().splitlines() if line.strip()]
    return lines[-1] if lines else None


def _read_json(path: Path, problems: list[str]) -> dict[str, Any] | None:
    if not path.is_file():
        return None
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as err:
        problems.append(f"cannot read `{path}`: {' '.join(str(err).split())}")
        return None
    return data if isinstance(data, dict) else None


def _read_yaml(path: Path, problems: list[str]) -> dict[str, Any] | None:
    if not path.is_file():
        return None
    try:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, yaml.YAMLError) as err:
        problems.append(f"cannot read `{path}`: {' '.join(str(err).split())}")
        return None
    return data if isinstance(data, dict) else None


def _read_curve(path: Path, problems: list[str]) -> dict[int, dict[str, Any]] | None:
    """``metrics.jsonl`` as env_steps (updates for a lola run) -> row (a later line for the same step wins);
    None if absent."""
    if not path.is_file():
        return None
    out: dict[int, dict[str, Any]] = {}
    try:
        lines = path.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError) as err:
        problems.append(f"cannot read `{path}`: {' '.join(str(err).split())}")
        return None
    bad = 0
    for line in lines:
        if not line.strip():
            continue
        try:
            row = json.loads(line)
            # a lola run counts updates (exact gradients play no env steps); every other run env steps
            step = int(row["updates"]) if isinstance(row, dict) and "updates" in row else int(row["env_steps"])
        except (ValueError, KeyError, TypeError):
            bad += 1  # e.g. a line cut short by a crash
            continue
        out[step] = {**row, **_behaviour(row)} if isinstance(row, dict) else row
    if bad:
        problems.append(f"`{path}`: {bad} unreadable line(s) skipped")
    return out


def _dig(data: Any, key: str) -> Any:
    """The value at a dotted key of a nested mapping, or ``_MISSING``."""
    node = data
    for part in key.split("."):
        if not isinstance(node, dict) or part not in node:
            return _MISSING
        node = node[part]
    return node


def _behaviour(record: dict[str, Any]) -> dict[str, float]:
    """The behaviour measures a summary or metrics.jsonl row records (``behaviour``: name -> count)."""
    found = record.get("behaviour")
    if not isinstance(found, dict):
        return {}
    return {k: _float(found[k]) for k in BEHAVIOUR if k in found}


def _team_metrics(team: dict[str, Any]) -> dict[str, float]:
    """A non-learning team's entry of summary.json as metric -> float (NaN where missing)."""
    out = {m: _float(team.get(m)) for m in METRICS}
    out.update(_behaviour(team))
    returns = team.get("returns")
    if not math.isfinite(out["return_mean"]) and isinstance(returns, dict) and returns:
        out["return_mean"] = float(np.mean([_float(v) for v in returns.values()]))
    return out


def _load_run(sweep: Path, row: dict[str, Any]) -> dict[str, Any]:
    """One ledger row with its run directory's files read (final metrics, curve, config)."""
    run_id = row["run_id"]
    run_dir = sweep / "runs" / run_id
    if not run_dir.is_dir() and row.get("run_dir"):
        run_dir = Path(row["run_dir"])
    overrides = {k: v for k, v in (row.get("overrides") or {}).items() if k != _SEED_KEY}
    rec: dict[str, Any] = {
        "run_id": run_id, "arm": row["arm"], "seed": row["seed"], "state": row["state"],
        "duration": row.get("duration"), "overrides": overrides, "run_dir": str(run_dir),
        "error": _last_line(row.get("error")), "env_steps": None, "episodes": None,
        **dict.fromkeys(METRICS, math.nan), "returns": {}, "random": dict.fromkeys(METRICS, math.nan),
        "baselines": {}, "source": None, "config": None, "curve": None, "problems": [], "declared": None,
    }
    if row["state"] != "done":
        return rec
    problems = rec["problems"]
    summary = _read_json(run_dir / "summary.json", problems)
    if summary is not None:
        rec["source"] = "summary.json"
    elif isinstance(row.get("metrics"), dict):
        summary, rec["source"] = row["metrics"], "ledger"
        problems.append(f"run `{run_id}` ({row['arm']}, seed {row['seed']}) is done but has no readable "
                        "summary.json; its final metrics come from the ledger")
    else:
        summary = {}
        problems.append(f"run `{run_id}` ({row['arm']}, seed {row['seed']}) is done but has neither "
                        "summary.json nor metrics in the ledger; it counts as NaN")
    declared = summary.get("metrics")
    if isinstance(declared, list):  # the social metrics the game declares (an older summary: all)
        rec["declared"] = [str(m) for m in declared]
    for key in ("env_steps", "episodes"):
        value = summary.get(key)
        rec[key] = int(value) if isinstance(value, numbers.Real) and not isinstance(value, bool) else None
    for m in METRICS:
        rec[m] = _float(summary.get(m))
    rec.update(_behaviour(summary))
    returns = summary.get("returns")
    if isinstance(returns, dict):
        rec["returns"] = {str(a): _float(v) for a, v in returns.items()}
    if not math.isfinite(rec["return_mean"]) and rec["returns"]:  # older summaries: derive it
        rec["return_mean"] = float(np.mean(list(rec["returns"].values())))
    teams = summary.get("baselines")
    if isinstance(teams, dict):
        rec["baselines"] = {str(t): _team_metrics(v) for t, v in teams.items() if isinstance(v, dict)}
    random = summary.get("random")
    if isinstance(random, dict):
        rec["random"] = _team_metrics(random)
    elif "random" in rec["baselines"]:
        rec["random"] = dict(rec["baselines"]["random"])
    if not rec["baselines"] and isinstance(random, dict):  # an older summary: the random team alone
        rec["baselines"] = {"random": dict(rec["random"])}
    rec["config"] = _read_yaml(run_dir / "config.yaml", problems)
    rec["curve"] = _read_curve(run_dir / "metrics.jsonl", problems)
    return rec


def _load(sweep_dir: str | os.PathLike) -> dict[str, Any]:
    sweep = Path(sweep_dir)
    ledger_path = sweep / "ledger.sqlite"
    if not ledger_path.is_file():
        raise RunDirError(f"'{sweep}' is not a sweep directory (no ledger.sqlite)")
    with Ledger(ledger_path) as ledger:
        rows = ledger.rows()
        baseline = ledger.get_meta("baseline")
        spec_text = ledger.get_meta("spec")
        sources_text = ledger.get_meta("sources")
    try:
        spec = json.loads(spec_text) if spec_text else None
    except ValueError:
        spec = None
    try:
        sources = json.loads(sources_text) if sources_text else None
    except ValueError:
        sources = None
    return {"sweep_dir": str(sweep), "baseline": baseline, "spec": spec if isinstance(spec, dict) else None,
            "sources": sources if isinstance(sources, dict) else None,
            "runs": [_load_run(sweep, row) for row in rows]}


def is_smoke_test(sweep_dir: str | os.PathLike) -> bool:
    """True when the spec of the sweep in ``sweep_dir`` (as its ledger recorded it) says ``smoke_test:
    true``: its runs are too short to learn and its numbers say nothing about the arms."""
    return (_load_spec(Path(sweep_dir) / "ledger.sqlite") or {}).get("smoke_test") is True


def _load_spec(ledger_path: Path) -> dict[str, Any] | None:
    if not ledger_path.is_file():
        return None
    with Ledger(ledger_path) as ledger:
        text = ledger.get_meta("spec")
    try:
        spec = json.loads(text) if text else None
    except ValueError:
        return None
    return spec if isinstance(spec, dict) else None


# ================================================================================== statistics
def _canonical(value: Any) -> str:
    return json.dumps(value, sort_keys=True, default=str)


def _is_number(value: Any) -> bool:
    return (isinstance(value, numbers.Real) and not isinstance(value, bool)
            and math.isfinite(float(value)))


def _short(value: Any) -> str:
    if isinstance(value, str):
        return value
    return json.dumps(value, default=str)


def _axes(arms: list[str], by_arm: dict[str, list[dict]], done: dict[str, list[dict]]) -> dict[str, Any]:
    """Override keys whose value differs between arms: key -> {values, numeric, groups}.

    An arm that does not set a key takes its value from a done run's ``config.yaml``. A key is numeric
    when every arm with a done run has a finite number (not a bool) for it and there are two or more
    distinct values; its ``groups`` split the arms by the values of the other varying keys (one line per
    group in the axis figures), or hold every arm in one group when no group has two points (e.g. zipped
    axes that move together).
    """
    keys: list[str] = []
    for arm in arms:
        for k in by_arm[arm][0]["overrides"]:
            if k not in keys:
                keys.append(k)

    def value_of(arm: str, key: str) -> Any:
        own = by_arm[arm][0]["overrides"].get(key, _MISSING)
        if own is not _MISSING:
            return own
        for r in done[arm]:
            found = _dig(r["config"], key)
            if found is not _MISSING:
                return found
        return _MISSING

    values = {k: {a: value_of(a, k) for a in arms} for k in keys}
    varying = [k for k in keys
               if len({_canonical(v) for v in values[k].values() if v is not _MISSING}) > 1]
    out: dict[str, Any] = {}
    for k in varying:
        shown = {a: v for a, v in values[k].items() if v is not _MISSING}
        with_data = [a for a in arms if done[a]]
        numeric = (bool(with_data) and all(_is_number(shown.get(a)) for a in with_data)
                   and len({float(shown[a]) for a in with_data}) > 1)
        groups: dict[str, list[str]] = {}
        if numeric:
            others = [o for o in varying if o != k]
            for a in with_data:
                label = ", ".join(f"{o}={_short(values[o][a])}" for o in others
                                  if values[o][a] is not _MISSING) or "all arms"
                groups.setdefault(label, []).append(a)
            if all(len(g) < 2 for g in groups.values()):
                groups = {"all arms": with_data}
            groups = {g: sorted(members, key=lambda a: float(shown[a])) for g, members in groups.items()}
        out[k] = {"values": shown, "numeric": numeric, "groups": groups}
    return out


def _finite_mean(values: list[float]) -> float:
    """The mean of the finite values (NaN when there are none)."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    return float(v.mean()) if v.size else math.nan


def _not_better(arm: str, metric: str, entry: dict[str, Any]) -> dict[str, Any]:
    """The record and the sentence of an arm whose interval of the mean is not above the strongest team."""
    low, high = entry["mean_ci"]
    team, value = entry["best_team"], entry["best_team_mean"]
    if not math.isfinite(low):
        why = "no_interval"
        because = ("1 seed, no interval" if entry["n"] < 2 else "no finite interval: a run is infinite")
        text = (f"`{arm}`: {metric} {_num(entry['mean'])} ({because}) cannot be shown better than the "
                f"`{team}` team's {_num(value)}" + (" (an interval needs at least 2 seeds)" if entry["n"] < 2
                                                     else ""))
    else:
        why = "below" if high < value else "reaches_below"
        where = "the whole interval lies below it" if why == "below" else "interval reaches below it"
        text = (f"`{arm}`: {metric} {_with_ci(entry['mean'], entry['mean_ci'])} is not better than the "
                f"`{team}` team's {_num(value)} ({where})")
    return {"arm": arm, "metric": metric, "mean": entry["mean"], "mean_ci": entry["mean_ci"], "n": entry["n"],
            "team": team, "team_mean": value, "reason": why, "sentence": text}


def _asked(source: str | None) -> bool:
    return source is not None and (source == "set" or source == "axes" or source.startswith("arms."))


def _config_differences(arms: list[str], done: dict[str, list[dict]], baseline: str | None,
                        sources: dict[str, dict[str, str]] | None) -> dict[str, list[dict[str, Any]]]:
    """Arm -> every resolved config key whose value differs from the baseline arm's, with why.

    ``why`` is ``asked`` (the spec sets the key in this arm, the baseline or ``set``), ``kind default``
    (a learner key the spec did not set, where the two arms run different learner kinds: each takes its
    own kind's default) or ``inherited`` (the spec did not ask for the difference). A learner key that a
    run kept from a base config written for another learner kind (the ledger's ``sources`` say
    ``inherited``) is listed even where its value equals the baseline's, since it is not a setting chosen
    for this learner. Sweeps recorded before the ledger kept ``sources`` are judged from the run's
    overrides alone."""
    def config(a: str) -> dict[str, Any] | None:
        runs = [r for r in done.get(a, []) if isinstance(r.get("config"), dict)]
        if not runs:
            return None
        flat = flat_config(runs[0]["config"])
        flat.pop(_SEED_KEY, None)
        return flat

    def source(a: str, key: str) -> str | None:
        if sources is not None:
            return (sources.get(a) or {}).get(key)
        runs = done.get(a, [])
        return "arms" if runs and key in runs[0]["overrides"] else None

    out: dict[str, list[dict[str, Any]]] = {}
    ref = config(baseline) if baseline is not None else None
    if ref is None:
        return out
    for a in arms:
        mine = config(a)
        if a == baseline or mine is None:
            continue
        kinds_differ = mine.get("learner.kind") != ref.get("learner.kind")
        rows = []
        for key in sorted(set(mine) | set(ref)):
            value, other = mine.get(key, _MISSING), ref.get(key, _MISSING)
            kept = source(a, key) == "inherited"
            if value == other and not kept:
                continue
            if kept:
                why = "inherited"
            elif _asked(source(a, key)) or _asked(source(baseline, key)) or (
                    sources is None and (source(a, key) or source(baseline, key))):
                why = "asked"
            elif key.startswith("learner.") and kinds_differ:
                why = "kind default"
            else:
                why = "inherited"
            rows.append({"key": key, "value": None if value is _MISSING else value,
                         "baseline_value": None if other is _MISSING else other,
                         "absent": value is _MISSING, "baseline_absent": other is _MISSING, "why": why})
        out[a] = rows
    return out


#: the measures the findings over training test (docs/studies.md, "Findings over training")
OVER_TRAINING: tuple[str, ...] = ("efficiency", "sustainability", "peace")


def _over_training(arms: list[str], done: dict[str, list[dict]], measures: list[str]) -> dict[str, Any]:
    """Arm -> measure -> the dip-and-recovery test over the arm's seeds (docs/studies.md): each seed's
    result (``stats.dip_and_recovery`` on the seed's whole evaluation curve), the count of seeds that show
    it, the median and the Student t interval of the mean of d1, d2 and F - E, and the verdict."""
    out: dict[str, Any] = {}
    for a in arms:
        out[a] = {}
        for m in measures:
            per_seed = []
            for r in done[a]:
                if not r["curve"]:
                    continue
                steps = sorted(r["curve"])
                res = stats.dip_and_recovery(steps, [_float(r["curve"][s].get(m)) for s in steps])
                if res is not None:
                    per_seed.append({"seed": r["seed"], **res})
            entry: dict[str, Any] = {"seeds": per_seed, "judged": len(per_seed),
                                     "shows": int(sum(x["shows"] for x in per_seed))}
            for name, values in (("d1", [x["d1"] for x in per_seed]), ("d2", [x["d2"] for x in per_seed]),
                                 ("f_minus_e", [x["final"] - x["early"] for x in per_seed])):
                arr = np.array(values, dtype=float)
                entry[name] = {"median": float(np.median(arr)) if arr.size else math.nan,
                               "ci": stats.t_interval(arr, CONFIDENCE) if arr.size else (math.nan, math.nan)}
            lo1, lo2, hi_fe = entry["d1"]["ci"][0], entry["d2"]["ci"][0], entry["f_minus_e"]["ci"][1]
            if lo1 > 0 and lo2 > 0 and 2 * entry["shows"] > entry["judged"]:
                verdict = "dip and recovery"
            elif lo1 > 0 and hi_fe < 0:
                verdict = "a dip without recovery"
            else:
                verdict = "no dip claimed"
            entry["verdict"] = verdict if entry["judged"] >= 2 else "too few curves to judge"
            out[a][m] = entry
    return out


def _metric_range(m: str, runs: list[dict]) -> tuple[float, float]:
    """The range a metric cannot leave (envs/metrics.py): equality at most 1 (tag costs can take it below
    0), peace in [0, N], sustainability in [1, episode length]; (-inf, inf) where none is known."""
    config = next((r["config"] for r in runs if isinstance(r.get("config"), dict)), None)
    if m == "equality":
        return (-math.inf, 1.0)
    params = _dig(config, "env.params") if config is not None else _MISSING
    params = params if isinstance(params, dict) else {}
    if m == "peace" and isinstance(params.get("num_agents"), int):
        return (0.0, float(params["num_agents"]))
    if m == "sustainability" and isinstance(params.get("max_cycles"), int):
        return (1.0, float(params["max_cycles"]))
    return (-math.inf, math.inf)


def _clip(ci: Any, bounds: tuple[float, float]) -> tuple[tuple[float, float], bool]:
    """An interval clipped to ``bounds``, and whether it crossed them."""
    low, high = (float(v) for v in ci)
    cut = (math.isfinite(low) and low < bounds[0]) or (math.isfinite(high) and high > bounds[1])
    return (min(max(low, bounds[0]), bounds[1]) if math.isfinite(low) else low,
            max(min(high, bounds[1]), bounds[0]) if math.isfinite(high) else high), cut


def _summarize(data: dict[str, Any], test: str, reps: int, seed: int | None,
               holm_family: str) -> dict[str, Any]:
    runs = data["runs"]
    arms = list(dict.fromkeys(r["arm"] for r in runs))
    by_arm = {a: sorted((r for r in runs if r["arm"] == a), key=lambda r: r["seed"]) for a in arms}
    done = {a: [r for r in by_arm[a] if r["state"] == "done"] for a in arms}
    warns: list[str] = []
    # the metrics, then the behaviour measures some done run records (e.g. waste_removed on cleanup only)
    measures = [*METRICS, *(b for b in BEHAVIOUR
                            if any(math.isfinite(r.get(b, math.nan)) for a in arms for r in done[a]))]
    # a social metric appears only where some run's game declares it (envs.declared_metrics); the return
    # always does, and a summary that predates the declaration counts as declaring every metric
    everyone = [r for a in arms for r in done[a]]
    if everyone:
        measures = [m for m in measures if m == "return_mean" or m not in METRICS
                    or any(r["declared"] is None or m in r["declared"] for r in everyone)]

    # ---- baseline
    baseline = data["baseline"]
    if baseline is None and arms:
        baseline = arms[0]
        if len(arms) > 1:
            warns.append(f"The ledger records no baseline; the first arm, `{baseline}`, is used.")
    elif baseline is not None and baseline not in by_arm:
        warns.append(f"The recorded baseline `{baseline}` has no runs in the ledger; nothing is compared.")

    # ---- per arm
    teams = list(dict.fromkeys(t for a in arms for r in done[a] for t in r["baselines"]))
    arm_info: dict[str, Any] = {}
    not_better: list[dict[str, Any]] = []
    for a in arms:
        states = {s: sum(r["state"] == s for r in by_arm[a]) for s in ("done", "failed", "pending", "running")}
        per_metric = {}
        for m in measures:
            x = np.array([r.get(m, math.nan) for r in done[a]], dtype=float)
            s = stats.summarize(x, reps=reps, seed=seed, confidence=CONFIDENCE)
            bounds = _metric_range(m, done[a])
            clipped = False
            for key in ("mean_ci", "iqm_ci"):
                s[key], cut = _clip(s[key], bounds)
                clipped = clipped or cut
            team_means = {t: _finite_mean([r["baselines"].get(t, {}).get(m, math.nan) for r in done[a]])
                          for t in teams}
            team_means = {t: v for t, v in team_means.items() if math.isfinite(v)}
            best = (max(team_means, key=team_means.__getitem__) if team_means and m in HIGHER_IS_BETTER
                    else None)  # a behaviour measure has no better direction: no strongest team
            entry = {**s, "nan_dropped": int(np.isnan(x).sum()), "range": bounds, "clipped": clipped,
                     "values": x.tolist(), "seeds": [r["seed"] for r in done[a]],
                     "random_mean": _finite_mean([r["random"].get(m, math.nan) for r in done[a]]),
                     "teams": team_means, "best_team": best,
                     "best_team_mean": team_means[best] if best is not None else math.nan,
                     "beats_best_team": None}
            if best is not None and math.isfinite(s["mean"]):  # best is None for a behaviour measure
                entry["beats_best_team"] = bool(s["mean_ci"][0] > entry["best_team_mean"])  # NaN: False
                if not entry["beats_best_team"]:
                    not_better.append(_not_better(a, m, entry))
            per_metric[m] = entry
        arm_info[a] = {"overrides": dict(by_arm[a][0]["overrides"]), "runs": len(by_arm[a]),
                       "done": states["done"], "states": states,
                       "seeds_done": [r["seed"] for r in done[a]], "metrics": per_metric}

    # ---- comparisons with the baseline
    comparisons: dict[str, dict[str, Any]] = {}
    others = [a for a in arms if a != baseline]
    if baseline in by_arm and others:
        for a in others:
            comparisons[a] = {}
            for m in measures:
                xa = np.array([r.get(m, math.nan) for r in done[a]], dtype=float)
                xb = np.array([r.get(m, math.nan) for r in done[baseline]], dtype=float)
                comparisons[a][m] = stats.compare(xa, xb, test, reps=reps, confidence=CONFIDENCE, seed=seed)
        families = ([[(a, m) for a in others] for m in measures] if holm_family == "metric"
                    else [[(a, m) for m in METRICS if m in measures for a in others],
                          [(a, m) for m in measures if m not in HIGHER_IS_BETTER for a in others]])
        families = [f for f in families if f]
        for family in families:
            adjusted = stats.holm([comparisons[a][m]["p_value"] for a, m in family])
            for (a, m), p in zip(family, adjusted):
                comparisons[a][m]["p_holm"] = float(p)

    # ---- curves: mean over seeds at the steps every seed of the arm logged
    curves: dict[str, dict[str, Any]] = {}
    for a in arms:
        with_curve = [r for r in done[a] if r["curve"]]
        if len(with_curve) < len(done[a]):
            missing = len(done[a]) - len(with_curve)
            warns.append(f"Arm `{a}`: {missing} done run(s) have no metrics.jsonl; the learning curves use "
                         f"{len(with_curve)} seed(s).")
        steps = sorted(set.intersection(*(set(r["curve"]) for r in with_curve))) if with_curve else []
        curves[a] = {"seeds": len(with_curve), "env_steps": steps}
        # wall-clock seconds at each step (runs written before metrics.jsonl kept them have none: NaN)
        clock = np.array([[_float(r["curve"][s].get("wall_seconds")) for s in steps] for r in with_curve])
        curves[a]["wall_seconds_per_seed"] = clock.tolist()
        curves[a]["wall_seconds"] = (clock.mean(axis=0).tolist() if clock.size and np.isfinite(clock).all()
                                     else [])
        for m in measures:
            if not steps:
                curves[a][m] = {"mean": [], "ci_low": [], "ci_high": []}
                continue
            values = np.array([[_float(r["curve"][s].get(m)) for s in steps] for r in with_curve])
            mean, low, high = stats.mean_band(values, CONFIDENCE)  # Student t at each step; NaN below 2 seeds
            lo_b, hi_b = _metric_range(m, with_curve)
            low, high = np.clip(low, lo_b, hi_b), np.clip(high, lo_b, hi_b)  # NaN stays NaN
            curves[a][m] = {"mean": mean.tolist(), "ci_low": low.tolist(), "ci_high": high.tolist(),
                            "per_seed": values.tolist(), "seeds": [r["seed"] for r in with_curve]}

    # ---- warnings
    total = len(runs)
    n_done = sum(r["state"] == "done" for r in runs)
    if not total:
        warns.append("The ledger holds no runs: there is nothing to report yet.")
    elif n_done < total:
        counts = {s: sum(r["state"] == s for r in runs) for s in ("failed", "pending", "running")}
        parts = ", ".join(f"{n} {s}" for s, n in counts.items() if n)
        warns.append(f"{total - n_done} of {total} runs are not done ({parts}); every table and figure uses "
                     f"the {n_done} done runs only.")
    for a in arms:
        n = arm_info[a]["done"]
        if n == 0:
            warns.append(f"Arm `{a}` has no done seed (of {arm_info[a]['runs']}): it has no results.")
        elif n == 1:
            warns.append(f"Arm `{a}` has 1 done seed (of {arm_info[a]['runs']}): no interval can be computed "
                         "from one seed (shown as n/a), and it cannot be tested meaningfully.")
        elif n < FEW_SEEDS:
            warns.append(f"Arm `{a}` has {n} done seeds (of {arm_info[a]['runs']}), fewer than {FEW_SEEDS}: "
                         "its intervals are wide and rough, its tests weak.")
    for a in arms:
        for m in (m for m in METRICS if m in measures):  # a behaviour measure a game lacks is simply absent
            k = arm_info[a]["metrics"][m]["nan_dropped"]
            if k:
                why = {"sustainability": " (no agent received a positive reward)",
                       "equality": " (returns differ and sum to ≤ 0)"}.get(m, "")
                warns.append(f"{m}: {k} of {arm_info[a]['done']} done run(s) of arm `{a}` are NaN{why} and "
                             "are left out.")
    seen: dict[tuple[str, str], list[str]] = {}
    for a, per in comparisons.items():
        for m, c in per.items():
            if c.get("warning"):
                seen.setdefault((a, c["warning"]), []).append(m)
    for (a, text), ms in seen.items():
        which = "every metric" if len(ms) == len(measures) else ", ".join(ms)
        warns.append(f"`{a}` vs baseline `{baseline}` ({which}): {text}")
    for r in runs:
        warns.extend(r["problems"])

    failed = [{"run_id": r["run_id"], "arm": r["arm"], "seed": r["seed"], "error": r["error"]}
              for r in runs if r["state"] == "failed"]
    configs = [r["config"] for r in runs if r["config"]]
    games = sorted({str(_dig(c, "env.name")) for c in configs if _dig(c, "env.name") is not _MISSING})
    learners = sorted({str(_dig(c, "learner.kind")) for c in configs
                       if _dig(c, "learner.kind") is not _MISSING})
    spec = data["spec"] or {}
    expect = spec.get("expect") if isinstance(spec.get("expect"), dict) else {}
    axes = _axes(arms, by_arm, done) if arms else {}
    numeric = [k for k, ax in axes.items() if ax["numeric"]]
    along = (numeric[0] if len(axes) == 1 and numeric and list(axes[numeric[0]]["groups"]) == ["all arms"]
             else None)
    against = spec.get("against")
    if isinstance(against, str) and len(arms) == 1:
        findings = _team_findings(measures, arms[0], against, done[arms[0]], arm_info[arms[0]], expect)
        if not any(against in r["baselines"] for r in done[arms[0]]):
            warns.append(f"The spec compares with the `{against}` team, which no done run measured.")
    elif along is not None:
        findings = _axis_findings(along, axes[along], measures, arms, done, arm_info, expect, test, reps, seed)
    elif comparisons:
        findings = _baseline_findings(measures, baseline, comparisons, expect, test)
    else:
        findings = []
    missing = [m for m in expect if m not in measures]
    if missing:
        warns.append(f"The spec expects a direction for {', '.join(missing)}, which no done run records.")
    over_training = (_over_training(arms, done, [m for m in OVER_TRAINING if m in measures])
                     if spec.get("over_training") is True else {})
    differences = _config_differences(arms, done, baseline, data.get("sources"))
    if data.get("plain"):  # plain runs (marl-core compare): no spec asked for anything; a difference is one
        for rows in differences.values():
            for row in rows:
                row["why"] = "differs"
    for a, rows in differences.items():
        inherited = [r["key"] for r in rows if r["why"] == "inherited"]
        if inherited:
            warns.append(f"`{a}` differs from the baseline `{baseline}` in config keys the spec did not ask "
                         f"for (inherited): {', '.join(inherited)}; see \"Config differences\".")
    return {
        "sweep_dir": data["sweep_dir"], "baseline": baseline, "arms": arm_info, "arm_order": arms,
        "comparisons": comparisons, "curves": curves, "axes": axes, "findings": findings,
        "config_differences": differences, "over_training": over_training,
        "findings_along": along, "expect": expect,
        "baseline_teams": teams, "not_better": not_better, "coverage": stats.MEASURED_COVERAGE,
        "interval_methods": stats.INTERVAL_METHODS,
        "warnings": warns, "failed": failed, "runs_total": total, "runs_done": n_done,
        "test": test, "reps": reps, "seed": seed, "confidence": CONFIDENCE, "holm_family": holm_family,
        "metrics": [m for m in METRICS if m in measures], "measures": measures, "games": games, "learners": learners, "spec_seeds": spec.get("seeds"),
        "smoke_test": spec.get("smoke_test") is True,
        "runs": [{k: v for k, v in r.items() if k not in ("config", "curve", "problems")} for r in runs],
    }


def _observed(low: float, high: float, p: float) -> str | None:
    """The direction the data show: ``increases`` / ``decreases`` when the corrected p is below
    ``stats.ALPHA`` and the interval lies on that side of 0, ``no_change`` when it is not, None without
    data."""
    if not math.isfinite(p):
        return None
    if p < stats.ALPHA and low > 0:
        return "increases"
    if p < stats.ALPHA and high < 0:
        return "decreases"
    return "no_change"


def _verdict(expected: str | None, observed: str | None) -> str | None:
    if expected is None:
        return None
    if observed is None:
        return "untested"
    if expected == observed:
        return "agrees"
    return "disagrees"


_SAYS = {"increases": "rises", "decreases": "falls", "no_change": "shows no clear change"}
_VERDICT_TEXT = {"agrees": "agree", "disagrees": "do not agree", "untested": "cannot test it (too few runs)"}


def _verdict_clause(expected: str | None, verdict: str | None) -> str:
    if expected is None:
        return ""
    extra = (" (no change detected is not proof of none)" if expected == "no_change" and verdict == "agrees"
             else "")
    return f" Expected: {expected.replace('_', ' ')}; the data {_VERDICT_TEXT[verdict]}{extra}."


def _rule_clause(ci: Any, p_holm: float, observed: str | None, test_name: str) -> str:
    """Where the interval and the test point different ways, say which one decided (the decision rule:
    the Holm-corrected p below ``stats.ALPHA`` and the interval on one side of 0)."""
    low, high = (float(v) for v in ci)
    if observed != "no_change" or not (math.isfinite(low) and math.isfinite(high)):
        return ""
    if low > 0 or high < 0:
        return (f" The interval excludes 0, but the decision rule also needs the {test_name} test's "
                f"Holm-corrected p below {stats.ALPHA}, and it is not: no clear change is claimed.")
    if p_holm < stats.ALPHA:
        return (f" The {test_name} test's corrected p is below {stats.ALPHA}, but the interval includes 0: "
                "no clear change is claimed.")
    return ""


def _axis_findings(key: str, axis: dict[str, Any], measures: list[str], arms: list[str],
                   done: dict[str, list[dict]], arm_info: dict[str, Any], expect: dict[str, str],
                   test: str, reps: int, seed: int | None) -> list[dict[str, Any]]:
    """One finding per measure along the numeric axis ``key``: Spearman's trend over every done run
    (one test per measure: no correction, see the findings' family rule) and the difference between the
    arms at the axis's two ends."""
    members = axis["groups"]["all arms"]
    lo_arm, hi_arm = members[0], members[-1]
    xs = [float(axis["values"][a]) for a in members for _ in done[a]]
    trends = {m: stats.trend(xs, [r.get(m, math.nan) for a in members for r in done[a]]) for m in measures}
    out = []
    for m in measures:
        t = trends[m]
        hi = np.array([r.get(m, math.nan) for r in done[hi_arm]], dtype=float)
        lo = np.array([r.get(m, math.nan) for r in done[lo_arm]], dtype=float)
        c = stats.compare(hi, lo, test, reps=reps, confidence=CONFIDENCE, seed=seed)
        p_holm = float(t["p_value"])  # one test per measure: its own family, nothing to correct
        rho = t["rho"]
        observed = None if not math.isfinite(p_holm) else (
            "no_change" if p_holm >= stats.ALPHA else "increases" if rho > 0 else "decreases")
        expected = expect.get(m)
        verdict = _verdict(expected, observed)
        says = "cannot be tested (too few runs or no spread)" if observed is None else _SAYS[observed]
        mean = {a: _num(arm_info[a]["metrics"][m]["mean"]) for a in (lo_arm, hi_arm)}
        sentence = (f"{m} {says} as {key} rises: {mean[lo_arm]} at {key} = {_short(axis['values'][lo_arm])} "
                    f"and {mean[hi_arm]} at {_short(axis['values'][hi_arm])} (difference "
                    f"{_with_ci(c['difference'], c['difference_ci'])}, {CONFIDENCE:.0%} Welch t); Spearman "
                    f"rho = {_num(rho, 2)} over {t['n']} runs, p (one test for this measure) "
                    f"{_p_is(p_holm)}.{_verdict_clause(expected, verdict)}")
        out.append({"measure": m, "along": key, "arm": hi_arm, "against": lo_arm, "rho": rho, "n": t["n"],
                    "p_value": t["p_value"], "p_holm": p_holm, "difference": c["difference"],
                    "difference_ci": c["difference_ci"], "observed": observed, "expected": expected,
                    "verdict": verdict, "sentence": sentence})
    return out


def _team_findings(measures: list[str], arm: str, team: str, done: list[dict], arm_info: dict[str, Any],
                   expect: dict[str, str]) -> list[dict[str, Any]]:
    """One finding per measure: the arm against the non-learning team ``team``, paired within each run
    (the same evaluation episodes), one test per measure."""
    pairs = {m: stats.paired([r.get(m, math.nan) for r in done],
                             [r["baselines"].get(team, {}).get(m, math.nan) for r in done], CONFIDENCE)
             for m in measures}
    out = []
    for m in measures:
        c = pairs[m]
        p_holm = float(c["p_value"])  # one test per measure: its own family
        if not any(m in r["baselines"].get(team, {}) and math.isfinite(r["baselines"][team][m]) for r in done):
            continue  # the team does not record this measure (e.g. waste removed by a harvest team)
        observed = _observed(*c["difference_ci"], p_holm)
        expected = expect.get(m)
        verdict = _verdict(expected, observed)
        says = {"increases": "is higher than", "decreases": "is lower than",
                "no_change": "shows no clear difference from", None: "cannot be compared (too few runs) with"}
        sentence = (f"{m} of `{arm}` {says[observed]} the `{team}` team's: "
                    f"{_num(arm_info['metrics'][m]['mean'])} "
                    f"against {_num(arm_info['metrics'][m]['teams'].get(team, math.nan))}, paired difference "
                    f"{_with_ci(c['difference'], c['difference_ci'])} ({CONFIDENCE:.0%} t over {c['n']} runs), "
                    f"p (paired t, one test for this measure) {_p_is(p_holm)}."
                    f"{_rule_clause(c['difference_ci'], p_holm, observed, 'paired t')}"
                    f"{_verdict_clause(expected, verdict)}")
        out.append({"measure": m, "along": None, "arm": arm, "against": team, "p_holm": p_holm,
                    "difference": c["difference"], "difference_ci": c["difference_ci"], "observed": observed,
                    "expected": expected, "verdict": verdict, "sentence": sentence})
    return out


def _baseline_findings(measures: list[str], baseline: str, comparisons: dict[str, dict[str, Any]],
                       expect: dict[str, str], test: str) -> list[dict[str, Any]]:
    """One finding per arm and measure against the baseline, from Table 2's tests, Holm-corrected within
    each measure over the arms (the findings' one family rule, whatever Table 2's ``holm_family``)."""
    adjusted: dict[tuple[str, str], float] = {}
    size: dict[str, int] = {}
    for m in measures:
        tested = [a for a in comparisons if math.isfinite(comparisons[a][m]["p_value"])]
        size[m] = len(tested)
        if tested:
            adjusted.update(zip(((a, m) for a in tested),
                                stats.holm([comparisons[a][m]["p_value"] for a in tested])))
    out = []
    for m in measures:
        for a, per in comparisons.items():
            c = per[m]
            p_holm = float(adjusted.get((a, m), math.nan))
            observed = _observed(*c["difference_ci"], p_holm)
            expected = expect.get(m)
            verdict = _verdict(expected, observed)
            says = "cannot be tested (too few runs)" if observed is None else _SAYS[observed]
            sentence = (f"{m} {says} in `{a}` against the baseline `{baseline}`: difference "
                        f"{_with_ci(c['difference'], c['difference_ci'])} ({CONFIDENCE:.0%} Welch t), "
                        f"p ({_TEST_NAMES[test]}, Holm over {size[m]} arm(s)) {_p_is(p_holm)}."
                        f"{_rule_clause(c['difference_ci'], p_holm, observed, _TEST_NAMES[test])}"
                        f"{_verdict_clause(expected, verdict)}")
            out.append({"measure": m, "along": None, "arm": a, "against": baseline, "p_holm": p_holm,
                        "difference": c["difference"], "difference_ci": c["difference_ci"],
                        "observed": observed, "expected": expected, "verdict": verdict, "sentence": sentence})
    return out


def report_summary(sweep_dir: str | os.PathLike, test: str = "mannwhitney", reps: int = 2000,
                   seed: int | None = 0, holm_family: str = "metric") -> dict[str, Any]:
    """Every number of the report of the sweep in ``sweep_dir``, as a dict.

    Keys: ``baseline``, ``arm_order`` (ledger order), ``arms`` (arm -> ``overrides``, ``runs``, ``done``,
    ``states``, ``seeds_done`` and ``metrics``: metric -> :func:`~marl_core.ablation.stats.summarize`'s
    ``n, mean, mean_ci, iqm, iqm_ci, std`` plus ``nan_dropped``, ``random_mean``, ``teams`` (non-learning
    team -> its mean over the arm's done runs), ``best_team`` and ``best_team_mean`` (the strongest team,
    or None / NaN without any) and ``beats_best_team`` (whether the lower end of ``mean_ci`` is above
    ``best_team_mean``; None when there is no team or no mean)), ``baseline_teams`` (every team seen, in
    order), ``not_better`` (one record per arm and metric that does not beat its strongest team: ``arm``,
    ``metric``, ``mean``, ``mean_ci``, ``n``, ``team``, ``team_mean``, ``reason`` (``"reaches_below"``,
    ``"below"`` or ``"no_interval"``) and the report's ``sentence``), ``coverage`` (``stats.MEASURED_COVERAGE``),
    ``interval_methods`` (``stats.INTERVAL_METHODS``), ``comparisons``
    (arm -> metric -> :func:`~marl_core.ablation.stats.compare`'s dict plus ``p_holm``; empty with one
    arm), ``curves`` (arm -> ``env_steps``, ``seeds`` and per metric ``mean``, ``ci_low``, ``ci_high``),
    ``axes`` (varying override key -> ``values`` per arm, ``numeric``, ``groups``), ``warnings`` (markdown
    lines), ``failed`` (run_id, arm, seed, last line of the error), ``runs`` (one flat record per ledger
    row), ``smoke_test`` (True when the sweep's spec says ``smoke_test: true``), and the settings
    (``test``, ``reps``, ``seed``, ``confidence``, ``holm_family``).

    ``stats.summarize(x)`` and ``stats.compare(arm, baseline, test)`` on an arm's done runs (ordered by seed)
    give the same numbers; every interval is a formula (Student t, trimmed-mean t, Welch t), so ``reps`` and
    ``seed`` are checked but change nothing.

    Raises:
        RunDirError: ``sweep_dir`` has no ledger.sqlite.
        ConfigError: ``test``, ``reps``, ``seed`` or ``holm_family`` out of range.
    """
    _check_args(test, reps, seed, holm_family)
    return _summarize(_load(sweep_dir), test, int(reps), seed, holm_family)


# ================================================================================== writing
def _write_text(path: Path, text: str) -> None:
    """Write ``text`` atomically (a temp file beside ``path``, then a rename), with the usual file mode."""
    atomic_write(path, lambda f: f.write(text), newline="")


def _cell(value: Any) -> Any:
    if value is None:
        return ""
    if isinstance(value, float):
        return "" if math.isnan(value) else repr(value)
    if isinstance(value, (dict, list, tuple)):
        return json.dumps(value, sort_keys=True)
    return value


def _runs_csv(summary: dict[str, Any]) -> str:
    runs = summary["runs"]
    keys = list(dict.fromkeys(k for r in runs for k in r["overrides"]))
    agents = sorted({a for r in runs for a in r["returns"]})
    teams = list(dict.fromkeys(t for r in runs for t in r["baselines"]))
    measures = summary["measures"]
    header = (["run_id", "arm", "seed", "state", "duration", *keys, "env_steps", "episodes", *measures,
               *(f"return/{a}" for a in agents), *(f"random/{m}" for m in METRICS),
               *(f"baseline/{t}/{m}" for t in teams for m in METRICS), "error"])
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    for r in runs:
        w.writerow([_cell(v) for v in (
            r["run_id"], r["arm"], r["seed"], r["state"], r["duration"],
            *(r["overrides"].get(k) for k in keys), r["env_steps"], r["episodes"], *(r.get(m) for m in measures),
            *(r["returns"].get(a) for a in agents), *(r["random"][m] for m in METRICS),
            *(r["baselines"].get(t, {}).get(m) for t in teams for m in METRICS), r["error"])])
    return buf.getvalue()


def _num(x: Any, digits: int = 4) -> str:
    x = _float(x)
    return "n/a" if math.isnan(x) else f"{x:.{digits}g}"


def _with_ci(x: Any, ci: tuple[float, float]) -> str:
    if math.isnan(_float(x)):
        return "n/a"
    return f"{_num(x)} [{_num(ci[0])}, {_num(ci[1])}]"


def _pval(p: Any) -> str:
    p = _float(p)
    if math.isnan(p):
        return "n/a"
    return "< 0.001" if p < 0.001 else f"{p:.3g}"


def _p_is(p: Any) -> str:
    """``= 0.03``, ``< 0.001`` or ``= n/a``: a p-value after its label in a sentence."""
    text = _pval(p)
    return text if text.startswith("<") else f"= {text}"


def _md(text: Any) -> str:
    """Text for a markdown table cell."""
    return str(text).replace("|", "\\|").replace("\n", " ")


def _test_sentence(test: str) -> str:
    if test == "mannwhitney":
        return ("Mann–Whitney U test, two-sided (the default): a rank test that assumes no normal "
                "distribution of the per-seed scores, which a handful of seeds cannot check. Its "
                "p-value is exact with at most 8 seeds on a side and no ties, else a normal approximation.")
    return ("Welch's t-test (unequal variances), two-sided, as asked (`test=\"welch\"`): it compares means "
            "and rests on roughly normal per-seed scores, which a handful of seeds cannot check; the "
            "default, Mann–Whitney U, assumes no normality.")


_COVERAGE_ROWS = (("mean", "mean of an arm (Table 1)"), ("iqm", "IQM of an arm (Table 1, bar figures)"),
                  ("difference", "difference of means (Table 2)"), ("curve", "learning-curve band"))


def _coverage_lines(coverage: dict[str, dict[int, float]], methods: dict[str, str]) -> list[str]:
    """The notes' coverage table and what it was measured on (indented under the bullet)."""
    ns = sorted(coverage["mean"])
    pad = "  "
    out = [pad + "| interval | method | " + " | ".join(f"{n} seeds" for n in ns) + " |",
           pad + "|---|---|" + "---|" * len(ns)]
    for kind, label in _COVERAGE_ROWS:
        cells = " | ".join(f"{coverage[kind][n]:.1%}" for n in ns)
        out.append(f"{pad}| {label} | {methods[kind]} | {cells} |")
    boot = coverage.get("iqm_percentile_bootstrap")
    error = 200.0 * math.sqrt(0.95 * 0.05 / stats.COVERAGE_TRIALS)  # 2 binomial sd, in percentage points
    out.append("")
    out.append(
        f"{pad}Measured by `marl_core.ablation.stats.coverage_table` ({stats.COVERAGE_TRIALS} simulated "
        f"data sets per cell, seed {stats.COVERAGE_SEED}; simulation error about ±{error:.1f} points): scores "
        "N(0, 1), whose IQM equals its mean because the normal distribution is symmetric; the difference with "
        "unequal spreads (standard deviations 2 and 1, what Welch's interval is for); the curves are random "
        "walks and the band's coverage is pointwise (the whole curve at once is covered less often). "
        "Scores that are skewed or have outliers can be covered less often.")
    if boot:
        out.append("")
        out.append(
            f"{pad}For comparison, a {methods['iqm_percentile_bootstrap']} (resampling one arm's seeds) covers "
            "the IQM only " + ", ".join(f"{boot[n]:.1%} at {n} seeds" for n in ns)
            + f" ({stats.COVERAGE_BOOTSTRAP_TRIALS} data sets each), so it is not used.")
    out.append("")
    return out


def _team_cell(s: dict[str, Any], team: str) -> str:
    """A non-learning team's mean for Table 1, bold when it is the arm's strongest team."""
    value = s["teams"].get(team, math.nan)
    text = _num(value)
    return f"**{text}**" if team == s["best_team"] else text


def _findings_lines(summary: dict[str, Any]) -> list[str]:
    """The Findings section: one sentence per measure (and arm), the expected ones first."""
    found = summary["findings"]
    if not found:
        return ["No finding: the sweep has neither a numeric axis nor an arm to compare with the baseline.", ""]
    along = summary["findings_along"]
    against = found[0]["against"]
    if along:
        head = (f"Along `{along}`: each measure's trend over every done run (Spearman's rank correlation), "
                "with the difference between the arms at the two ends of the axis.")
    elif against == summary["baseline"]:
        head = f"Each arm against the baseline `{against}` (Table 2's tests)."
    else:
        head = (f"The arm against the non-learning `{against}` team, paired within each run (both play the "
                "same evaluation episodes).")
    if summary["expect"]:
        head += (" The spec states an expected direction for " + ", ".join(f"{m} ({d.replace('_', ' ')})"
                                                                     for m, d in summary["expect"].items())
                 + f"; a direction counts as shown when its corrected p is below {stats.ALPHA}.")
    head += (f" One decision rule for every finding: a measure rises (falls) when its Holm-corrected p is "
             f"below {stats.ALPHA} and its interval lies above (below) 0; anything else is no clear change. "
             "Holm's correction runs within each measure, over the tests this section makes on it (the arms "
             "against the baseline; one test along an axis or against a team, so none there); measures are "
             "different questions and are not corrected against each other.")
    lines = [head, ""]
    ordered = [f for f in found if f["expected"]] + [f for f in found if not f["expected"]]
    lines.extend(f"- {f['sentence']}" for f in ordered)
    lines.append("")
    return lines


_WHY = {"asked": "asked for by the spec", "kind default": "the arm's learner kind's default",
        "inherited": "**inherited**: the spec did not ask for it"}


def _differences_lines(summary: dict[str, Any]) -> list[str]:
    """The report's "Config differences" section."""
    diffs, base = summary.get("config_differences") or {}, summary["baseline"]
    if not diffs:
        return []
    L = ["## Config differences from the baseline arm\n",
         f"Every resolved config key (the seed aside) in which an arm's runs differ from the baseline "
         f"`{_md(base)}`'s, and why: {'; '.join(f'*{k}*: {v}' for k, v in _WHY.items())}. A learner key "
         "kept from a base config written for another learner kind is listed as inherited even where it "
         "equals the baseline's.\n"]
    n_inherited = sum(r["why"] == "inherited" for rows in diffs.values() for r in rows)
    L.append(f"Inherited differences: **{n_inherited}**" + (" (no confound from the config)." if not
                                                             n_inherited else "; read those arms with care.")
             + "\n")
    L.append("| arm | key | this arm | baseline | why |")
    L.append("|---|---|---|---|---|")
    for a, rows in diffs.items():
        for r in rows:
            mine = "(absent)" if r["absent"] else f"`{_md(_short(r['value']))}`"
            theirs = "(absent)" if r["baseline_absent"] else f"`{_md(_short(r['baseline_value']))}`"
            L.append(f"| `{_md(a)}` | `{r['key']}` | {mine} | {theirs} | {r['why']} |")
    L.append("")
    return L


def _over_training_lines(summary: dict[str, Any]) -> list[str]:
    """The report's "Findings over training" section (when the spec asks for it)."""
    found = summary.get("over_training") or {}
    if not found:
        return []
    pct = f"{summary['confidence']:.0%}"
    L = ["## Findings over training\n",
         "The dip-and-recovery test of docs/studies.md, \"Findings over training\", on each seed's whole "
         "evaluation curve: E = mean of the evaluations in the first 15% of env steps, F = in the last 15%, "
         "M = the lowest 3-point running mean between; d1 = E − M (the dip), d2 = F − M (the recovery). A "
         "seed shows it when both exceed 3× the noise of a 3-point mean (σ₃, from successive differences; "
         "a pure-noise curve shows it in 2.6% of seeds). The arm finds dip and recovery when the "
         f"{pct} Student t intervals of the mean d1 and d2 both lie above 0 and most seeds show it; a dip "
         "without recovery when d1's lies above 0 and F − E's below 0. Per-seed curves are drawn thin under "
         "the mean in the curve figures.\n",
         f"| arm | measure | seeds showing | d1 median [{pct} CI of mean] | d2 median [{pct} CI] | "
         f"F − E median [{pct} CI] | verdict |",
         "|---|---|---|---|---|---|---|"]
    for a, per in found.items():
        for m, e in per.items():
            cells = [_with_ci(e[k]["median"], e[k]["ci"]) for k in ("d1", "d2", "f_minus_e")]
            L.append(f"| `{_md(a)}` | {m} | {e['shows']} of {e['judged']} | " + " | ".join(cells)
                     + f" | {e['verdict']} |")
    L.append("")
    L.append("Per seed (E, M at its env step, F):\n")
    L.append("| arm | measure | seed | E | M (at step) | F | σ₃ | shows |")
    L.append("|---|---|---|---|---|---|---|---|")
    for a, per in found.items():
        for m, e in per.items():
            for x in e["seeds"]:
                L.append(f"| `{_md(a)}` | {m} | {x['seed']} | {_num(x['early'])} | {_num(x['dip'])} "
                         f"({int(x['at']):,}) | {_num(x['final'])} | {_num(x['sigma3'])} | "
                         f"{'yes' if x['shows'] else 'no'} |")
    L.append("")
    return L


def _markdown(summary: dict[str, Any], figures: dict[str, list[str]], drawn: bool = True) -> str:
    arms, info, base = summary["arm_order"], summary["arms"], summary["baseline"]
    test_name = _TEST_NAMES[summary["test"]]
    pct = f"{summary['confidence']:.0%}"
    n_others = len([a for a in arms if a != base])
    family = (f"one family per metric: that metric's {n_others} arm-vs-baseline comparison(s); the "
              f"{len(summary['metrics'])} metrics are not corrected against each other (they are different questions, "
              "and return_mean and efficiency are nearly the same number)"
              if summary["holm_family"] == "metric" else
              f"one family of every arm × metric comparison ({n_others} × {len(summary['metrics'])} = "
              f"{n_others * len(summary['metrics'])})" + (", and one of every arm × behaviour measure comparison"
                                               if len(summary["measures"]) > len(summary['metrics']) else ""))
    clipped = {f"`{_md(a)}` {m}" for a in arms for m, e in info[a]["metrics"].items() if e.get("clipped")}
    L: list[str] = []
    add = L.append
    add(f"# {summary.get('title', 'Sweep report')}\n")
    if summary["smoke_test"]:
        add("> **Smoke test.** This sweep's spec says `smoke_test: true`: its runs are too short to learn, so "
            "this report shows that training, the ledger and the report work end to end. Its numbers say "
            "nothing about the arms; do not read them as results.\n")
    add(f"- **{summary.get('directory_label', 'Sweep directory')}:** `{summary['sweep_dir']}`")
    if summary["games"] or summary["learners"]:
        add(f"- **Game(s):** {', '.join(summary['games']) or 'n/a'}; **learner(s):** "
            f"{', '.join(summary['learners']) or 'n/a'}")
    add(f"- **Arms:** {len(arms)}; **baseline:** " + (f"`{base}`" if base is not None else "none"))
    seeds = ", ".join(f"`{a}` {info[a]['done']}/{info[a]['runs']}" for a in arms)
    add(f"- **Seeds per arm (done/total):** {seeds}")
    if summary["spec_seeds"] is not None:
        add(f"- **Seeds in the spec:** {summary['spec_seeds']}")
    states = {st: sum(r["state"] == st for r in summary["runs"]) for st in ("failed", "pending", "running")}
    rest = ", ".join(f"{n} {st}" for st, n in states.items() if n)
    add(f"- **Runs:** {summary['runs_done']} of {summary['runs_total']} done" + (f" ({rest})" if rest else ""))
    add("")

    add("## Findings\n")
    L.extend(_findings_lines(summary))
    L.extend(_over_training_lines(summary))
    add("## Notes on method\n")
    add(f"- **Test:** {_test_sentence(summary['test'])}")
    add("- **IQM:** interquartile mean (Agarwal et al. 2021), the mean of the middle 50% of seeds "
        "(floor(n/4) cut at each end; equal to the mean below 4 seeds); less swayed by one odd seed than the "
        "mean.")
    add(f"- **Intervals:** {pct}, each from a formula (nothing is resampled): the mean of an arm has the "
        "Student t interval, mean ± t(n − 1)·s/√n; the IQM has the trimmed-mean t interval of Tukey and "
        "McLaughlin (the IQM's 25% cut at each end, Yuen's winsorised standard error, h − 1 degrees of "
        "freedom for the h seeds kept); the difference of two arms' means has the Welch t interval "
        "(Welch–Satterthwaite degrees of freedom); a learning-curve band is the Student t interval of the "
        "mean at each step. An interval needs 2 seeds (n/a with one). Intervals of a metric with a known "
        "range (equality at most 1, peace in [0, N], sustainability in [1, episode length]) are clipped to "
        "it" + (f"; clipped here: {', '.join(sorted(clipped))}" if clipped else "") + ".")
    add(f"- **Measured coverage** of these {pct} intervals, i.e. how often they contain the true value, "
        "by simulation on normal data:\n")
    L.extend(_coverage_lines(summary["coverage"], summary["interval_methods"]))
    add(f"- **Multiple comparisons:** Holm's step-down correction, {family}.")
    add("")

    add("## Warnings\n")
    if summary["warnings"]:
        L.extend(f"- {w}" for w in summary["warnings"])
    else:
        add("None.")
    add("")
    add("## Failed runs\n")
    if summary["failed"]:
        add("| arm | seed | run id | error (last line) |")
        add("|---|---|---|---|")
        for f in summary["failed"]:
            add(f"| `{_md(f['arm'])}` | {f['seed']} | `{f['run_id']}` | {_md(f['error'] or 'no message')} |")
    else:
        add("None.")
    add("")
    L.extend(_differences_lines(summary))

    teams = summary["baseline_teams"]
    add("## Table 1: results per arm\n")
    add(f"Final evaluation of each done seed (exploration off). Mean over seeds with its {pct} Student t "
        f"interval, IQM with its {pct} trimmed-mean t interval; *n* = seeds used (NaN values left out)"
        + (f"; {', '.join(f'*{_md(t)}*' for t in teams)} = mean of that non-learning team over the arm's "
           "runs (measured in each run beside the learned team), the strongest in bold" if teams else
           "; no run records a non-learning team") + ".\n")
    behaviour = [m for m in summary["measures"] if m not in METRICS]
    for m in summary["measures"]:
        if m == (behaviour or [None])[0]:
            add("### Behaviour\n")
            add("What the agents did, per agent per episode (the mean over agents), beside the metrics: these "
                "have no better direction, so no arm is judged better or worse on them.\n")
        add(f"### {m}\n")
        add(f"{_DESCRIPTIONS[m]}.\n")
        add(f"| arm | n | mean [{pct} CI, Student t] | IQM [{pct} CI, trimmed t] | std |"
            + "".join(f" {_md(t)} |" for t in teams))
        add("|---|---|---|---|---|" + "---|" * len(teams))
        for a in arms:
            s = info[a]["metrics"][m]
            label = f"`{_md(a)}`" + (" (baseline)" if a == base else "")
            n = f"{s['n']}" + (f" ({s['nan_dropped']} NaN)" if s["nan_dropped"] else "")
            cells = "".join(f" {_team_cell(s, t)} |" for t in teams)
            add(f"| {label} | {n} | {_with_ci(s['mean'], s['mean_ci'])} | {_with_ci(s['iqm'], s['iqm_ci'])} "
                f"| {_num(s['std'])} |{cells}")
        add("")

    add("## Against the non-learning teams\n")
    if not teams:
        add("No run records a non-learning team (its summary.json has neither `baselines` nor `random`), so "
            "there is nothing to compare with.\n")
    else:
        add(f"Every metric here is higher-is-better. An arm counts as better than the non-learning teams on "
            f"a metric only when the lower end of its {pct} Student t interval of the mean (Table 1) is above "
            "the mean of the strongest team for that arm and metric (bold in Table 1).\n")
        if summary["not_better"]:
            add("Not better than the strongest non-learning team:\n")
            L.extend(f"- {d['sentence']}" for d in summary["not_better"])
            add("")
            add("Every other arm and metric with results is better than its strongest non-learning team.\n")
        else:
            add("Every arm with results is better than its strongest non-learning team on every metric.\n")

    add("## Table 2: each arm against the baseline\n")
    if not summary["comparisons"]:
        why = ("the ledger holds no runs" if not arms else "the sweep has one arm" if len(arms) == 1
               else f"the baseline `{base}` is not an arm of the ledger")
        add(f"No comparison table: {why}, so there is nothing to compare.\n")
    else:
        holm_label = "per metric" if summary["holm_family"] == "metric" else "all comparisons"
        holm_text = ("within each metric, over its arms" if summary["holm_family"] == "metric"
                     else "over every arm × metric comparison together")
        add(f"Difference = mean(arm) − mean(baseline `{base}`) with its {pct} Welch t interval; p = "
            f"{test_name}, two-sided; p (Holm) = Holm-adjusted {holm_text}; P(arm > baseline) = the "
            "probability that a random seed of the arm beats a random seed of the baseline (ties count "
            "half; 0.5 = no tendency). Every metric here is higher-is-better; a behaviour measure (the "
            "last tables, if any) has no better direction: P(arm > baseline) there is only a direction.\n")
        for m in summary["measures"]:
            add(f"### {m}\n")
            add(f"| arm | n arm / base | difference [{pct} CI, Welch t] | p ({test_name}) | p (Holm, {holm_label}) "
                "| P(arm > baseline) |")
            add("|---|---|---|---|---|---|")
            for a, per in summary["comparisons"].items():
                c = per[m]
                add(f"| `{_md(a)}` | {c['n_arm']} / {c['n_baseline']} | "
                    f"{_with_ci(c['difference'], c['difference_ci'])} | {_pval(c['p_value'])} | "
                    f"{_pval(c['p_holm'])} | {_num(c['prob_improvement'], 3)} |")
            add("")

    add("## Figures\n")
    if not drawn:
        add("Figures were not drawn (`figures=False`).\n")
    elif not any(figures.values()):
        add("No figures: no arm has a done run.\n")
    titles = {"curve": f"Learning curves (mean over seeds, {pct} Student t band at each step; random team "
                       "dashed)",
              "time": "Learning curves against wall-clock minutes (each seed thin, the mean thick)",
              "bars": f"IQM per arm with its {pct} trimmed-mean t interval (baseline hatched)",
              "axis": f"Metrics against numeric override keys (mean with its {pct} Student t interval)"}
    for kind, names in figures.items():
        if not names:
            continue
        add(f"### {titles[kind]}\n")
        L.extend(f"- [{Path(n).stem}]({n})" for n in names)
        add("")
    numeric = [k for k, ax in summary["axes"].items() if ax["numeric"]]
    if drawn and not numeric:
        add("No override key is numeric across arms, so there are no axis figures.\n")

    add("## Caution\n")
    add("These agents are simulated learners, not people. The findings are about these games, these "
        "algorithms and these settings, measured over the seeds above; on their own they are no basis for "
        "real-world policy or for claims about human behaviour.")
    return "\n".join(L) + "\n"


# ================================================================================== figures
def _matplotlib() -> tuple[Any, Any]:
    """The Figure class and the Agg canvas (no pyplot: no global backend or open-figure state)."""
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:
        raise MissingExtraError(f"the report's figures need matplotlib: {command('pip')} install matplotlib") \
            from None
    return Figure, FigureCanvasAgg


def _colours(n: int) -> list[Any]:
    from matplotlib import colormaps

    cmap = colormaps["tab10" if n <= 10 else "tab20"]
    return [cmap(i % cmap.N) for i in range(n)]


def _file_part(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "_", text).strip("_") or "key"


def _save(fig: Any, path: Path) -> None:
    fig.savefig(path, dpi=DPI, bbox_inches="tight")  # tight: the legend beside the axes stays in


def _legend(ax: Any, **kwargs: Any) -> None:
    """The legend beside the axes, where it never covers a line, a band or a bar."""
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False, **kwargs)


def _curve_axes(summary: dict[str, Any], keep: Any) -> tuple[Any, Any, list[str]] | None:
    """A new figure and axes for a curve figure and the arms whose curve ``keep`` accepts (None: none)."""
    arms = [a for a in summary["arm_order"] if keep(summary["curves"][a])]
    if not arms:
        return None
    Figure, Canvas = _matplotlib()
    fig = Figure(figsize=(7.5, 4.5))
    Canvas(fig)
    return fig, fig.add_subplot(), arms


def _finish_curve(fig: Any, ax: Any, m: str, title: str, path: Path) -> bool:
    ax.set_ylabel(m)
    ax.set_title(title, fontsize=10)
    ax.grid(alpha=0.3)
    _legend(ax)
    _save(fig, path)
    return True


def _curve_figure(summary: dict[str, Any], m: str, path: Path, colours: dict[str, Any]) -> bool:
    curves, base, info = summary["curves"], summary["baseline"], summary["arms"]
    made = _curve_axes(summary, lambda c: c["env_steps"])
    if made is None:
        return False
    fig, ax, arms = made
    for a in arms:
        c = curves[a]
        steps = np.asarray(c["env_steps"], dtype=float)
        lw = 2.4 if a == base else 1.6
        for row in c[m].get("per_seed", []):  # each seed, thin, under the mean
            ax.plot(steps, row, color=colours[a], lw=0.6, alpha=0.35)
        ax.plot(steps, c[m]["mean"], color=colours[a], lw=lw,
                label=f"{a} (baseline)" if a == base else a)
        ax.fill_between(steps, c[m]["ci_low"], c[m]["ci_high"], color=colours[a], alpha=0.18, lw=0)
    randoms = {a: info[a]["metrics"][m]["random_mean"] for a in arms}
    finite = {a: r for a, r in randoms.items() if math.isfinite(r)}
    if finite:
        values = list(finite.values())
        if max(values) - min(values) <= 1e-9 * max(1.0, max(abs(v) for v in values)):
            ax.axhline(values[0], color="0.35", ls="--", lw=1.2, label="random team")
        else:
            for i, (a, r) in enumerate(finite.items()):
                ax.axhline(r, color=colours[a], ls="--", lw=1.0,
                           label="random team (per arm, dashed)" if i == 0 else None)
    ax.set_xlabel("updates" if summary.get("learners") == ["lola"] else "environment steps")
    return _finish_curve(fig, ax, m, f"{m} during training: each seed (thin), mean over seeds, "
                         f"{summary['confidence']:.0%} Student t band", path)


def _time_figure(summary: dict[str, Any], m: str, path: Path, colours: dict[str, Any]) -> bool:
    """The learning curve of ``m`` against wall-clock minutes: each seed thin, the arm's mean (mean time,
    mean value at each evaluation step) thick; arms whose runs kept no times are left out."""
    curves, base = summary["curves"], summary["baseline"]
    made = _curve_axes(summary, lambda c: c["env_steps"] and c.get("wall_seconds"))
    if made is None:
        return False
    fig, ax, arms = made
    for a in arms:
        c = curves[a]
        for clock, row in zip(c["wall_seconds_per_seed"], c[m].get("per_seed", [])):
            ax.plot(np.asarray(clock) / 60.0, row, color=colours[a], lw=0.6, alpha=0.35)
        ax.plot(np.asarray(c["wall_seconds"]) / 60.0, c[m]["mean"], color=colours[a],
                lw=2.4 if a == base else 1.6, label=f"{a} (baseline)" if a == base else a)
    ax.set_xlabel("wall-clock minutes (one run per core, as the sweep ran)")
    return _finish_curve(fig, ax, m, f"{m} against wall-clock time: each seed (thin), mean over seeds", path)


def _bars_figure(summary: dict[str, Any], m: str, path: Path, colours: dict[str, Any]) -> bool:
    Figure, Canvas = _matplotlib()
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    arms, info, base = summary["arm_order"], summary["arms"], summary["baseline"]
    if not any(math.isfinite(info[a]["metrics"][m]["iqm"]) for a in arms):
        return False
    fig = Figure(figsize=(max(5.0, 1.0 + 0.9 * len(arms)), 4.5))
    Canvas(fig)
    ax = fig.add_subplot()
    x = np.arange(len(arms))
    s = [info[a]["metrics"][m] for a in arms]
    iqm = np.array([v["iqm"] for v in s], dtype=float)
    low = np.array([v["iqm_ci"][0] for v in s], dtype=float)
    high = np.array([v["iqm_ci"][1] for v in s], dtype=float)
    points = [np.array(v.get("values", []), dtype=float) for v in s]
    # the bars rise from the axis's natural base: 0 when every value shown is >= 0, else just below the
    # lowest value shown (a negative score does not hang down from 0)
    shown = np.concatenate([iqm, low, high, *points, [v["random_mean"] for v in s]])
    shown = shown[np.isfinite(shown)]
    lowest = float(shown.min()) if shown.size else 0.0
    span = float(shown.max() - lowest) if shown.size else 1.0
    bottom = 0.0 if lowest >= 0 else lowest - 0.08 * (span or abs(lowest) or 1.0)
    height = np.where(np.isfinite(iqm), iqm - bottom, 0.0)
    yerr = np.nan_to_num(np.vstack([iqm - low, high - iqm])).clip(min=0.0)
    bars = ax.bar(x, height, bottom=bottom, color=[colours[a] for a in arms], alpha=0.85, edgecolor="0.2",
                  lw=0.8)
    ax.errorbar(x, np.where(np.isfinite(iqm), iqm, bottom), yerr=yerr, fmt="none", ecolor="black", capsize=4,
                lw=1.2)
    for i, vals in enumerate(points):  # every seed, as a point over its arm's bar
        vals = vals[np.isfinite(vals)]
        if vals.size:
            jitter = np.linspace(-0.18, 0.18, vals.size) if vals.size > 1 else np.zeros(1)
            ax.scatter(x[i] + jitter, vals, s=14, color="white", edgecolors="black", linewidths=0.8, zorder=3)
    if bottom != 0.0:
        top = float(shown.max()) if shown.size else bottom + 1.0
        ax.set_ylim(bottom, top + 0.08 * max(top - bottom, 1e-9))
    for i, a in enumerate(arms):
        if a == base:
            bars[i].set_hatch("//")
            bars[i].set_edgecolor("black")
            bars[i].set_linewidth(2.0)
        if math.isnan(iqm[i]):
            ax.annotate("n/a", (x[i], bottom), ha="center", va="bottom", fontsize=8)
        r = s[i]["random_mean"]
        if math.isfinite(r):
            ax.hlines(r, x[i] - 0.4, x[i] + 0.4, colors="0.2", linestyles="dashed", lw=1.2)
    labels = [f"{a} (n={v['n']})" for a, v in zip(arms, s)]
    ax.set_xticks(x)
    if len(arms) > 3 or max(len(t) for t in labels) > 18:  # slanted, anchored at the tick
        ax.set_xticklabels(labels, rotation=35, ha="right", rotation_mode="anchor", fontsize=8)
    else:
        ax.set_xticklabels(labels, fontsize=8)
    ax.set_ylabel(f"{m} (IQM over seeds)")
    ax.set_title(f"{m} by arm: IQM, {summary['confidence']:.0%} trimmed-mean t interval", fontsize=10)
    ax.grid(axis="y", alpha=0.3)
    handles = [Patch(facecolor="white", edgecolor="black", hatch="//", lw=2.0, label=f"baseline ({base})"),
               Line2D([], [], color="black", marker="_", ls="none", markersize=10,
                      label=f"{summary['confidence']:.0%} CI (trimmed-mean t)"),
               Line2D([], [], color="0.2", ls="--", label="random team (mean)"),
               Line2D([], [], color="white", marker="o", markeredgecolor="black", ls="none", markersize=4,
                      label="each seed")]
    _legend(ax, handles=handles)
    _save(fig, path)
    return True


def _axis_figure(summary: dict[str, Any], key: str, m: str, path: Path, colours: list[Any]) -> bool:
    Figure, Canvas = _matplotlib()
    axis, info, base = summary["axes"][key], summary["arms"], summary["baseline"]
    fig = Figure(figsize=(6.5, 4.5))
    Canvas(fig)
    ax = fig.add_subplot()
    drawn = 0
    for i, (label, members) in enumerate(axis["groups"].items()):
        xs = np.array([float(axis["values"][a]) for a in members])
        s = [info[a]["metrics"][m] for a in members]
        mean = np.array([v["mean"] for v in s], dtype=float)
        low = np.array([v["mean_ci"][0] for v in s], dtype=float)
        high = np.array([v["mean_ci"][1] for v in s], dtype=float)
        ok = np.isfinite(mean)
        if not ok.any():
            continue
        yerr = np.nan_to_num(np.vstack([mean - low, high - mean])[:, ok]).clip(min=0.0)  # n/a: no bar
        ax.errorbar(xs[ok], mean[ok], yerr=yerr, marker="o", capsize=4, lw=1.6, color=colours[i % len(colours)],
                    label=label)
        drawn += 1
        if base in members and math.isfinite(info[base]["metrics"][m]["mean"]):
            ax.plot([float(axis["values"][base])], [info[base]["metrics"][m]["mean"]], marker="o",
                    markersize=11, mfc="none", mec="black", mew=1.8, ls="none", label=f"baseline ({base})")
    if not drawn:
        return False
    by_x: dict[float, list[float]] = {}
    for members in axis["groups"].values():
        for a in members:
            r = info[a]["metrics"][m]["random_mean"]
            if math.isfinite(r):
                by_x.setdefault(float(axis["values"][a]), []).append(r)
    if by_x:
        xs = sorted(by_x)
        ax.plot(xs, [float(np.mean(by_x[v])) for v in xs], color="0.4", ls="--", lw=1.2, label="random team")
    ax.set_xlabel(key)
    ax.set_ylabel(f"{m} (mean over seeds)")
    ax.set_title(f"{m} against {key}: mean, {summary['confidence']:.0%} Student t interval", fontsize=10)
    ax.grid(alpha=0.3)
    _legend(ax)
    _save(fig, path)
    return True


def _figures(summary: dict[str, Any], out: Path) -> dict[str, list[str]]:
    """Draw every figure into ``out`` (old PNGs there removed first); relative paths by kind."""
    out.mkdir(parents=True, exist_ok=True)
    for old in out.glob("*.png"):
        old.unlink()
    arms = summary["arm_order"]
    palette = _colours(max(1, len(arms)))
    colours = dict(zip(arms, palette))
    made: dict[str, list[str]] = {"curve": [], "time": [], "bars": [], "axis": []}
    for m in summary["measures"]:
        if _curve_figure(summary, m, out / f"curve_{m}.png", colours):
            made["curve"].append(f"figures/curve_{m}.png")
    for m in summary["measures"]:
        if _time_figure(summary, m, out / f"time_{m}.png", colours):
            made["time"].append(f"figures/time_{m}.png")
    for m in summary["measures"]:
        if _bars_figure(summary, m, out / f"bars_{m}.png", colours):
            made["bars"].append(f"figures/bars_{m}.png")
    for key, axis in summary["axes"].items():
        if not axis["numeric"]:
            continue
        for m in summary["measures"]:
            name = f"axis_{_file_part(key)}_{m}.png"
            if _axis_figure(summary, key, m, out / name, palette):
                made["axis"].append(f"figures/{name}")
    return made


def write_report(sweep_dir: str | os.PathLike, test: str = "mannwhitney", reps: int = 2000, seed: int | None = 0,
                 holm_family: str = "metric", figures: bool = True) -> Path:
    """Write ``sweep_dir/report/`` (report.md, runs.csv, figures/*.png) and return that directory.

    Reads files only (see the module docstring); runs that are pending, running or failed are listed and
    counted, and the tables use the done runs. Rewriting replaces the previous report, figures included.

    Args:
        sweep_dir: a sweep directory (holding ledger.sqlite).
        test: ``"mannwhitney"`` (default, two-sided, no normality assumption) or ``"welch"``.
        reps: checked and unused: every interval is a formula (Student t, trimmed-mean t, Welch t) since
            the per-arm percentile bootstrap was dropped for under-covering; kept so older calls work.
        seed: checked and unused, likewise.
        holm_family: ``"metric"`` (default: Holm over the arms' comparisons of one metric) or ``"all"``.
        figures: draw the PNG figures (default); ``False`` writes report.md and runs.csv only (fast, and
            no matplotlib needed).

    Raises:
        RunDirError: ``sweep_dir`` has no ledger.sqlite.
        ConfigError: an argument out of range.
        MissingExtraError: matplotlib is not installed (and ``figures`` is true).
    """
    summary = report_summary(sweep_dir, test=test, reps=reps, seed=seed, holm_family=holm_family)
    return write_summary(summary, Path(sweep_dir) / "report", figures)


def summarize_runs(label_dirs: list[tuple[str, Path]], directory: str, baseline: str | None = None,
                   test: str = "mannwhitney") -> dict[str, Any]:
    """The report's summary of plain run directories (no sweep): ``label_dirs`` pairs a label with a run
    directory; runs under one label are its seeds, and the labels play the arms (the first is the baseline
    unless ``baseline`` names another). Same statistics as a sweep's report."""
    _check_args(test, 2000, 0, "metric")
    rows = []
    for label, run in label_dirs:
        summary = run / "summary.json"
        cfg = run / "config.yaml"
        seed = None
        if cfg.is_file():
            try:
                seed = (yaml.safe_load(cfg.read_text()) or {}).get("train", {}).get("seed")
            except yaml.YAMLError:
                seed = None
        rows.append({"run_id": run.name, "arm": label, "seed": seed if isinstance(seed, int) else len(rows),
                     "state": "done" if summary.is_file() else "failed", "duration": None, "overrides": {},
                     "run_dir": str(run), "error": None if summary.is_file() else "no summary.json (not finished)",
                     "metrics": None})
    data = {"sweep_dir": directory, "baseline": baseline or label_dirs[0][0], "spec": None, "sources": None,
            "plain": True, "runs": [_load_run(Path(directory), row) for row in rows]}
    summary = _summarize(data, test, 2000, 0, "metric")
    summary.update(title="Comparison of runs", directory_label="Output directory")
    return summary


def write_summary(summary: dict[str, Any], out: Path, figures: bool = True) -> Path:
    """Write a summary (:func:`report_summary`'s, or ``marl-core compare``'s) into ``out``: report.md,
    runs.csv, findings.json and figures/ (see :func:`write_report`); return ``out``."""
    out.mkdir(parents=True, exist_ok=True)
    if figures:
        drawn = _figures(summary, out / "figures")
    else:
        drawn = {"curve": [], "bars": [], "axis": []}
        for old in (out / "figures").glob("*.png"):  # no stale figures beside a report that links none
            old.unlink()
    _write_text(out / "runs.csv", _runs_csv(summary))
    write_json(out / "findings.json", {"along": summary["findings_along"], "baseline": summary["baseline"],
                                       "expect": summary["expect"], "findings": summary["findings"]})
    _write_text(out / "report.md", _markdown(summary, drawn, figures))
    return out
