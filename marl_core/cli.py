"""The ``marl-core`` command line. The only module that reads argv or prints for people.

Commands:
    marl-core train CONFIG --out RUN_DIR [--set key.path=value ...] [--quiet]
    marl-core train --resume RUN_DIR [--quiet]
    marl-core evaluate RUN_DIR [--episodes N] [--json] [--gif PATH]
    marl-core ablate SPEC --out SWEEP_DIR [--workers N] [--backend local|ray] [--address ADDR] [--retry-failed]
    marl-core status SWEEP_DIR [--json]
    marl-core report SWEEP_DIR [--test mannwhitney|welch]
    marl-core envs [--json]
    marl-core demo [--out DIR] [--seed N] [--agents N] [--steps N] [--no-gif]

A user mistake (a bad option, config key, game parameter, run directory or checkpoint) prints one line on
stderr and exits with status 2, and nothing is written into an existing run directory.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence

from envs.errors import EnvError
from marl_core.errors import MarlError

__all__ = ["main"]


class UsageError(Exception):
    """A command-line mistake: printed as one line, exit status 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # argparse's own errors become one line and exit 2 as well
        raise UsageError(message)


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="marl-core", description="Train and study small teams of agents on social dilemmas.")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)
    d = sub.add_parser("demo", help="scripted teams play harvest and cleanup; write GIFs, print metrics")
    d.add_argument("--out", default="runs/demo", help="directory for the GIFs (default: runs/demo)")
    d.add_argument("--seed", type=int, default=0, help="episode seed (default: 0)")
    d.add_argument("--agents", type=int, default=5, help="agents per team (default: 5)")
    d.add_argument("--steps", type=int, default=1000, help="episode length, max_cycles (default: 1000)")
    d.add_argument("--no-gif", action="store_true", help="skip the GIFs")
    t = sub.add_parser("train", help="train a team from a YAML config into a run directory")
    t.add_argument("config", nargs="?", help="YAML config (see configs/)")
    t.add_argument("--out", help="new run directory")
    t.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                   help="override a config key, e.g. --set learner.lr=1e-3 (repeatable)")
    t.add_argument("--resume", metavar="RUN_DIR", help="continue a run from its last checkpoint")
    t.add_argument("--quiet", action="store_true", help="no progress bar; one plain line per evaluation")
    v = sub.add_parser("evaluate", help="evaluate a run's last checkpoint with exploration off")
    v.add_argument("run_dir")
    v.add_argument("--episodes", type=int, help="episodes to play, by the learned team and by every baseline "
                   "team on the same seeds (default: the run's train.eval_episodes)")
    v.add_argument("--json", action="store_true", help="print JSON (same metric keys as summary.json)")
    v.add_argument("--gif", metavar="PATH", help="write a GIF of the first episode")
    a = sub.add_parser("ablate", help="run a sweep (a grid of runs over seeds) into a sweep directory")
    a.add_argument("spec", help="sweep spec YAML (see configs/ablations/)")
    a.add_argument("--out", required=True, help="sweep directory (rerun the same command to continue)")
    a.add_argument("--workers", type=int, help="runs at once (default: the number of CPUs)")
    a.add_argument("--backend", default="local", help="local (process pool, default) or ray")
    a.add_argument("--address", help="ray: address of an existing cluster (default: start a local one)")
    a.add_argument("--retry-failed", action="store_true", help="run failed runs again")
    a.add_argument("--quiet", action="store_true", help="no progress display")
    st = sub.add_parser("status", help="a table of every run of a sweep")
    st.add_argument("sweep_dir")
    st.add_argument("--json", action="store_true")
    rp = sub.add_parser("report", help="write SWEEP_DIR/report/: report.md, runs.csv, figures")
    rp.add_argument("sweep_dir")
    rp.add_argument("--test", default="mannwhitney", help="mannwhitney (default) or welch")
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
    for game, params in table.items():
        print(game)
        for p in params:
            print(f"  {p['name']:<22} {p['type']:<6} {str(p['default']):<32} {p['doc']}")
    return 0


def _fmt(x) -> str:
    """A metric for the table; missing or non-finite (e.g. sustainability when nobody scores) is n/a."""
    return "n/a" if x is None or x != x or x in (float("inf"), float("-inf")) else f"{x:.3f}"


def _table(summary: dict) -> str:
    """The learned team beside every baseline team (columns), one row per metric."""
    teams = summary.get("baselines") or {"random": summary.get("random") or {}}
    teams = {n: teams[n] for n in sorted(teams, key=lambda n: n != "random")}  # random first, then as given
    width = max(10, *(len(n) + 2 for n in teams))
    lines = [f"{'':<16}{'learned':>{width}}" + "".join(f"{n:>{width}}" for n in teams)]
    for key in ("return_mean", "efficiency", "equality", "sustainability", "peace"):
        lines.append(f"{key:<16}{_fmt(summary.get(key)):>{width}}"
                     + "".join(f"{_fmt(teams[n].get(key)):>{width}}" for n in teams))
    return "\n".join(lines)


