"""Cross-play: seat agents trained in different runs (and non-learning members) in one game, and evaluate.

``marl-core crossplay RUN_DIR RUN_DIR ... --out DIR [--episodes N] [--with NAME ...]``

Sources are the runs' saved per-agent policies (``RUN_DIR/policies/<agent>.pt``) and, with ``--with``,
non-learning members: ``random``, ``stay`` where it applies, or one of the game's scripted teams
(:mod:`marl_core.baselines`), whose member in a seat plays that seat's part of the team's rule. Runs given
as ``LABEL=RUN_DIR`` with the same label form one source whose runs are its seeds.

For every ordered pair of sources (X, Y) and every seat i, seat i is taken by X's agent of that seat and
every other seat by Y's agents: X is the *focal* source, Y the *others*. The cell (X, Y) pools the focal
seats. On the diagonal (X = X) each run plays as its own team (self-play). With two agents this is every
seating: agent_0 from run A with agent_1 from run B, and the reverse.

Each seating is played on the same episodes and seeds. For a cell with two or more pairs of runs (seeds) the
interval is Student t over the pairs' means ("seeds"); otherwise over the episodes ("episodes"); the CSV says
which; intervals are clipped to a measure's range (equality at most 1, peace in [0, N], sustainability in
[1, episode length]). The cross-play gap of a metric is the mean of the self-play cells minus the mean of
the cross-play cells, both over learned sources only. Since one weak source lowers every cell it plays
in, ``gap_normalised`` also sets each cross cell beside its two sources' self-play and gives
1 - cross / mean(self X, self Y): compatibility measured against what each source does with its own.

Output (written only once everything has been played): ``crossplay.csv`` (one row per cell and per focal seat),
``crossplay.json`` (the cells, the gap, the sources and the game) and ``heatmap_<metric>.png`` for each
social metric and for ``focal_return`` (the focal seat's return) and ``others_return``.

This module reads policy files and configs; it never imports a learner.
"""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from envs.metrics import METRIC_NAMES
from marl_core.ablation.stats import t_interval
from marl_core.baselines import make_team, renamed_team, team_names
from marl_core.config import load_stored_config
from marl_core.errors import CheckpointError, RunDirError
from marl_core.files import atomic_write, finite
from marl_core.policy import load_policy
from marl_core.rollout import evaluate
from marl_core.team_env import make_team_env

__all__ = ["crossplay", "Source", "CELL_MEASURES"]

CELL_MEASURES = (*METRIC_NAMES, "focal_return", "others_return")
SEED = 2_000_003  # the evaluation episodes' seed: the same for every seating
MAX_COPIES = 64


@dataclass
class Source:
    """A learned source (its runs' policies per agent) or a non-learning member (``member`` set)."""

    label: str
    runs: list[Path] = field(default_factory=list)
    policies: list[dict[str, Any]] = field(default_factory=list)  # per run: agent -> policy
    member: str | None = None


def _parse_sources(items: list[str], members: list[str]) -> list[Source]:
    by_label: dict[str, Source] = {}
    named: set[str] = set()  # labels given as LABEL=RUN_DIR (only those group runs)
    for item in items:
        label, sep, path = item.partition("=")
        if not sep:
            label, path = Path(item).name or item, item
            if label in by_label:
                raise RunDirError(f"crossplay: two sources are named {label!r}; label them apart "
                                  f"(LABEL=RUN_DIR), or give one label to runs that are seeds of one source")
        elif label in by_label and label not in named:
            raise RunDirError(f"crossplay: label {label!r} is also the name of a run given without a label")
        if not label:
            raise RunDirError(f"crossplay: source {item!r} has an empty label; expected LABEL=RUN_DIR or RUN_DIR")
        if sep:
            named.add(label)
        by_label.setdefault(label, Source(label)).runs.append(Path(path))
    for m in members:
        if m in by_label:
            raise RunDirError(f"crossplay: --with {m!r} has the label of a run source; rename the run "
                              f"(LABEL=RUN_DIR)")
        by_label[m] = Source(m, member=m)
    return list(by_label.values())


def _game_of(run: Path) -> tuple[str, dict[str, Any]]:
    if not (run / "config.yaml").is_file():
        if not Path(run).exists():
            raise RunDirError(f"crossplay: run directory '{run}' does not exist")
        raise RunDirError(f"crossplay: '{run}' is not a run directory (no config.yaml)")
    cfg = load_stored_config(run / "config.yaml")
    return cfg.env.name, dict(cfg.env.params)


