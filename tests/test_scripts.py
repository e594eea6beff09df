"""The benchmark scripts still run: each one, at the smallest settings, exits 0 and prints JSON.

They measure and print (docs/performance.md); nothing here checks a figure. This only catches a script
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
    ["bench_team_nets.py", "--agents", "2", "--view-radius", "2", "--act-batch", "4", "--train-batch", "8",
     "--repeats", "1"],
], ids=["bench_env", "bench_train", "bench_team_nets"])
def test_benchmark_runs_and_prints_json(args):
    proc = subprocess.run([sys.executable, str(ROOT / "scripts" / args[0]), *args[1:]], cwd=ROOT,
                          capture_output=True, text=True, timeout=240)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert isinstance(json.loads(proc.stdout), dict)


def test_bench_train_prints_its_headline_keys():
    # scripts/bench_train.py docstring: the contract keys of the benchmark (the figures are not checked)
    args = ["--steps", "32", "--bare-seconds", "0.2", "--warmup-updates", "1", "--num-envs", "2",
            "--new-num-envs", "4", "--agents", "2", "--view-radius", "2", "--max-cycles", "50",
            "--learners", "idqn", "--time-to-result", "--ttr-seeds", "1", "--ttr-eval-every", "1000",
            "--ttr-set", "train.total_steps=2000", "--ttr-set", "learner.warmup_steps=500", "--json"]
    proc = subprocess.run([sys.executable, str(ROOT / "scripts" / "bench_train.py"), *args], cwd=ROOT,
                          capture_output=True, text=True, timeout=240)
    assert proc.returncode == 0, proc.stderr[-2000:]
    report = json.loads(proc.stdout)
    for key in ("env_steps_per_s", "previous_env_steps_per_s", "speedup", "replay_bytes_ratio"):
        assert key in report["idqn"], key
    for name in ("previous", "new"):
        assert report["idqn"][name]["gflop_per_update"] > 0 and report["idqn"][name]["achieved_over_matmul"] > 0
    assert report["matmul_gflops"]["gflops"] > 0
    assert "seconds_to_beat_greedy" in report  # None when 2000 steps do not beat the greedy team
    (run,) = report["time_to_result"]["runs"]
    first = run["curve"][0][0]  # the first vector step at or past 1000 (16 copies: 1008)
    assert 1000 <= first < 1016


def test_bench_train_ppo_rows_report_their_speedup_over_idqn():
    # scripts/bench_train.py docstring, "ppo rows": one setting (new), speedup_vs_idqn from this run
    args = ["--steps", "64", "--seconds", "0.5", "--bare-seconds", "0.2", "--warmup-updates", "1",
            "--new-num-envs", "4", "--ppo-num-envs", "2", "--agents", "2", "--view-radius", "2",
            "--max-cycles", "50", "--learners", "idqn,ppo_central", "--settings", "new", "--json"]
    script = str(ROOT / "scripts" / "bench_train.py")
    proc = subprocess.run([sys.executable, script, *args], cwd=ROOT, capture_output=True, text=True,
                          timeout=240)
    assert proc.returncode == 0, proc.stderr[-2000:]
    report = json.loads(proc.stdout)
    row = report["ppo_central"]
    assert set(row) >= {"env_steps_per_s", "speedup_vs_idqn", "targets_met", "new"}
    assert "previous" not in row
    new = row["new"]
    for key in ("env_steps_per_s", "fractions", "gflop_per_update", "achieved_gflops",
                "achieved_over_matmul", "bare_update_per_s", "env_steps_per_update",
                "loop_updates_per_s"):
        assert key in new, key
    assert set(new["fractions"]) >= {"env_step", "act", "update", "everything_else"}
    assert new["gflop_per_update"] > 0 and new["env_steps_per_update"] == 32 * 2
    assert new["stated_config"]["critic"] == "central" and new["window"]["updates"] >= 1
    expected = round(row["env_steps_per_s"] / report["idqn"]["env_steps_per_s"], 3)
    assert row["speedup_vs_idqn"] == expected == report["speedup_vs_idqn"]["ppo_central"]
    assert isinstance(report["targets_met"]["ppo_central"]["speedup_vs_idqn_min"], bool)
    assert report["targets"]["speedup_vs_idqn_min_ppo_central"] == 8


def test_bench_train_refuses_a_bad_override_in_one_line():
    proc = subprocess.run([sys.executable, str(ROOT / "scripts" / "bench_train.py"), "--time-to-result",
                           "--ttr-set", "train.total_step=5"], cwd=ROOT, capture_output=True, text=True,
                          timeout=60)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert "train.total_step" in proc.stderr.strip().splitlines()[-1]
