"""How often each critic of the on-policy learner reaches the optimum of the one-shot climbing game; prints JSON.

Usage: ``python scripts/climbing.py [--seeds 0,...,9] [--critics local,central,joint_action] [--workers 2]
[--out DIR]``

Trains ``configs/climbing_ppo.yaml`` (Claus & Boutilier 1998's climbing game, table from memory in
docs/sources.md, "Climbing game") once per seed and critic, two runs at a time by default, and plays the
final actors greedily (each its most likely action) on the config's evaluation episodes. A run reaches the
optimum when its reward per round is 11 (both agents play action 0). Per critic: the reward per round of
each seed, which cell of the table the greedy pair lands in, and how many seeds reach 11. Runs reproduce bit
for bit only on the same CPU and torch build.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from marl_core.ablation.runner import repeat  # noqa: E402

CONFIG = ROOT / "configs" / "climbing_ppo.yaml"
CRITICS = ("local", "central", "joint_action")
OPTIMUM = 11.0  # the table's best cell (docs/sources.md, "Climbing game")
QUIET = {"log.tensorboard": False, "log.gif_every": 0, "log.progress": False}


def measure(critics: list[str], seeds: list[int], workers: int, out: Path) -> dict:
    result = {}
    for critic in critics:
        t0 = time.perf_counter()
        runs = repeat(CONFIG, seeds, out / critic, overrides={**QUIET, "learner.critic": critic},
                      workers=workers)
        per_seed = [round(s["reward_per_round"]["agent_0"], 3) for s in runs]
        result[critic] = {"reward_per_round": per_seed,
                          "reached_optimum": sum(abs(v - OPTIMUM) < 1e-6 for v in per_seed),
                          "seeds": len(seeds), "wall_seconds": round(time.perf_counter() - t0, 1)}
    return result


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", default=",".join(str(s) for s in range(10)), help="comma-separated (default 0-9)")
    ap.add_argument("--critics", default=",".join(CRITICS), help=f"comma-separated, from {', '.join(CRITICS)}")
    ap.add_argument("--workers", type=int, default=2, help="runs at a time (default 2)")
    ap.add_argument("--out", help="keep the run directories here (default: a temporary directory)")
    args = ap.parse_args(argv)
    critics = [c for c in args.critics.split(",") if c]
    bad = [c for c in critics if c not in CRITICS]
    if bad:
        print(f"climbing: error: --critics = {bad[0]!r} is not allowed; expected one of {', '.join(CRITICS)}",
              file=sys.stderr)
        return 2
    try:
        seeds = [int(s) for s in args.seeds.split(",")]
    except ValueError:
        print(f"climbing: error: --seeds = {args.seeds!r} is not allowed; expected integers separated by "
              f"commas", file=sys.stderr)
        return 2
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(args.out) if args.out else Path(tmp)
        result = measure(critics, seeds, args.workers, out)
    for critic, r in result.items():
        print(f"{critic}: optimum in {r['reached_optimum']} of {r['seeds']} seeds; per seed "
              f"{r['reward_per_round']}", file=sys.stderr)
    print(json.dumps({"config": "configs/climbing_ppo.yaml", "optimum": OPTIMUM, "critics": result}, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