def _load_policies(run: Path, agents: tuple[str, ...], obs_shape: tuple[int, ...], num_actions: int):
    out = {}
    for agent in agents:
        path = run / "policies" / f"{agent}.pt"
        if not path.is_file():
            raise CheckpointError(f"crossplay: run '{run}' has no policy for {agent} ({path} not found); "
                                  f"policies are written when a run finishes")
        pol = load_policy(path)
        shape = tuple(pol.obs_space["shape"])
        if shape != tuple(obs_shape):
            raise CheckpointError(f"crossplay: policy '{path}' expects observations of shape {shape}; the game "
                                  f"gives {tuple(obs_shape)}")
        if pol.num_actions != num_actions:
            raise CheckpointError(f"crossplay: policy '{path}' has {pol.num_actions} actions; the game has "
                                  f"{num_actions}")
        out[agent] = pol
    return out


def _joint_policy(env, seats: list[tuple[Source, int]], seed: int):
    """obs (B, N, ...) -> actions (B, N): seat i played by ``seats[i] = (source, run index)``."""
    n = env.spec.num_agents
    teams: dict[str, Any] = {}
    players = []
    for i, (src, r) in enumerate(seats):
        if src.member is not None:
            if src.member not in teams:
                teams[src.member] = make_team(src.member, env, seed + len(teams))
            players.append(("team", src.member))
        else:
            players.append(("policy", src.policies[r][env.spec.agents[i]].for_seat(i)))

    def policy(obs: np.ndarray) -> np.ndarray:
        team_actions = {name: np.asarray(t(obs)) for name, t in teams.items()}
        out = np.zeros(obs.shape[:2], np.int64)
        for i in range(n):
            kind, who = players[i]
            out[:, i] = team_actions[who][:, i] if kind == "team" else who.act(obs[:, i])
        return out

    return policy


def _interval(values: list[float]) -> tuple[float, float]:
    finite_v = [v for v in values if np.isfinite(v)]
    if len(finite_v) < 2:
        return float("nan"), float("nan")
    return t_interval(finite_v)


BY = ("pool", "seat")


def crossplay(items: list[str], out: str | Path, episodes: int = 32, members: list[str] | None = None,
              progress=None, by: str = "pool") -> dict[str, Any]:
    """Play every seating (module docstring) and write the results into the new directory ``out``.
    ``by="seat"`` also draws one heatmap per focal seat (``heatmap_<measure>_<agent>.png``: each
    cross-play cell with the focal source in that seat only; the diagonal is self-play)."""
    out = Path(out)
    if by not in BY:
        raise RunDirError(f"crossplay: --by = {by!r} is not allowed; expected one of {', '.join(BY)}")
    members = list(members or [])
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise RunDirError(f"crossplay: --out '{out}' already exists and is not empty; choose a new directory")
    if isinstance(episodes, bool) or not isinstance(episodes, int) or episodes < 2:
        raise RunDirError(f"crossplay: --episodes = {episodes!r} is not allowed; expected an integer >= 2")
    if not items:
        raise RunDirError("crossplay: no RUN_DIR given; expected at least one run directory")
    sources = _parse_sources(items, members)
    runs = [r for s in sources for r in s.runs]
    name, params = _game_of(runs[0])
    for r in runs[1:]:
        other, _ = _game_of(r)
        if other != name:
            raise RunDirError(f"crossplay: run '{r}' played {other!r}; run '{runs[0]}' played {name!r}; "
                              f"seat agents of one game only")
    allowed = team_names(name)
    for m in members:
        if renamed_team("crossplay: --with", m):
            raise RunDirError(renamed_team("crossplay: --with", m))
        if m not in allowed:
            raise RunDirError(f"crossplay: --with {m!r} is not allowed for {name!r}; expected one of "
                              f"{', '.join(allowed)}")
    copies = min(episodes, MAX_COPIES)
    env = make_team_env(name, params, copies, SEED, with_state=False)
    try:
        spec = env.spec
        for s in sources:
            s.policies = [_load_policies(r, spec.agents, tuple(spec.obs_space.shape), spec.num_actions)
                          for r in s.runs]
        bounds = _bounds(name, params, spec.num_agents)
        cells, rows = _play_all(env, sources, episodes, progress, bounds)
    finally:
        env.close()
    gap = _gap(cells, sources)
    normalised = _normalised(cells, sources)
    result = {"game": {"name": name, "params": params}, "episodes": episodes, "agents": list(spec.agents),
              "sources": [{"label": s.label, "runs": [str(r) for r in s.runs], "member": s.member}
                          for s in sources],
              "cells": cells, "gap": gap, "gap_normalised": normalised}
    figures = _heatmaps(cells, sources)
    if by == "seat":
        diagonal = [c for c in cells if c["focal"] == c["others"]]
        for agent in spec.agents:
            seated = [r for r in rows if r["focal_seat"] == agent and r["focal"] != r["others"]]
            for m, png in _heatmaps(diagonal + seated, sources, f" (focal seat {agent})").items():
                figures[f"{m}_{agent}"] = png
    out.mkdir(parents=True, exist_ok=True)
    atomic_write(out / "crossplay.csv", lambda f: f.write(_csv(rows)))
    atomic_write(out / "crossplay.json", lambda f: f.write(json.dumps(finite(result), indent=2, sort_keys=True)))
    for metric, png in figures.items():
        atomic_write(out / f"heatmap_{metric}.png", lambda f, png=png: f.write(png), binary=True)
    return result


