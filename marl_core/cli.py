"""The ``marl-core`` command line. The only module that reads argv or prints for people.

Commands:
    marl-core train CONFIG --out RUN_DIR [--set key.path=value ...] [--quiet]
    marl-core train --resume RUN_DIR [--quiet]
    marl-core evaluate RUN_DIR [--episodes N] [--json] [--gif PATH]
    marl-core ablate SPEC --out SWEEP_DIR [--workers N] [--backend local|ray] [--address ADDR] [--retry-failed]
    marl-core status SWEEP_DIR [--json]
    marl-core report SWEEP_DIR [--test mannwhitney|welch]
    marl-core crossplay RUN_DIR RUN_DIR ... --out DIR [--episodes N] [--with NAME ...]
    marl-core envs [--json]
    marl-core demo [--out DIR] [--seed N] [--agents N] [--steps N] [--no-gif]

A user mistake (a bad option, config key, game parameter, run directory or checkpoint) prints one line on
stderr and exits with status 2, and nothing is written into an existing run directory. Ctrl-C prints one
line (for ``train``: the checkpoint to resume from and the command that resumes) and exits with status 130.

Progress of ``train``: a progress bar when stdout is a terminal; otherwise (piped, redirected, or
``--quiet`` / ``log.progress: false``) one plain line per evaluation. The hints printed ("resume with: ...",
"TensorBoard: ...") name the commands as this shell can run them (:func:`marl_core.hints.command`:
``marl-core`` with the venv active, ``.venv/bin/marl-core`` without). A team of one agent (e.g. gymnasium's
CartPole) is shown its returns only: the social metrics need a team (``summary.json`` keeps every key).
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import textwrap
from collections.abc import Sequence

from envs.errors import EnvError
from marl_core.errors import MarlError
from marl_core.hints import command

__all__ = ["main"]


class UsageError(Exception):
    """A command-line mistake: printed as one line, exit status 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # argparse's own errors become one line and exit 2 as well
        raise UsageError(message)