class _Progress:
    """A rich progress bar (steps, steps/s, ETA, latest evaluation return) or plain lines when quiet."""

    def __init__(self, quiet: bool):
        self.quiet, self.bar, self.task, self.last = quiet, None, None, None
        self.s0: int | None = None
        self.t0 = 0.0

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

        if self.s0 is None:
            self.s0, self.t0 = step, time.perf_counter()
            if not self.quiet:
                self._start()
        rate = (step - self.s0) / max(time.perf_counter() - self.t0, 1e-9)
        ret = _fmt(last["return_mean"]) if last else "-"
        if self.bar is not None:
            if self.task is None:
                self.task = self.bar.add_task("train", total=total, rate="-", ret="-")
            self.bar.update(self.task, completed=step, rate=f"{rate:,.0f}", ret=ret)
        elif last is not None and last is not self.last:
            print(f"step {step}/{total}  {rate:,.0f} steps/s  eval return {ret}  "
                  f"efficiency {_fmt(last['efficiency'])}", flush=True)
        self.last = last

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.__exit__(*exc)


def _train(args: argparse.Namespace) -> int:
    from marl_core import train

    if args.resume:
        if args.config or args.out or args.set:
            raise UsageError("train --resume RUN_DIR takes no CONFIG, --out or --set (the run keeps its config)")
        out = args.resume
        quiet = args.quiet or not train.load_run(out).log.progress  # log.progress: false = quiet
        with _Progress(quiet) as bar:
            summary = train.resume(out, progress=bar)
    else:
        if not args.config or not args.out:
            raise UsageError("train needs CONFIG and --out RUN_DIR (or --resume RUN_DIR)")
        from marl_core.config import load_config

        cfg = load_config(args.config, args.set)
        out = args.out
        with _Progress(args.quiet or not cfg.log.progress) as bar:
            summary = train.run(cfg, out, progress=bar)
    print(f"run: {out}  ({summary['env_steps']} env steps, {summary['episodes']} episodes)")
    print(_table(summary))
    print(f"summary: {out}/summary.json   policies: {out}/policies/")
    print(f"TensorBoard: tensorboard --logdir {out}")
    return 0


def _evaluate(args: argparse.Namespace) -> int:
    from marl_core import train
    from marl_core.files import finite

    res = train.evaluate_run(args.run_dir, episodes=args.episodes, gif=args.gif)
    if args.json:
        print(json.dumps(finite(res), indent=2, sort_keys=True))
    else:
        print(f"run: {args.run_dir}  ({res['eval_episodes']} episodes, exploration off)")
        print(_table(res))
        if args.gif:
            print(f"GIF: {args.gif}")
    return 0


def _ablate(args: argparse.Namespace) -> int:
    from marl_core.ablation.runner import ablate

    shown = {"t": 0.0}

    def progress(counts: dict, eta: float | None) -> None:
        import time

        now = time.monotonic()
        total = sum(counts.values())
        if args.quiet or (now - shown["t"] < 2.0 and counts.get("running", 0)):
            return
        shown["t"] = now
        left = "" if eta is None else f"  ETA {eta / 60:.1f} min"
        print(f"runs {total}: done {counts.get('done', 0)}, running {counts.get('running', 0)}, "
              f"failed {counts.get('failed', 0)}, pending {counts.get('pending', 0)}{left}", flush=True)

    counts = ablate(args.spec, args.out, workers=args.workers, backend=args.backend, address=args.address,
                    retry_failed=args.retry_failed, progress=progress)
    print(f"sweep: {args.out}  done {counts.get('done', 0)}, failed {counts.get('failed', 0)}")
    if counts.get("failed"):
        print(f"failed runs: marl-core status {args.out}; rerun them with --retry-failed")
    print(f"report: marl-core report {args.out}   TensorBoard HParams: tensorboard --logdir {args.out}/runs")
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
    from marl_core.ablation.report import write_report

    if args.test not in ("mannwhitney", "welch"):
        raise UsageError(f"--test = {args.test!r} is not allowed; expected mannwhitney or welch")
    out = write_report(args.sweep_dir, test=args.test)
    print(f"report: {out / 'report.md'}  runs: {out / 'runs.csv'}  figures: {out / 'figures'}")
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    try:
        args = _parser().parse_args(argv)
        return {"demo": _demo, "envs": _envs, "train": _train, "evaluate": _evaluate, "ablate": _ablate,
                "status": _status, "report": _report}[args.command](args)
    except (UsageError, EnvError, MarlError) as err:
        print(f"marl-core: error: {err}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