def _bounds(name: str, params: dict[str, Any], n: int) -> dict[str, tuple[float, float]]:
    """The range each cell measure cannot leave (envs/metrics.py), to clip its interval to."""
    from envs import game_module
    from envs.params import resolve

    out = {m: (-np.inf, np.inf) for m in CELL_MEASURES}
    out["equality"] = (-np.inf, 1.0)
    out["peace"] = (0.0, float(n))
    try:
        length = resolve(name, game_module(name).PARAMS, params).get("max_cycles")
    except Exception:  # noqa: BLE001 - a game we did not write: no known episode length
        length = None
    if isinstance(length, int):
        out["sustainability"] = (1.0, float(length))
    return out


def _play_all(env, sources: list[Source], episodes: int, progress, bounds=None):
    n = env.spec.num_agents
    cells: list[dict[str, Any]] = []
    rows: list[dict[str, Any]] = []
    for x in sources:
        for y in sources:
            if x is y:
                # self-play: each run as its own team; a member's whole team
                pairs = [(r, r) for r in range(max(1, len(x.runs)))]
                focal_seats = [None]
            else:
                pairs = [(a, b) for a in range(max(1, len(x.runs))) for b in range(max(1, len(y.runs)))]
                focal_seats = list(range(n))
            per_pair: dict[str, list[float]] = {m: [] for m in CELL_MEASURES}
            per_episode: dict[str, list[float]] = {m: [] for m in CELL_MEASURES}
            for seat in focal_seats:
                seat_episode: dict[str, list[float]] = {m: [] for m in CELL_MEASURES}
                for a, b in pairs:
                    seats = [(x, a) if (seat is None or i == seat) else (y, b) for i in range(n)]
                    ev = evaluate(env, _joint_policy(env, seats, SEED), episodes, SEED, keep_episodes=True)
                    vals = _episode_values(ev["per_episode"], seat, n)
                    for m in CELL_MEASURES:
                        seat_episode[m] += vals[m]
                        per_episode[m] += vals[m]
                        per_pair[m].append(float(np.nanmean(vals[m])) if np.isfinite(vals[m]).any()
                                           else float("nan"))
                    if progress is not None:
                        progress(x.label, y.label, seat)
                rows.append(_row(x, y, "all" if seat is None else env.spec.agents[seat], seat_episode,
                                 None, len(pairs), bounds))
            over = "seeds" if len(pairs) >= 2 else "episodes"
            cell = _row(x, y, "all", per_episode, per_pair if over == "seeds" else None, len(pairs), bounds)
            cells.append(cell)
            if len(focal_seats) > 1:
                rows.append({**cell, "focal_seat": "all"})
    return cells, rows


def _episode_values(per_episode: list[dict[str, Any]], seat: int | None, n: int) -> dict[str, list[float]]:
    vals: dict[str, list[float]] = {m: [float(e[m]) for e in per_episode] for m in METRIC_NAMES}
    focal, others = [], []
    for e in per_episode:
        r = np.asarray(e["returns"], np.float64)
        if seat is None:
            focal.append(float(r.mean()))
            others.append(float(r.mean()))
        else:
            focal.append(float(r[seat]))
            others.append(float(np.delete(r, seat).mean()) if n > 1 else float("nan"))
    vals["focal_return"], vals["others_return"] = focal, others
    return vals


def _row(x: Source, y: Source, seat: str, per_episode: dict[str, list[float]],
         per_pair: dict[str, list[float]] | None, pairs: int,
         bounds: dict[str, tuple[float, float]] | None = None) -> dict[str, Any]:
    row: dict[str, Any] = {"focal": x.label, "others": y.label, "focal_seat": seat, "run_pairs": pairs,
                           "episodes": len(per_episode["efficiency"]),
                           "interval_over": "seeds" if per_pair is not None else "episodes"}
    for m in CELL_MEASURES:
        v = np.asarray(per_episode[m], np.float64)
        row[m] = float(np.nanmean(v)) if np.isfinite(v).any() else float("nan")
        low, high = _interval(per_pair[m] if per_pair is not None else per_episode[m])
        lo_b, hi_b = (bounds or {}).get(m, (-np.inf, np.inf))  # clipped to the measure's range
        row[f"{m}_low"], row[f"{m}_high"] = float(np.clip(low, lo_b, hi_b)), float(np.clip(high, lo_b, hi_b))
    return row