def _parser() -> argparse.ArgumentParser:
    from marl_core import __version__

    p = _Parser(prog="marl-core", description="Train and study small teams of agents on social dilemmas.")
    p.add_argument("--version", action="version", version=f"marl-core {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)
    d = sub.add_parser("demo", help="scripted teams play harvest and cleanup; write GIFs, print metrics")
    d.add_argument("--out", default="runs/demo", help="directory for the GIFs (default: runs/demo)")
    d.add_argument("--seed", type=int, default=0, help="episode seed (default: 0)")
    d.add_argument("--agents", type=int, default=5, help="agents per team (default: 5)")
    d.add_argument("--steps", type=int, default=1000, help="episode length, max_cycles (default: 1000)")
    d.add_argument("--no-gif", action="store_true", help="skip the GIFs")
    t = sub.add_parser("train", help="train a team from a YAML config into a run directory")
    t.add_argument("config", nargs="?", metavar="CONFIG", help="YAML config (see configs/)")
    t.add_argument("--out", metavar="RUN_DIR", help="new run directory")
    t.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                   help="override a config key, e.g. --set learner.lr=1e-3 (repeatable)")
    t.add_argument("--resume", metavar="RUN_DIR", help="continue a run from its last checkpoint")
    t.add_argument("--quiet", action="store_true", help="no progress bar; one plain line per evaluation (also "
                   "the default when stdout is not a terminal)")
    v = sub.add_parser("evaluate", help="evaluate a run's last checkpoint with exploration off (ppo: as "
                       "learner.eval_policy says)")
    v.add_argument("run_dir", metavar="RUN_DIR", help="a run directory written by train")
    v.add_argument("--episodes", type=int, help="episodes to play, by the learned team and by every baseline "
                   "team on the same seeds (default: the run's train.eval_episodes)")
    v.add_argument("--json", action="store_true", help="print JSON (same metric keys as summary.json)")
    v.add_argument("--gif", metavar="PATH", help="write a GIF of the first episode")
    a = sub.add_parser("ablate", help="run a sweep (a grid of runs over seeds) into a sweep directory")
    a.add_argument("spec", help="sweep spec YAML (see configs/ablations/)")
    a.add_argument("--out", metavar="SWEEP_DIR",
                   help="sweep directory (rerun the same command to continue); required unless --estimate")
    a.add_argument("--size", choices=("quick", "full", "published"),
                   help="for a spec with sizes: quick (a first look), full (default) or published (the papers' "
                   "scale); each size is its own sweep, so give each its own --out")
    a.add_argument("--estimate", action="store_true",
                   help="run nothing into SWEEP_DIR: measure this machine's speed on each arm (three short runs "
                   "each) and print what the sweep at --size would cost")
    a.add_argument("--json", action="store_true", help="with --estimate: print JSON")
    a.add_argument("--workers", type=int, help="runs at once (default: the number of CPUs)")
    a.add_argument("--backend", default="local", choices=("local", "ray"),
                   help="local (a process per run, default) or ray (pip install \".[ray]\")")
    a.add_argument("--address", help="ray: address of an existing cluster (default: start a local one)")
    a.add_argument("--retry-failed", action="store_true", help="run failed runs again")
    a.add_argument("--quiet", action="store_true", help="no progress display")
    st = sub.add_parser("status", help="a table of every run of a sweep")
    st.add_argument("sweep_dir", metavar="SWEEP_DIR", help="a sweep directory written by ablate")
    st.add_argument("--json", action="store_true", help="print JSON (one object per run)")
    rp = sub.add_parser("report", help="write SWEEP_DIR/report/: report.md, runs.csv, figures")
    rp.add_argument("sweep_dir", metavar="SWEEP_DIR", help="a sweep directory written by ablate")
    rp.add_argument("--test", default="mannwhitney", choices=("mannwhitney", "welch"),
                    help="the test against the baseline arm: mannwhitney (default) or welch")
    c = sub.add_parser("crossplay", help="seat agents of different runs together and evaluate every seating")
    c.add_argument("run_dirs", nargs="+", metavar="RUN_DIR", help="finished run directories (LABEL=RUN_DIR "
                   "groups runs under one label, as seeds of one source)")
    c.add_argument("--out", required=True, help="new directory for crossplay.csv, crossplay.json, heatmaps")
    c.add_argument("--episodes", type=int, default=32, help="episodes per seating (default: 32)")
    c.add_argument("--with", dest="members", action="append", default=[], metavar="NAME",
                   help="a non-learning member as a source: random, stay or a scripted team of the game "
                   "(repeatable)")
    c.add_argument("--by", choices=("pool", "seat"), default="pool",
                   help="pool: one heatmap per measure, the focal seats pooled (default); seat: also one per "
                   "focal seat")
    cp = sub.add_parser("compare", help="compare plain run directories: curves, intervals over seeds, baselines")
    cp.add_argument("run_dirs", nargs="+", metavar="RUN_DIR", help="run directories written by train "
                    "(LABEL=RUN_DIR gives runs one label: seeds of one condition)")
    cp.add_argument("--out", required=True, metavar="DIR", help="new directory for summary.md, report.md, "
                    "runs.csv and figures/")
    cp.add_argument("--baseline", metavar="LABEL", help="the condition the others are compared with "
                    "(default: the first)")
    cp.add_argument("--test", default="mannwhitney", choices=("mannwhitney", "welch"),
                    help="the test against the baseline: mannwhitney (default) or welch")
    e = sub.add_parser("envs", help="list the games and their parameters")
    e.add_argument("--json", action="store_true", help="print JSON instead of a table")
    return p


