"""Learning checks at full budget over several seeds, beside the strongest non-learning team; prints JSON.

Usage: ``python scripts/learning_checks.py [--checks NAME,...] [--seeds 0,1,2,3,4] [--workers 2] [--json]
[--out DIR]``

Each check trains a bundled config once per seed (two runs at a time by default, through
``marl_core.ablation.runner.repeat``), evaluates the FINAL policy with exploration off on the config's
evaluation episodes, and reports per seed and over seeds (median, interquartile mean, Student-t 95%
interval of the mean) the learned figure and every non-learning team's (random, no-op, scripted), each team
played on the same episodes. ``pass`` says whether the check's bar holds:

* ``cartpole``: independent DQN on gymnasium's CartPole-v1, 100 evaluation episodes per seed; bar: the IQM
  over seeds of the mean return reaches 475, ``gymnasium.spec("CartPole-v1").reward_threshold``
  (docs/sources.md, "Gymnasium registry values").
* ``quickstart``: ``configs/harvest_idqn.yaml``; bar: the median efficiency beats the strongest non-learning
  team's median.
* ``cleanup``: ``configs/cleanup_tiny_idqn.yaml``; bar: the median efficiency beats the strongest
  non-learning team's (``one_cleaner`` here; ``nobody_cleans`` is the free-riders' outcome).
* ``spread``: MADDPG on mpe2's ``simple_spread_v3``; bar: the median return per agent beats the no-op
  team's; the ``landmark_walk`` heuristic is reported beside it.
* ``ppo_quickstart``: ``configs/harvest_ppo.yaml`` (the quick start's game, on-policy learner with a central
  critic); bar: the median efficiency beats the strongest non-learning team's median.
* ``ppo_cartpole``: ``configs/cartpole_ppo.yaml`` (the on-policy learner on CartPole-v1, 100 evaluation
  episodes, greedy); bar: as ``cartpole``.
* ``ppo_spread``: ``configs/spread_ppo.yaml`` (central critic over mpe2's state); bar: as ``spread``.

The CI tests (``tests/marl_core/test_learning.py``) run shorter versions of these. Runs reproduce bit for
bit only on the same CPU and torch build; read the spread over seeds, not one seed.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from marl_core.ablation.runner import repeat  # noqa: E402
from marl_core.ablation.stats import iqm, t_interval  # noqa: E402

QUIET = {"log.tensorboard": False, "log.gif_every": 0, "log.progress": False}

# name -> (config, overrides, metric, bar: (kind, team or threshold))
CHECKS = {
    "cartpole": ("cartpole_idqn.yaml", {"train.eval_episodes": 100}, "return_mean", ("iqm_at_least", 475.0)),
    "quickstart": ("harvest_idqn.yaml", {}, "efficiency", ("beats_strongest", None)),
    "cleanup": ("cleanup_tiny_idqn.yaml", {}, "efficiency", ("beats_strongest", None)),
    "spread": ("spread_maddpg.yaml", {}, "return_mean", ("beats_team", "stay")),
    "ppo_quickstart": ("harvest_ppo.yaml", {}, "efficiency", ("beats_strongest", None)),
    "ppo_cartpole": ("cartpole_ppo.yaml", {}, "return_mean", ("iqm_at_least", 475.0)),
    "ppo_spread": ("spread_ppo.yaml", {}, "return_mean", ("beats_team", "stay")),
}


def _over_seeds(values: list[float]) -> dict:
    low, high = t_interval(values)
    return {"per_seed": [round(v, 4) for v in values], "median": float(np.median(values)),
            "iqm": float(iqm(values)), "mean": float(np.mean(values)), "mean_ci95": [low, high]}


def run_check(name: str, seeds: list[int], workers: int, out: Path) -> dict:
    config, overrides, metric, (kind, arg) = CHECKS[name]
    t0 = time.perf_counter()
    runs = repeat(ROOT / "configs" / config, seeds, out / name, overrides={**QUIET, **overrides},
                  workers=workers)
    learned = _over_seeds([s[metric] for s in runs])
    teams = {t: _over_seeds([s["baselines"][t][metric] for s in runs]) for t in runs[0]["baselines"]}
    strongest = max(teams, key=lambda t: teams[t]["median"])
    if kind == "iqm_at_least":
        passed = learned["iqm"] >= arg
    elif kind == "beats_strongest":
        passed = learned["median"] > teams[strongest]["median"]
    else:
        passed = learned["median"] > teams[arg]["median"]
    return {"config": f"configs/{config}", "overrides": overrides, "metric": metric, "seeds": seeds,
            "env_steps": runs[0]["env_steps"], "eval_episodes": runs[0]["eval_episodes"],
            "learned": learned, "baselines": teams, "strongest_baseline": strongest,
            "bar": {"kind": kind, "value": arg}, "pass": bool(passed),
            "wall_seconds": round(time.perf_counter() - t0, 1)}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--checks", default=",".join(CHECKS), help=f"comma-separated, from {', '.join(CHECKS)}")
    ap.add_argument("--seeds", default="0,1,2,3,4", help="comma-separated seeds (default 0-4)")
    ap.add_argument("--workers", type=int, default=2, help="runs at a time (default 2)")
    ap.add_argument("--out", help="keep the run directories here (default: a temporary directory)")
    ap.add_argument("--json", action="store_true", help="print JSON only")
    args = ap.parse_args(argv)
    names = [c for c in args.checks.split(",") if c]
    unknown = [c for c in names if c not in CHECKS]
    if unknown:
        print(f"learning_checks: error: --checks = {unknown[0]!r} is not allowed; expected one of "
              f"{', '.join(CHECKS)}", file=sys.stderr)
        return 2
    try:
        seeds = [int(s) for s in args.seeds.split(",")]
    except ValueError:
        print(f"learning_checks: error: --seeds = {args.seeds!r} is not allowed; expected integers "
              f"separated by commas", file=sys.stderr)
        return 2
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(args.out) if args.out else Path(tmp)
        result = {name: run_check(name, seeds, args.workers, out) for name in names}
    if not args.json:
        for name, r in result.items():
            b = r["baselines"][r["strongest_baseline"]]
            print(f"{name}: {r['metric']} median {r['learned']['median']:.3f} (IQM {r['learned']['iqm']:.3f}) "
                  f"vs {r['strongest_baseline']} {b['median']:.3f}; pass {r['pass']}", file=sys.stderr)
    print(json.dumps(result, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