def _gap(cells: list[dict[str, Any]], sources: list[Source]) -> dict[str, float | None]:
    learned = {s.label for s in sources if s.member is None}
    gap: dict[str, float | None] = {}
    for m in CELL_MEASURES:
        self_v = [c[m] for c in cells if c["focal"] == c["others"] and c["focal"] in learned]
        cross = [c[m] for c in cells if c["focal"] != c["others"] and c["focal"] in learned
                 and c["others"] in learned]
        ok = [v for v in self_v if np.isfinite(v)], [v for v in cross if np.isfinite(v)]
        gap[m] = float(np.mean(ok[0]) - np.mean(ok[1])) if ok[0] and ok[1] else None
    return gap


def _normalised(cells: list[dict[str, Any]], sources: list[Source]) -> dict[str, Any]:
    """Skill apart from compatibility: each cross-play cell (X, Y) of learned sources beside X's and Y's
    self-play, and its gap normalised by them, 1 - cross / mean(self X, self Y), for measures whose
    self-play values are positive (0: they play together as well as each with its own; 0.5: half of it is
    lost). A weaker source lowers its own self-play too, so the normalised gap is not a skill gap.
    Returns ``{"cells": [{focal, others, measure, cross, self_focal, self_others, normalised}], "mean":
    {measure: mean normalised gap over the cells}}``."""
    learned = {s.label for s in sources if s.member is None}
    own = {c["focal"]: c for c in cells if c["focal"] == c["others"]}
    rows: list[dict[str, Any]] = []
    for c in cells:
        x, y = c["focal"], c["others"]
        if x == y or x not in learned or y not in learned:
            continue
        for m in CELL_MEASURES:
            sx, sy = own[x][m], own[y][m]
            ref = (sx + sy) / 2
            value = float(1 - c[m] / ref) if np.isfinite(ref) and ref > 0 and np.isfinite(c[m]) else None
            rows.append({"focal": x, "others": y, "measure": m, "cross": c[m], "self_focal": sx,
                         "self_others": sy, "normalised": value})
    mean = {}
    for m in CELL_MEASURES:
        vals = [r["normalised"] for r in rows if r["measure"] == m and r["normalised"] is not None]
        mean[m] = float(np.mean(vals)) if vals else None
    return {"cells": rows, "mean": mean}


def _csv(rows: list[dict[str, Any]]) -> str:
    buf = io.StringIO()
    keys = list(rows[0])
    w = csv.DictWriter(buf, fieldnames=keys, lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow({k: ("" if isinstance(v, float) and not np.isfinite(v) else v) for k, v in r.items()})
    return buf.getvalue()


def _heatmaps(cells: list[dict[str, Any]], sources: list[Source], where: str = "") -> dict[str, bytes]:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    labels = [s.label for s in sources]
    index = {lab: i for i, lab in enumerate(labels)}
    k = len(labels)
    out = {}
    for m in CELL_MEASURES:
        grid = np.full((k, k), np.nan)
        text = [["" for _ in range(k)] for _ in range(k)]
        for c in cells:
            i, j = index[c["focal"]], index[c["others"]]
            grid[i, j] = c[m]
            lo, hi = c[f"{m}_low"], c[f"{m}_high"]
            band = f"\n[{lo:.3g}, {hi:.3g}]" if np.isfinite(lo) and np.isfinite(hi) else ""
            text[i][j] = (f"{c[m]:.3g}" if np.isfinite(c[m]) else "n/a") + band
        fig, ax = plt.subplots(figsize=(1.6 + 1.5 * k, 1.2 + 1.2 * k))
        im = ax.imshow(np.ma.masked_invalid(grid), cmap="viridis")
        ax.set_xticks(range(k), labels, rotation=30, ha="right")
        ax.set_yticks(range(k), labels)
        ax.set_xlabel("others (every other seat)")
        ax.set_ylabel("focal (one seat)")
        ax.set_title(f"cross-play: {m}{where} (95% interval)")
        lo_v, hi_v = (np.nanmin(grid), np.nanmax(grid)) if np.isfinite(grid).any() else (0.0, 1.0)
        for i in range(k):
            for j in range(k):
                light = np.isfinite(grid[i, j]) and hi_v > lo_v and (grid[i, j] - lo_v) / (hi_v - lo_v) > 0.6
                ax.text(j, i, text[i][j], ha="center", va="center", fontsize=8,
                        color="black" if light else "white")
        fig.colorbar(im, ax=ax)
        fig.tight_layout()
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=90)
        plt.close(fig)
        out[m] = buf.getvalue()
    return out