def _demo(args: argparse.Namespace) -> int:
    from marl_core.demo import run_demo

    rows = run_demo(args.out, seed=args.seed, num_agents=args.agents, max_cycles=args.steps,
                    gifs=not args.no_gif)
    head = f"{'game':<11} {'team':<14} {'return':>7} {'efficiency':>10} {'equality':>8} " \
           f"{'sustainability':>14} {'peace':>5} {'left':>4}"
    print(f"scripted teams, {args.agents} agents, {args.steps} steps, seed {args.seed}")
    print(head)
    print("-" * len(head))
    for r in rows:
        print(f"{r['game']:<11} {r['team']:<14} {sum(r['returns'].values()):>7.0f} {r['efficiency']:>10.3f} "
              f"{r['equality']:>8.3f} {r['sustainability']:>14.1f} {r['peace']:>5.2f} "
              f"{r['resources_left']:>4}")
    print("left = resources standing at the end. Efficiency: team reward per step; equality: 1 - Gini of the\n"
          "returns; sustainability: mean step of a reward; peace: agents not frozen per step.")
    gifs = [r["gif"] for r in rows if r["gif"]]
    if gifs:
        print("GIFs: " + ", ".join(gifs))
    print("These are scripted agents in a toy world, not people: read the numbers as facts about the game.")
    return 0


def _envs(args: argparse.Namespace) -> int:
    import envs

    table = envs.list_envs()
    if args.json:
        print(json.dumps(table, indent=2))
        return 0
    rows = {game: [(p["name"], p["type"], _default_text(p["default"]), p["doc"]) for p in params]
            for game, params in table.items()}
    widths = _widths([r for game_rows in rows.values() for r in game_rows],
                     shutil.get_terminal_size((100, 24)).columns, indent=2)
    for game, game_rows in rows.items():
        print(f"{game}  (metrics: {', '.join(envs.declared_metrics(game)) or 'returns only'})")
        print(_columns([("parameter", "type", "default", "meaning"), *game_rows], widths, indent=2))
    from envs.layouts import bundled_layouts
    from envs.matrix_v0 import GAME_CHOICES

    width = max(40, shutil.get_terminal_size((100, 24)).columns)
    for text in (f"bundled layouts (env.params.layout): {', '.join(bundled_layouts())}",
                 f"matrix games (matrix_v0's game): {', '.join(GAME_CHOICES)}",
                 "other envs (env.name): 'module:callable' for a PettingZoo ParallelEnv factory (e.g. "
                 "mpe2.simple_spread_v3:parallel_env), 'gymnasium:ID' for a single-agent gymnasium env (e.g. "
                 "gymnasium:CartPole-v1); they are reported by their returns"):
        print(textwrap.fill(text, width=width, break_on_hyphens=False))
    return 0


def _default_text(value) -> str:
    """A default as the table shows it: lists as comma-separated numbers (the spelling of docs/games.md)."""
    if isinstance(value, list):
        return ", ".join(f"{v:g}" if isinstance(v, float) else str(v) for v in value)
    return str(value)


_GAP = 2  # spaces between two columns


def _widths(rows: list[tuple[str, ...]], width: int, indent: int = 0, max_cell: int = 24) -> list[int]:
    """Column widths that fit ``width`` characters where they can: every column but the last is as wide as
    its longest cell, capped at ``max_cell`` (a longer cell wraps within its column); the last column gets
    what is left (at least 30 characters)."""
    ncols = len(rows[0])
    widths = [min(max(len(r[c]) for r in rows), max_cell) for c in range(ncols - 1)]
    return [*widths, max(30, width - indent - sum(widths) - _GAP * (ncols - 1))]


def _columns(rows: list[tuple[str, ...]], widths: list[int], indent: int = 0) -> str:
    """``rows`` in columns of ``widths``; a cell longer than its column wraps onto continuation lines in that
    column, so no cell runs into the next one."""
    gap = _GAP
    lines = []
    for row in rows:
        cells = [textwrap.wrap(text, w, break_long_words=True, break_on_hyphens=False) or [""]
                 for text, w in zip(row, widths)]
        for k in range(max(len(c) for c in cells)):
            parts = [(c[k] if k < len(c) else "").ljust(w) for c, w in zip(cells, widths)]
            lines.append((" " * indent + (" " * gap).join(parts)).rstrip())
    return "\n".join(lines)


