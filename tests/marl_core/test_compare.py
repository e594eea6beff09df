"""``marl-core compare``: plain run directories compared with the sweep report's statistics."""

import json
import math

import numpy as np
import pytest

from marl_core import train
from marl_core.ablation import stats
from marl_core.cli import main
from marl_core.config import parse_config


def _tiny(seed: int, radius: int) -> dict:
    return {"env": {"name": "harvest_v0", "num_envs": 2,
                    "params": {"layout": "harvest_tiny", "num_agents": 2, "view_radius": radius, "max_cycles": 30}},
            "learner": {"hidden": 8, "conv_channels": [4], "batch_size": 8, "replay_size": 200, "warmup_steps": 20},
            "train": {"total_steps": 120, "eval_every": 60, "eval_episodes": 2, "checkpoint_every": 60, "seed": seed},
            "log": {"tensorboard": False, "gif_every": 0, "progress": False}}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("compare")
    out = {}
    for radius in (2, 3):
        for seed in (0, 1, 2):
            path = root / f"r{radius}_s{seed}"
            train.run(parse_config(_tiny(seed, radius)), path)
            out[radius, seed] = path
    return out


def test_compare_groups_seeds_under_labels_and_uses_the_reports_statistics(runs, tmp_path, capsys):
    args = [f"near={runs[2, s]}" for s in range(3)] + [f"far={runs[3, s]}" for s in range(3)]
    assert main(["compare", *args, "--out", str(tmp_path / "cmp")]) == 0
    printed = capsys.readouterr().out
    assert printed.startswith("| condition | seeds | return_mean | efficiency | equality | sustainability | peace |")
    table = (tmp_path / "cmp" / "summary.md").read_text()
    assert table == printed[:len(table)]
    rows = {line.split("|")[1].strip(): line for line in table.splitlines()[2:]}
    assert set(rows) == {"`near` (baseline)", "`far`"}
    # the same statistics as a sweep's report: the mean and Student t interval over the three seeds
    eff = [json.loads((runs[3, s] / "summary.json").read_text())["efficiency"] for s in range(3)]
    low, high = stats.t_interval(np.array(eff))
    assert f"{np.mean(eff):.3g} [{low:.3g}, {high:.3g}]" in rows["`far`"]
    report = (tmp_path / "cmp" / "report.md").read_text()
    assert report.startswith("# Comparison of runs") and "## Table 2" in report
    figures = {p.name for p in (tmp_path / "cmp" / "figures").glob("*.png")}
    assert {"curve_efficiency.png", "time_efficiency.png", "bars_efficiency.png"} <= figures
    # the two conditions' configs differ in the view radius only (the seed aside): said, not judged
    from marl_core.ablation.report import summarize_runs

    summary = summarize_runs([("near", runs[2, 0]), ("far", runs[3, 0])], str(tmp_path / "x"))
    assert [(r["key"], r["why"]) for r in summary["config_differences"]["far"]] == [
        ("env.params.view_radius", "differs")]
    assert math.isnan(summary["arms"]["far"]["metrics"]["efficiency"]["mean_ci"][0])  # one seed: no interval


@pytest.mark.parametrize("make_args, message", [
    (lambda r, t: [str(t / "nowhere")], r"^compare: run directory '.*nowhere' does not exist$"),
    (lambda r, t: [str(t)], r"^compare: '.*' is not a run directory \(no config\.yaml\)$"),
    (lambda r, t: [str(r[2, 0]), str(r[2, 0])], r"^compare: two runs are named 'r2_s0'; label them"),
    (lambda r, t: [f"={r[2, 0]}"], r"^compare: '=.*' has an empty label"),
])
def test_bad_inputs_are_one_line_and_write_nothing(make_args, message, runs, tmp_path):
    from marl_core.compare import compare
    from marl_core.errors import RunDirError

    with pytest.raises(RunDirError, match=message):
        compare(make_args(runs, tmp_path), tmp_path / "out")
    assert not (tmp_path / "out").exists()
    with pytest.raises(RunDirError, match=r"--baseline 'zzz' is not a label; expected one of a$"):
        compare([f"a={runs[2, 0]}"], tmp_path / "out2", baseline="zzz")
