"""Compare grid-window encoders by learning, at equal env steps over seeds, and by update speed.

Usage: ``python scripts/compare_encoders.py [--configs harvest_idqn cleanup_tiny_idqn harvest_maddpg]
[--variants first_release ...] [--seeds N] [--workers N] [--steps N] [--out DIR] [--json]``

For every bundled config and encoder variant, trains the config over seeds 0 .. N-1 (``marl_core.ablation
.runner.repeat``, ``--workers`` runs at a time, one torch thread each) with the variant's
``learner.conv_channels`` / ``learner.conv_strides`` and TensorBoard, GIFs and the progress bar off. It
prints JSON: per config and variant, each seed's final efficiency (the last evaluation, exploration off),
the median learning curve (``[env_steps, median efficiency over seeds]`` at every evaluation, from
``metrics.jsonl``), the median and range of the final efficiencies, the seconds per run, and the strongest
non-learning team's median efficiency for scale. Efficiency is the team's reward per step.

Variants: ``first_release`` (conv [16, 32], strides 1 then 2: the encoder before this comparison),
``stride2`` (conv [16, 32], both strides 2) and ``narrow`` (conv [8, 16], strides 1 then 2). mpe2's
spread has vector observations and no conv encoder, so the encoder does not touch it. This is a script,
not a test: each run takes a minute or more.
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
sys.path.insert(0, str(ROOT))

VARIANTS: dict[str, dict] = {
    "first_release": {"learner.conv_channels": [16, 32], "learner.conv_strides": None},
    "stride2": {"learner.conv_channels": [16, 32], "learner.conv_strides": [2, 2]},
    "narrow": {"learner.conv_channels": [8, 16], "learner.conv_strides": None},
}
CONFIGS = ("harvest_idqn", "cleanup_tiny_idqn", "harvest_maddpg")
QUIET = {"log.tensorboard": False, "log.gif_every": 0, "log.progress": False}


def _curve(run_dir: Path) -> list[tuple[int, float]]:
    rows = [json.loads(x) for x in (run_dir / "metrics.jsonl").read_text().splitlines() if x.strip()]
    return [(int(r["env_steps"]), r["efficiency"]) for r in rows]


def compare(config: str, variant: str, seeds: list[int], workers: int, steps: int | None, out: Path) -> dict:
    from marl_core.ablation.runner import repeat

    overrides = {**QUIET, **VARIANTS[variant]}
    if steps:
        overrides["train.total_steps"] = steps
    t0 = time.perf_counter()
    runs = repeat(ROOT / "configs" / f"{config}.yaml", seeds, out, overrides=overrides, workers=workers)
    wall = time.perf_counter() - t0
    finals = [s["efficiency"] for s in runs]
    curves = [_curve(p.parent) for p in sorted((out / "sweep" / "runs").glob("*/summary.json"))]
    steps_at = sorted({s for c in curves for s, _ in c})
    median_curve = [[s, statistics.median([dict(c)[s] for c in curves if s in dict(c)])] for s in steps_at]
    teams = runs[0]["baselines"]
    strongest = max(teams, key=lambda t: statistics.median([s["baselines"][t]["efficiency"] for s in runs]))
    return {"final_efficiency": finals, "median": statistics.median(finals), "min": min(finals),
            "max": max(finals), "median_curve": median_curve,
            "seconds_per_run": round(wall * min(workers, len(seeds)) / len(seeds), 1),
            "strongest_baseline": strongest,
            "strongest_baseline_median": statistics.median([s["baselines"][strongest]["efficiency"]
                                                            for s in runs])}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--configs", nargs="+", choices=CONFIGS, default=list(CONFIGS),
                   help="bundled configs to train (default: all three)")
    p.add_argument("--variants", nargs="+", choices=sorted(VARIANTS), default=list(VARIANTS),
                   help="encoders to compare (default: all)")
    p.add_argument("--seeds", type=positive(int), default=3, help="seeds 0 .. N-1 (default 3)")
    p.add_argument("--workers", type=positive(int), default=2, help="runs at a time (default 2)")
    p.add_argument("--steps", type=positive(int), default=None, help="train.total_steps (default: the "
                   "config's)")
    p.add_argument("--out", default=None, help="keep the runs here (default: a temporary folder)")
    p.add_argument("--json", action="store_true", help="print only the JSON")
    args = p.parse_args(argv)

    started = time.perf_counter()
    seeds = list(range(args.seeds))
    result: dict = {"seeds": seeds, "workers": args.workers, "steps": args.steps, "variants": VARIANTS,
                    "machine": {"cpu": cpu_name(), "load_average_start": load_average()}, "configs": {}}
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(args.out) if args.out else Path(tmp)
        for config in args.configs:
            result["configs"][config] = {}
            for variant in args.variants:
                r = compare(config, variant, seeds, args.workers, args.steps, root / f"{config}-{variant}")
                result["configs"][config][variant] = r
                if not args.json:
                    print(f"{config:15s} {variant:14s} median efficiency {r['median']:.3f} "
                          f"[{r['min']:.3f}, {r['max']:.3f}]  {r['seconds_per_run']:.0f} s/run  "
                          f"({r['strongest_baseline']} {r['strongest_baseline_median']:.3f})",
                          file=sys.stderr, flush=True)
    result["wall_s"] = round(time.perf_counter() - started, 1)
    result["machine"]["load_average_end"] = load_average()
    print(json.dumps(result, indent=None if args.json else 2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