def _fmt(x) -> str:
    """A metric for the table; missing or non-finite (e.g. sustainability when nobody scores) is n/a."""
    return "n/a" if x is None or x != x or x in (float("inf"), float("-inf")) else f"{x:.3f}"


SOCIAL = ("efficiency", "equality", "sustainability", "peace")


def _single_agent(result: dict) -> bool:
    """A team of one agent (e.g. a gymnasium env): the social metrics say nothing about it."""
    return len(result.get("returns") or {}) == 1


def _social(result: dict) -> tuple[str, ...]:
    """The social metrics to show: those the game declares (``summary.json``'s ``metrics``; an older
    summary without it shows all four), none for a team of one agent."""
    if _single_agent(result):
        return ()
    declared = result.get("metrics")
    return SOCIAL if declared is None else tuple(m for m in SOCIAL if m in declared)


def _table(summary: dict) -> str:
    """The learned team beside every baseline team (columns), one row per metric; a team of one agent
    gets its return only (and a note why). A mixed team (seats) has, under the return, one row per group:
    the mean return of its agents, and of the same agents in each baseline team."""
    from marl_core.baselines import KNOWN

    teams = summary.get("baselines") or {"random": summary.get("random") or {}}
    # random, stay, then the scripted teams: one order whether the summary is fresh or read from JSON
    order = {n: i for i, n in enumerate(KNOWN)}
    teams = {n: teams[n] for n in sorted(teams, key=lambda n: (order.get(n, len(order)), n))}
    width = max(10, *(len(n) + 2 for n in teams))
    single = _single_agent(summary)
    rows = [("return", "return_mean")] if single else [(k, k) for k in ("return_mean", *_social(summary))]
    lines = [f"{'':<16}{'learned':>{width}}" + "".join(f"{n:>{width}}" for n in teams)]
    for label, key in rows:
        lines.append(f"{label:<16}{_fmt(summary.get(key)):>{width}}"
                     + "".join(f"{_fmt(teams[n].get(key)):>{width}}" for n in teams))
        if key == "return_mean" and isinstance(summary.get("groups"), dict):  # a mixed team: each group's
            for group, info in summary["groups"].items():  # mean return, beside the teams' same agents
                agents = info.get("agents") or []

                def of(result: dict, agents=agents) -> float | None:
                    r = result.get("returns") or {}
                    vals = [r[a] for a in agents if a in r]
                    return sum(vals) / len(vals) if vals else None
                lines.append(f"{'  ' + group[:14]:<16}{_fmt(of(summary)):>{width}}"
                             + "".join(f"{_fmt(of(teams[n])):>{width}}" for n in teams))
    if "closed_form" in summary:  # lola: the matrix game's mean reward per round, per agent
        def per_round(res: dict) -> float | None:
            r = res.get("reward_per_round")
            return sum(r.values()) / len(r) if isinstance(r, dict) and r else None
        lines.append(f"{'reward/round':<16}{_fmt(per_round(summary)):>{width}}"
                     + "".join(f"{_fmt(per_round(teams[n])):>{width}}" for n in teams))
    if single:
        lines.append("(one agent: the social metrics need a team and are not shown; summary.json keeps them)")
    elif len(_social(summary)) < len(SOCIAL):
        shown = ", ".join(_social(summary)) or "none"
        lines.append(f"(social metrics this game declares: {shown}; the others mean nothing here)")
    return "\n".join(lines)


def _clock(seconds: float) -> str:
    """Elapsed time as m:ss (h:mm:ss past an hour)."""
    s = int(seconds)
    return f"{s // 3600}:{s % 3600 // 60:02d}:{s % 60:02d}" if s >= 3600 else f"{s // 60}:{s % 60:02d}"


