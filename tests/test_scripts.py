"""The benchmark scripts still run: each one, at the smallest settings, exits 0 and prints JSON.

They measure and print (README, performance); nothing here checks a figure. This only catches a script
left behind by a change to the code it drives.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize("args", [
    ["bench_env.py", "--num-envs", "2", "--agents", "2", "--seconds", "0.2", "--repeats", "1", "--json"],
    ["bench_train.py", "--steps", "64", "--bare-seconds", "0.3", "--warmup-updates", "1", "--num-envs", "2",
     "--agents", "2", "--view-radius", "2", "--max-cycles", "50", "--json"],
], ids=["bench_env", "bench_train"])
def test_benchmark_runs_and_prints_json(args):
    proc = subprocess.run([sys.executable, str(ROOT / "scripts" / args[0]), *args[1:]], cwd=ROOT,
                          capture_output=True, text=True, timeout=240)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert isinstance(json.loads(proc.stdout), dict)
