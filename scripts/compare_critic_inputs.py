"""Compare MADDPG's two critic inputs on harvest and cleanup: the env's state against the stacked windows.

Usage: ``python scripts/compare_critic_inputs.py [--steps N] [--seeds N] [--games harvest cleanup]
[--inputs state observations] [--eval-every N] [--eval-episodes N] [--out DIR] [--json]``

For every game, critic input and seed, trains ``configs/<game>_maddpg.yaml`` through ``marl_core.train.run``
with ``learner.critic_input`` set, ``train.seed`` = 0 .. seeds-1, ``train.total_steps = --steps``,
``log.tensorboard=false log.gif_every=0 log.progress=false``; runs go one after another in this process
(one training process at a time; ``learner.torch_threads`` as the config says, 1 by default). It prints JSON:
per game and input, each seed's final efficiency (the last evaluation, exploration off), its learning curve
(``[env_steps, efficiency]`` at every evaluation, read from ``metrics.jsonl``) and wall time, then the median,
min and max of the final efficiencies and the total wall time. The random team's efficiency (same
evaluation seeds) is given for scale. Efficiency is the team's reward per step (``envs.metrics``).

``state`` is the env's ``state()``: for our grid games, by default (``state_layout: per_agent``) the map
channels and a position, ahead and frozen plane per agent. ``observations`` stacks the N egocentric windows
as channels. The result set the ``auto`` default of ``learner.critic_input`` (``marl_core/learners/maddpg.py``).
This is a script, not a test: it takes minutes per run.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

from _common import cpu_name, load_average, positive

ROOT = Path(__file__).resolve().parent.parent

GAMES = {"harvest": "harvest_maddpg.yaml", "cleanup": "cleanup_maddpg.yaml"}
INPUTS = ("state", "observations")


def read_curve(run_dir: Path) -> list[list[float]]:
    """``[env_steps, efficiency]`` of every evaluation line of a run's ``metrics.jsonl``."""
    rows = [json.loads(line) for line in (run_dir / "metrics.jsonl").read_text().splitlines() if line.strip()]
    return [[int(r["env_steps"]), r["efficiency"]] for r in rows]


def one_run(game: str, source: str, seed: int, args: argparse.Namespace, out: Path) -> dict:
    from marl_core.config import load_config
    from marl_core.train import run

    overrides = [f"learner.critic_input={source}", f"train.seed={seed}", f"train.total_steps={args.steps}",
                 f"train.eval_every={args.eval_every}", f"train.eval_episodes={args.eval_episodes}",
                 f"train.checkpoint_every={args.steps}", "log.tensorboard=false", "log.gif_every=0",
                 "log.progress=false"]
    cfg = load_config(ROOT / "configs" / GAMES[game], overrides)
    t0 = time.perf_counter()
    summary = run(cfg, out)
    wall = time.perf_counter() - t0
    return {"seed": seed, "final_efficiency": summary["efficiency"], "curve": read_curve(out),
            "random_efficiency": summary["random"]["efficiency"], "wall_s": round(wall, 1),
            "env_steps": summary["env_steps"]}


def summarise(runs: list[dict]) -> dict:
    finals = [r["final_efficiency"] for r in runs]
    return {"runs": runs, "final_efficiency": finals, "median": statistics.median(finals),
            "min": min(finals), "max": max(finals), "wall_s": round(sum(r["wall_s"] for r in runs), 1)}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--steps", type=positive(int), default=60_000, help="env steps per run (default 60000)")
    p.add_argument("--seeds", type=positive(int), default=3, help="seeds per game and input: train.seed = "
                   "0 .. N-1 (default 3)")
    p.add_argument("--games", nargs="+", choices=sorted(GAMES), default=list(GAMES),
                   help="games to run (default: harvest cleanup)")
    p.add_argument("--inputs", nargs="+", choices=INPUTS, default=list(INPUTS),
                   help="critic inputs to compare (default: state observations)")
    p.add_argument("--eval-every", type=positive(int), default=10_000, help="env steps between evaluations "
                   "(default 10000)")
    p.add_argument("--eval-episodes", type=positive(int), default=8, help="episodes per evaluation (default 8)")
    p.add_argument("--out", default=None, help="keep the run directories here (default: a temporary folder)")
    p.add_argument("--json", action="store_true", help="print only the JSON")
    args = p.parse_args(argv)

    started = time.perf_counter()
    result: dict = {"budget": {"steps": args.steps, "seeds": list(range(args.seeds)),
                               "eval_every": args.eval_every, "eval_episodes": args.eval_episodes,
                               "configs": {g: f"configs/{GAMES[g]}" for g in args.games}},
                    "machine": {"cpu": cpu_name(), "load_average_start": load_average()}, "games": {}}
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(args.out) if args.out else Path(tmp)
        for game in args.games:
            per_input = {}
            for source in args.inputs:
                runs = []
                for seed in range(args.seeds):
                    out = root / f"{game}-{source}-seed{seed}"
                    runs.append(one_run(game, source, seed, args, out))
                    if not args.json:
                        r = runs[-1]
                        print(f"{game:8s} {source:13s} seed {seed}: efficiency {r['final_efficiency']:.3f} "
                              f"({r['wall_s']:.0f} s)", file=sys.stderr, flush=True)
                per_input[source] = summarise(runs)
            if {"state", "observations"} <= set(per_input):
                s, o = per_input["state"], per_input["observations"]
                per_input["state_minus_observations_median"] = s["median"] - o["median"]
                per_input["ranges_overlap"] = s["min"] <= o["max"] and o["min"] <= s["max"]
            result["games"][game] = per_input
    result["wall_s"] = round(time.perf_counter() - started, 1)
    result["machine"]["load_average_end"] = load_average()
    print(json.dumps(result, indent=None if args.json else 2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