def _eval_line(step: int, total: int, elapsed: float, rate: float, last: dict) -> str:
    """One plain progress line: steps, elapsed time, steps/s and the evaluation's key metrics."""
    metrics = f"return {_fmt(last.get('return_mean'))}"
    metrics += "".join(f"  {k} {_fmt(last.get(k))}" for k in _social(last))
    return f"step {step}/{total}  elapsed {_clock(elapsed)}  {rate:,.0f} steps/s  eval {metrics}"


class _Progress:
    """A rich progress bar (steps, steps/s, ETA, latest evaluation return) on a terminal; one plain line per
    evaluation when quiet or when stdout is not a terminal (piped or redirected: a bar would show nothing
    until the end)."""

    def __init__(self, quiet: bool):
        self.quiet = quiet or not _isatty(sys.stdout)
        self.bar, self.task, self.last = None, None, None
        self.s0: int | None = None
        self.t0 = 0.0
        self.offset = 0.0  # wall seconds of earlier sessions (a resumed run's clock goes on from there)

    def __enter__(self):
        return self

    def _start(self) -> None:  # the bar appears with the first step, so an early error prints nothing else
        from rich.progress import (
            BarColumn,
            MofNCompleteColumn,
            Progress,
            TextColumn,
            TimeRemainingColumn,
        )

        self.bar = Progress(TextColumn("[bold]train"), BarColumn(), MofNCompleteColumn(),
                            TextColumn("{task.fields[rate]} steps/s"), TimeRemainingColumn(),
                            TextColumn("eval return {task.fields[ret]}"))
        self.bar.__enter__()

    def __call__(self, step: int, total: int, last: dict | None) -> None:
        import time

        if self.s0 is None:  # the first call: the start of the loop (train.py), with the run's last evaluation
            self.s0, self.t0, self.last = step, time.perf_counter(), last
            if not self.quiet:
                self._start()
        session = time.perf_counter() - self.t0
        rate = (step - self.s0) / max(session, 1e-9)
        elapsed = self.offset + session
        ret = _fmt(last["return_mean"]) if last else "-"
        if self.bar is not None:
            if self.task is None:
                self.task = self.bar.add_task("train", total=total, rate="-", ret="-")
            self.bar.update(self.task, completed=step, rate=f"{rate:,.0f}", ret=ret)
        elif last is not None and last is not self.last:  # a new evaluation
            print(_eval_line(step, total, elapsed, rate, last), flush=True)
        self.last = last

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.__exit__(*exc)


def _isatty(stream) -> bool:
    try:
        return stream.isatty()
    except (AttributeError, ValueError):
        return False


def _train(args: argparse.Namespace) -> int:
    from marl_core import train

    if args.resume:
        if args.config or args.out:
            raise UsageError("train --resume RUN_DIR takes no CONFIG or --out (the run keeps its config)")
        extend = [x for x in args.set if x.partition("=")[0].strip() == "train.total_steps"]
        if len(extend) != len(args.set):
            raise UsageError("train --resume RUN_DIR takes only --set train.total_steps=M (to extend the run); "
                             "every other key stays as the run ran")
        out = args.resume
        if extend:
            from marl_core.config import parse_config

            cfg = train.load_run(out)  # the new budget is checked as any config value is
            value = parse_config({"train": {"total_steps": cfg.train.total_steps}}, extend[-1:]).train.total_steps
            old = train.extend_run(out, value)
            if old != value:
                print(f"extended: train.total_steps {old:,} -> {value:,}", flush=True)
        cfg = train.load_run(out)
        finished = train.finished_summary(out)
        counters = train.checkpoint_counters(out) if finished is None else {}
        with _Interrupted(out), _Progress(args.quiet or not cfg.log.progress) as bar:  # progress: false = quiet
            if counters:
                key, total = train.budget(cfg)
                bar.offset = float(counters.get("elapsed", 0.0))
                print(f"resumed at step {int(counters.get(key, 0)):,} of {total:,} {key.replace('_', ' ')}, "
                      f"{_clock(bar.offset)} into the run", flush=True)
            summary = train.resume(out, progress=bar)  # checks the checkpoint even when the run is finished
        if finished is not None:
            key, total = train.budget(cfg)
            where = "learner.updates" if key == "updates" else "train.total_steps"
            print(f"run: {out} is already finished: {summary[key]} of {total} {key.replace('_', ' ')} "
                  f"({where}), {summary['episodes']} episodes; nothing to resume")
            print(_table(summary))
            print(f"summary: {out}/summary.json   evaluate it again: {command()} evaluate {out}")
            return 0
    else:
        if not args.config or not args.out:
            raise UsageError("train needs CONFIG and --out RUN_DIR (or --resume RUN_DIR)")
        from marl_core.config import load_config

        cfg = load_config(args.config, args.set)
        out = args.out
        with _Interrupted(out), _Progress(args.quiet or not cfg.log.progress) as bar:
            summary = train.run(cfg, out, progress=bar)
    updates = f"{summary['updates']} updates, " if "updates" in summary else ""
    print(f"run: {out}  ({updates}{summary['env_steps']} env steps, {summary['episodes']} episodes)")
    print(_table(summary))
    print(f"summary: {out}/summary.json   policies: {out}/policies/")
    print(f"TensorBoard: {command('tensorboard')} --logdir {out}")
    return 0


