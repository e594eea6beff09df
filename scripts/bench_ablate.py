"""Wall time of the same small sweep with one and with two local workers, and the speed-up.

Usage: ``python scripts/bench_ablate.py [--json] [--spec PATH] [--keep DIR]``

Runs ``configs/ablations/quick.yaml`` (or ``--spec``) twice into fresh temporary sweep directories, once with
``--workers 1`` and once with ``--workers 2``, through the real ``marl_core.ablation.runner.ablate`` (each
run in its own process, one torch thread each), and prints the wall times and their ratio. Target: a ratio
of at least 1.8 on a 2-core machine. This is a benchmark, not a test: it asserts nothing and exits 0. Other
load on the machine lowers the ratio; the JSON records the load average before and after.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

from _common import cpu_name, load_average

ROOT = Path(__file__).resolve().parents[1]


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--spec", default=str(ROOT / "configs" / "ablations" / "quick.yaml"))
    p.add_argument("--json", action="store_true")
    args = p.parse_args(argv)

    from marl_core.ablation.runner import ablate
    from marl_core.ablation.spec import load_spec

    runs = len(load_spec(args.spec).runs)
    result: dict = {"spec": os.path.relpath(args.spec, ROOT), "runs": runs, "cpu_count": os.cpu_count(),
                    "python": platform.python_version(), "platform": platform.platform(),
                    "cpu": cpu_name(), "loadavg_before": load_average(), "target_ratio": 1.8}
    for workers in (1, 2):
        with tempfile.TemporaryDirectory() as tmp:
            t0 = time.perf_counter()
            counts = ablate(args.spec, Path(tmp) / "sweep", workers=workers)
            result[f"workers_{workers}_s"] = round(time.perf_counter() - t0, 2)
            result[f"workers_{workers}_done"] = counts.get("done", 0)
    result["ratio"] = round(result["workers_1_s"] / result["workers_2_s"], 3)
    result["loadavg_after"] = load_average()
    if args.json:
        print(json.dumps(result, indent=2))
    else:
        print(f"{runs} runs: 1 worker {result['workers_1_s']} s, 2 workers {result['workers_2_s']} s, "
              f"speed-up {result['ratio']}x (target {result['target_ratio']}x)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