class _Interrupted:
    """Turns Ctrl-C during training into :class:`_Exit` 130 with one line: the checkpoint to resume from
    and the command that resumes (or, with no checkpoint yet, what to do instead)."""

    def __init__(self, out: str):
        self.out = out

    def __enter__(self):
        return self

    def __exit__(self, kind, err, tb):
        if kind is None or not issubclass(kind, KeyboardInterrupt):
            return False
        from pathlib import Path

        from marl_core.train import TrainingInterrupted

        out = self.out
        if isinstance(err, TrainingInterrupted):
            head = f"marl-core: interrupted at step {err.env_steps} of {err.total_steps}"
            ckpt, steps, saved = err.checkpoint, err.checkpoint_steps, err.saved
        else:  # before the loop (building envs, the baselines) or after it (writing the summary)
            path = Path(out) / "checkpoints" / "last.pt"
            head, ckpt, steps, saved = "marl-core: interrupted", path if path.is_file() else None, None, False
        if ckpt is not None:
            line = (f"{head}; checkpoint {'saved' if saved else 'last'}: {ckpt}"
                    + (f" (step {steps})" if steps is not None else "")
                    + f"; resume with: {command()} train --resume {out}")
        elif Path(out).exists():
            line = f"{head} before the first checkpoint, so there is nothing to resume: remove {out} and start again"
        else:
            line = f"{head} before anything was written; start again"
        print(line, file=sys.stderr, flush=True)
        raise _Exit(130)


class _Exit(Exception):
    """Leave ``main`` with this status (the message is already printed)."""

    def __init__(self, status: int):
        super().__init__(status)
        self.status = status


def _evaluate(args: argparse.Namespace) -> int:
    from marl_core import train
    from marl_core.files import finite

    res = train.evaluate_run(args.run_dir, episodes=args.episodes, gif=args.gif)
    if args.json:
        print(json.dumps(finite(res), indent=2, sort_keys=True))
    else:
        L = train.load_run(args.run_dir).learner
        how = ("actions drawn from the learned policies" if getattr(L, "eval_policy", None) == "sample"
               else "exploration off")
        print(f"run: {args.run_dir}  ({res['eval_episodes']} episodes, {how})")
        print(_table(res))
        if args.gif:
            print(f"GIF: {args.gif}")
    return 0


def _estimate(args: argparse.Namespace) -> int:
    from marl_core.ablation.runner import estimate

    say = None if args.quiet or args.json else (lambda line: print(line, flush=True))
    est = estimate(args.spec, size=args.size, workers=args.workers, progress=say)
    if args.json:
        print(json.dumps(est, indent=2))
        return 0
    print(f"{'arm':<24} {'runs':>4} {'env steps/run':>14} {'steps/s':>8} {'eval s':>7} {'h/run':>7}")
    for a in est["arms"]:
        print(f"{a['arm'][:24]:<24} {a['runs']:>4} {a['env_steps_per_run']:>14,} {a['env_steps_per_s']:>8.0f} "
              f"{a['eval_s']:>7.1f} {a['run_s'] / 3600:>7.2f}")
    size = f" at size {est['size']}" if est["size"] else ""
    print(f"total{size}: {est['cpu_hours']:.1f} CPU-hours; about {est['wall_hours']:.1f} h with --workers "
          f"{est['workers']} (one run per core; measured in {est['probe_s']:.0f} s on this machine)")
    return 0


def _ablate(args: argparse.Namespace) -> int:
    from marl_core.ablation.runner import ablate

    if args.estimate:
        return _estimate(args)
    if not args.out:
        raise UsageError("ablate needs --out SWEEP_DIR (the sweep directory), or --estimate")

    shown: dict[str, dict | None] = {"counts": None}

    def progress(counts: dict, eta: float | None) -> None:
        # one line whenever a run starts or ends (the counts change), on a terminal or piped alike
        total = sum(counts.values())
        if args.quiet or counts == shown["counts"]:
            return
        shown["counts"] = dict(counts)
        left = "" if eta is None else f"  ETA {eta / 60:.1f} min"
        print(f"runs {total}: done {counts.get('done', 0)}, running {counts.get('running', 0)}, "
              f"failed {counts.get('failed', 0)}, pending {counts.get('pending', 0)}{left}", flush=True)

    counts = ablate(args.spec, args.out, workers=args.workers, backend=args.backend, address=args.address,
                    retry_failed=args.retry_failed, progress=progress,
                    notify=lambda line: print(f"note: {line}", flush=True), size=args.size)
    print(f"sweep: {args.out}  done {counts.get('done', 0)}, failed {counts.get('failed', 0)}")
    if counts.get("failed"):
        print(f"failed runs: {command()} status {args.out}; rerun them with --retry-failed")
    print(f"report: {command()} report {args.out}   TensorBoard HParams: {command('tensorboard')} --logdir "
          f"{args.out}/runs")
    return 0 if not counts.get("failed") else 1


def _status(args: argparse.Namespace) -> int:
    from marl_core.ablation.runner import HEADLINE, sweep_status

    rows = sweep_status(args.sweep_dir)
    if args.json:
        print(json.dumps(rows, indent=2))
        return 0
    width = max([len(r["arm"]) for r in rows] + [3])
    print(f"{'arm':<{width}}  {'seed':>4}  {'state':<8} {'duration':>9}  {HEADLINE:>10}  run")
    for r in rows:
        dur = "" if r["duration"] is None else f"{r['duration']:.0f} s"
        head = "" if r[HEADLINE] is None else f"{r[HEADLINE]:.3f}"
        line = f"{r['arm']:<{width}}  {r['seed']:>4}  {r['state']:<8} {dur:>9}  {head:>10}  {r['run_id']}"
        print(line + (f"  {r['error']}" if r["error"] and r["state"] == "failed" else ""))
    return 0


def _report(args: argparse.Namespace) -> int:
    from marl_core.ablation.report import is_smoke_test, write_report

    if args.test not in ("mannwhitney", "welch"):
        raise UsageError(f"--test = {args.test!r} is not allowed; expected mannwhitney or welch")
    out = write_report(args.sweep_dir, test=args.test)
    print(f"report: {out / 'report.md'}  runs: {out / 'runs.csv'}  figures: {out / 'figures'}")
    found = json.loads((out / "findings.json").read_text())["findings"]
    expected = [f for f in found if f["expected"]]
    for f in expected:  # the study's stated expectations, one sentence each (the rest: report.md, Findings)
        print(f["sentence"])
    if found and len(expected) < len(found):
        print(f"{len(found) - len(expected)} more finding(s) in report.md, section Findings")
    if is_smoke_test(args.sweep_dir):
        print("a smoke test (smoke_test: true in its spec): the runs are too short to learn, so the numbers "
              "say nothing about the arms")
    return 0


def _compare(args: argparse.Namespace) -> int:
    from marl_core.compare import compare, short_table

    summary = compare(args.run_dirs, args.out, baseline=args.baseline, test=args.test)
    print(short_table(summary), end="")
    print(f"report: {args.out}/report.md   table: {args.out}/summary.md   figures: {args.out}/figures/")
    return 0


def _crossplay(args: argparse.Namespace) -> int:
    from marl_core.crossplay import crossplay

    seen: dict[str, int] = {"n": 0}

    def progress(focal: str, others: str, seat: int | None) -> None:
        seen["n"] += 1
        if seen["n"] % 10 == 1:  # a line every 10 seatings played
            where = "self-play" if seat is None else f"focal seat {seat}"
            print(f"playing {focal} with {others} ({where}); {seen['n']} seatings so far", flush=True)

    res = crossplay(args.run_dirs, args.out, episodes=args.episodes, members=args.members, progress=progress,
                    by=args.by)
    labels = [s["label"] for s in res["sources"]]
    cells = {(c["focal"], c["others"]): c for c in res["cells"]}
    width = max(12, *(len(lab) + 2 for lab in labels))
    print(f"cross-play of {', '.join(labels)} on {res['game']['name']} ({res['episodes']} episodes a seating); "
          f"efficiency, focal source (rows) with the others (columns):")
    print(f"{'':<{width}}" + "".join(f"{lab:>{width}}" for lab in labels))
    for x in labels:
        print(f"{x:<{width}}" + "".join(f"{_fmt(cells[x, y]['efficiency']):>{width}}" for y in labels))
    gap = res["gap"].get("efficiency")
    if gap is not None:
        print(f"cross-play gap (self-play minus cross-play, learned sources): efficiency {_fmt(gap)}")
    norm = res["gap_normalised"]["mean"].get("efficiency")
    if norm is not None:
        print(f"normalised by each pair's own self-play, 1 - cross / mean(self): efficiency {_fmt(norm)} "
              "(compatibility; a weak source lowers its self-play too)")
    print(f"table: {args.out}/crossplay.csv   heatmaps: {args.out}/heatmap_*.png")
    return 0


def _check_set_pairs(argv: list[str]) -> None:
    """``--set KEY VALUE`` (a space for the ``=``) would read VALUE as a stray argument: say the fix."""
    for i, token in enumerate(argv[:-1]):
        if token == "--set" and "=" not in argv[i + 1]:
            key = argv[i + 1]
            value = argv[i + 2] if i + 2 < len(argv) and not argv[i + 2].startswith("--") else "VALUE"
            raise UsageError(f"--set {key}: expected KEY=VALUE with an '=' (e.g. --set {key}={value})")


def main(argv: Sequence[str] | None = None) -> int:
    args = None
    try:
        _check_set_pairs(list(sys.argv[1:] if argv is None else argv))
        args = _parser().parse_args(argv)
        return {"demo": _demo, "envs": _envs, "train": _train, "evaluate": _evaluate, "ablate": _ablate,
                "status": _status, "report": _report, "crossplay": _crossplay,
                "compare": _compare}[args.command](args)
    except (UsageError, EnvError, MarlError) as err:
        print(f"marl-core: error: {err}", file=sys.stderr)
        return 2
    except _Exit as done:
        return done.status
    except KeyboardInterrupt:
        again = ""
        if args is not None and args.command == "ablate":
            again = f"; rerun the same command to continue: {command()} ablate {args.spec} --out {args.out}"
        print(f"marl-core: interrupted{again}", file=sys.stderr, flush=True)
        return 130
    except BrokenPipeError:  # e.g. marl-core envs | head: the reader left; say nothing more
        try:  # no second error when Python flushes stdout at exit
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        except (OSError, ValueError, AttributeError):
            pass
        return 1


if __name__ == "__main__":
    sys.exit(main())
