"""The sweep report of ``marl_core.ablation.report``: files written, numbers held against the stats functions.

Every sweep here is built by hand: a ledger filled through ``Ledger``'s own methods and run directories with
synthetic ``summary.json`` / ``metrics.jsonl`` / ``config.yaml``. All data is invented (demo only) — no
training runs and the numbers mean nothing about any game.
"""

import csv
import json
import math
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
import yaml

from marl_core.ablation import stats
from marl_core.ablation.ledger import Ledger
from marl_core.ablation.report import FEW_SEEDS, METRICS, report_summary, write_report
from marl_core.ablation.runner import final_metrics
from marl_core.errors import ConfigError, RunDirError

REPS = 200  # small, to keep the tests fast
TAG_COSTS = (0.0, 0.5, 1.0)
ARMS = tuple(f"tag_cost={c}" for c in TAG_COSTS)
BASELINE = ARMS[0]
SEEDS = (0, 1, 2, 3, 4)
AGENTS = ("player_0", "player_1", "player_2")
STEPS = (100, 200, 300, 400, 500)
FAILED = (ARMS[2], 4)  # this run fails
NAN_SUSTAINABILITY = (ARMS[1], 2)  # nobody scores in this run's final evaluation
NO_STEP_300 = (ARMS[0], 1)  # this run's metrics.jsonl lacks the step 300 line


@dataclass(frozen=True)
class FakeRun:
    """What ``Ledger.register`` reads of a ``RunSpec``."""

    run_id: str
    arm: str
    seed: int
    overrides: dict = field(default_factory=dict)


def final_values(k: int, seed: int) -> dict:
    """Invented final metrics of arm k at a seed: each arm better than the last by a known step."""
    returns = {a: 20.0 * (1 + k) + 0.5 * seed + i for i, a in enumerate(AGENTS)}
    return {
        "returns": returns,
        "return_mean": float(np.mean(list(returns.values()))),
        "efficiency": 2.0 + 1.0 * k + 0.1 * seed,
        "equality": 0.7 + 0.05 * k + 0.01 * seed,
        "sustainability": 200.0 + 10.0 * k + seed,
        "peace": 2.0 + 0.2 * k + 0.05 * seed,
    }


def random_values(k: int) -> dict:
    return {"returns": dict.fromkeys(AGENTS, 1.0), "return_mean": 1.0, "efficiency": 0.3,
            "equality": 0.5, "sustainability": 120.0, "peace": 1.5 - 0.1 * k}


def write_run(run_dir: Path, config: dict, final: dict, random: dict | None, steps=STEPS, summary=True,
              baselines: dict | None = None) -> None:
    """A run directory; ``random=None`` leaves out the random team, ``baselines`` adds the mapping of
    non-learning teams that newer summaries carry (an old summary has neither or only ``random``)."""
    run_dir.mkdir(parents=True)
    (run_dir / "config.yaml").write_text(yaml.safe_dump(config))
    with open(run_dir / "metrics.jsonl", "w") as f:
        for s in steps:
            scale = s / STEPS[-1]
            row = {"env_steps": s, "episodes": s // 50,
                   **{m: (None if final[m] is None else final[m] * scale) for m in METRICS},
                   "returns": {a: r * scale for a, r in final["returns"].items()}}
            f.write(json.dumps(row) + "\n")
    if summary:
        data = {"env_steps": steps[-1], "episodes": steps[-1] // 50, "eval_episodes": 4, **final,
                "learner": "idqn", "env": "harvest_v0", "seed": config["train"]["seed"]}
        if random is not None:
            data["random"] = random
        if baselines is not None:
            data["baselines"] = baselines
        (run_dir / "summary.json").write_text(json.dumps(data))


def make_sweep(root: Path, arms=ARMS, seeds=SEEDS, failed=FAILED, nan=NAN_SUSTAINABILITY,
               pending=(), baseline=BASELINE, baseline_sets_axis=True, baselines_of=None, with_random=True,
               smoke_test=None) -> Path:
    """A sweep directory of invented runs (demo data only), every run done unless listed otherwise.

    ``baselines_of(k, seed)`` gives the ``baselines`` mapping of arm k's run at a seed (None: an old summary
    without it); ``with_random=False`` leaves the top-level ``random`` out too."""
    root.mkdir(parents=True, exist_ok=True)
    ledger = Ledger(root / "ledger.sqlite")
    spec = {"base": "harvest_idqn.yaml", "seeds": list(seeds), "set": {"train.total_steps": 500},
            "axes": {"env.params.tag_cost": [TAG_COSTS[i] for i in range(len(arms))]}, "baseline": baseline}
    if smoke_test is not None:
        spec["smoke_test"] = smoke_test
    ledger.set_meta("spec", json.dumps(spec))
    ledger.set_meta("baseline", baseline)
    runs = []
    for k, arm in enumerate(arms):
        for seed in seeds:
            overrides = {"train.total_steps": 500, "env.params.tag_cost": TAG_COSTS[k], "train.seed": seed}
            if k == 0 and not baseline_sets_axis:  # like a named arm that keeps the base config's value
                del overrides["env.params.tag_cost"]
            runs.append(FakeRun(f"run{k}s{seed}", arm, seed, overrides))
    ledger.register(runs, run_dir_of=lambda rid: str(root / "runs" / rid))
    for k, arm in enumerate(arms):
        for seed in seeds:
            rid = f"run{k}s{seed}"
            if (arm, seed) in pending:
                continue
            config = {"env": {"name": "harvest_v0", "params": {"tag_cost": TAG_COSTS[k], "view_radius": 5}},
                      "learner": {"kind": "idqn"}, "train": {"total_steps": 500, "seed": seed}}
            final = final_values(k, seed)
            if (arm, seed) == nan:
                final["sustainability"] = None  # JSON null: NaN as train.write_json writes it
            steps = tuple(s for s in STEPS if s != 300) if (arm, seed) == NO_STEP_300 else STEPS
            ledger.mark_running(rid, worker="test")
            if (arm, seed) == failed:
                write_run(root / "runs" / rid, config, final, random_values(k), steps=STEPS[:2], summary=False)
                ledger.mark_failed(rid, "Traceback (most recent call last):\n  File \"x.py\", line 1\n"
                                        "ValueError: demo failure: replay exploded\n")
                continue
            write_run(root / "runs" / rid, config, final, random_values(k) if with_random else None, steps=steps,
                      baselines=baselines_of(k, seed) if baselines_of else None)
            summary = json.loads((root / "runs" / rid / "summary.json").read_text())
            ledger.mark_done(rid, final_metrics(summary))
    ledger.close()
    return root


def arm_values(arm_index: int, metric: str, seeds=SEEDS) -> np.ndarray:
    """Direct computation: the arm's done runs in seed order, NaN where the run has none."""
    arm = ARMS[arm_index]
    out = []
    for seed in seeds:
        if (arm, seed) == FAILED:
            continue
        v = final_values(arm_index, seed)[metric]
        out.append(math.nan if (arm, seed) == NAN_SUSTAINABILITY and metric == "sustainability" else v)
    return np.array(out, dtype=float)


NO_TORCH = """
import sys
from marl_core.ablation.report import write_report
assert "torch" not in sys.modules, "torch imported by the import"
out = write_report(sys.argv[1], reps=int(sys.argv[2]), seed=0)
assert "torch" not in sys.modules, "torch imported by write_report"
print(out)
"""


@pytest.fixture(scope="module")
def sweep(tmp_path_factory):
    """The 3-arm sweep and its report, written in a fresh interpreter that checks torch is never imported
    (one report serves the file tests and the no-torch test, to keep the suite fast)."""
    root = make_sweep(tmp_path_factory.mktemp("sweep") / "sweep")
    done = subprocess.run([sys.executable, "-c", NO_TORCH, str(root), str(REPS)], capture_output=True,
                          text=True, timeout=120, cwd=Path(__file__).resolve().parents[2])
    assert done.returncode == 0, done.stderr
    return root, Path(done.stdout.strip())


@pytest.fixture(scope="module")
def summary(sweep):
    return report_summary(sweep[0], reps=REPS, seed=0)


# ------------------------------------------------------------------------------------------ the files
def test_every_file_is_written(sweep):
    root, out = sweep
    from PIL import Image

    assert out == root / "report"
    assert (out / "report.md").stat().st_size > 0
    assert (out / "runs.csv").stat().st_size > 0
    expected = ([f"curve_{m}.png" for m in METRICS] + [f"bars_{m}.png" for m in METRICS]
                + [f"axis_env.params.tag_cost_{m}.png" for m in METRICS])
    found = sorted(p.name for p in (out / "figures").glob("*.png"))
    assert found == sorted(expected)  # train.total_steps is the same in every arm: no axis figure
    for name in expected:
        path = out / "figures" / name
        assert path.stat().st_size > 0
        with Image.open(path) as im:
            im.verify()
            assert im.format == "PNG"


def test_runs_csv_has_one_row_per_run(sweep):
    with open(sweep[1] / "runs.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert len(rows) == len(ARMS) * len(SEEDS)
    cols = rows[0].keys()
    for col in ("run_id", "arm", "seed", "state", "duration", "env.params.tag_cost", "train.total_steps",
                "env_steps", "episodes", *METRICS, *(f"return/{a}" for a in AGENTS),
                *(f"random/{m}" for m in METRICS), *(f"baseline/random/{m}" for m in METRICS), "error"):
        assert col in cols
    assert "train.seed" not in cols  # the seed has its own column
    by_key = {(r["arm"], int(r["seed"])): r for r in rows}
    failed = by_key[FAILED]
    assert failed["state"] == "failed"
    assert failed["error"] == "ValueError: demo failure: replay exploded"
    assert failed["efficiency"] == ""
    assert by_key[NAN_SUSTAINABILITY]["sustainability"] == ""
    done = by_key[(ARMS[1], 3)]
    assert done["state"] == "done"
    assert float(done["efficiency"]) == pytest.approx(final_values(1, 3)["efficiency"])
    assert float(done["env.params.tag_cost"]) == 0.5
    assert float(done["random/peace"]) == pytest.approx(random_values(1)["peace"])
    # an old summary without `baselines`: its random team is the one team (report.py docstring)
    assert float(done["baseline/random/peace"]) == pytest.approx(random_values(1)["peace"])


def test_report_md_says_what_was_done(sweep, summary):
    text = (sweep[1] / "report.md").read_text()
    for phrase in ("Mann–Whitney U", "two-sided", "no normal", "Holm", "one family per metric",
                   "Seeds per arm (done/total)", f"`{ARMS[2]}` 4/5", f"`{ARMS[0]}` 5/5", "## Warnings",
                   "Agarwal et al. 2021", "## Notes on method", "Student t", "Welch t", "trimmed-mean t",
                   "Tukey and McLaughlin", "Measured coverage", "per-arm percentile bootstrap",
                   "whose IQM equals its mean because the normal distribution is symmetric",
                   "fewer than 5", "sustainability: 1 of 5 done run(s)", "1 of 15 runs are not done (1 failed)",
                   "ValueError: demo failure: replay exploded", "Table 1", "Table 2", "P(arm > baseline)",
                   "random", "not people", "real-world policy"):
        assert phrase in text, phrase
    failed_row = next(line for line in text.splitlines() if "replay exploded" in line and "|" in line)
    assert f"`{FAILED[0]}`" in failed_row and f"| {FAILED[1]} |" in failed_row
    for link in [line.split("](")[1].rstrip(")") for line in text.splitlines() if "](figures/" in line]:
        assert (sweep[1] / link).is_file()
    for w in summary["warnings"]:  # every warning of the summary is in the warning block
        assert w in text
    assert "stratified" not in text.lower()  # one arm is one sample: its bootstrap is not a stratified one
    assert "bootstrap band" not in text and "bootstrap interval" not in text


def test_report_md_prints_the_measured_coverage(sweep):
    text = (sweep[1] / "report.md").read_text()
    labels = {"mean": "mean of an arm (Table 1)", "iqm": "IQM of an arm (Table 1, bar figures)",
              "difference": "difference of means (Table 2)", "curve": "learning-curve band"}
    row = {kind: next(line for line in text.splitlines() if line.strip().startswith(f"| {label} |"))
           for kind, label in labels.items()}
    for kind, line in row.items():
        assert stats.INTERVAL_METHODS[kind] in line  # documented names: Student t, trimmed-mean t, Welch t
        for n in (3, 5, 10):
            # the constants, re-measured by simulation in test_stats
            assert f"{stats.MEASURED_COVERAGE[kind][n]:.1%}" in line, (kind, n)
    assert "| interval | method | 3 seeds | 5 seeds | 10 seeds |" in text
    boot = stats.MEASURED_COVERAGE["iqm_percentile_bootstrap"]
    assert f"{boot[3]:.1%} at 3 seeds" in text  # why the bootstrap is not used, with its measured coverage


# ------------------------------------------------------------------------------------------ the numbers
def test_arm_numbers_match_stats(summary):
    assert summary["baseline"] == BASELINE
    assert summary["arm_order"] == list(ARMS)
    for k, arm in enumerate(ARMS):
        info = summary["arms"][arm]
        assert info["done"] == (4 if arm == FAILED[0] else 5)
        for m in METRICS:
            expected = stats.summarize(arm_values(k, m), reps=REPS, seed=0)
            got = info["metrics"][m]
            for key in ("n", "mean", "mean_ci", "iqm", "iqm_ci", "std"):
                assert got[key] == pytest.approx(expected[key]), (arm, m, key)
    # hand-computed from the invented data: efficiency 2 + k + 0.1 seed, seeds 0..4 -> mean 2.2 + k
    assert summary["arms"][ARMS[1]]["metrics"]["efficiency"]["mean"] == pytest.approx(3.2)
    assert summary["arms"][ARMS[1]]["metrics"]["sustainability"]["n"] == 4
    assert summary["arms"][ARMS[1]]["metrics"]["sustainability"]["nan_dropped"] == 1
    assert summary["arms"][ARMS[2]]["metrics"]["peace"]["random_mean"] == pytest.approx(1.3)


def test_comparisons_match_stats_and_holm_per_metric(summary):
    comps = summary["comparisons"]
    assert list(comps) == list(ARMS[1:])
    for m in METRICS:
        expected = {ARMS[k]: stats.compare(arm_values(k, m), arm_values(0, m), "mannwhitney", reps=REPS, seed=0)
                    for k in (1, 2)}
        for arm, e in expected.items():
            got = comps[arm][m]
            for key in ("difference", "difference_ci", "p_value", "prob_improvement"):
                assert got[key] == pytest.approx(e[key], nan_ok=True), (arm, m, key)
            assert got["test"] == "mannwhitney"
        holm = stats.holm([expected[a]["p_value"] for a in ARMS[1:]])
        assert [comps[a][m]["p_holm"] for a in ARMS[1:]] == pytest.approx(list(holm))
    # hand-computed from the invented data: arm 2 (seeds 0..3) vs baseline (0..4): 4.15 - 2.2
    assert comps[ARMS[2]]["efficiency"]["difference"] == pytest.approx(1.95)
    assert comps[ARMS[2]]["efficiency"]["prob_improvement"] == 1.0  # every arm-2 seed beats every baseline seed


def test_holm_over_all_comparisons_and_welch(tmp_path):
    root = make_sweep(tmp_path / "sweep")
    s = report_summary(root, test="welch", reps=REPS, holm_family="all")
    family = [(a, m) for m in METRICS for a in ARMS[1:]]
    p = [stats.compare(arm_values(ARMS.index(a), m), arm_values(0, m), "welch", reps=REPS)["p_value"]
         for a, m in family]
    assert [s["comparisons"][a][m]["p_holm"] for a, m in family] == pytest.approx(list(stats.holm(p)))
    out = write_report(root, test="welch", reps=REPS, holm_family="all", figures=False)
    text = (out / "report.md").read_text()
    assert "Welch's t-test" in text and "one family of every arm × metric comparison" in text
    assert "Figures were not drawn" in text and not (out / "figures").exists()


def test_curves_use_steps_every_seed_logged(summary):
    c = summary["curves"][ARMS[0]]
    assert c["env_steps"] == [100, 200, 400, 500]  # seed 1 of this arm lacks step 300
    assert c["seeds"] == 5
    # invented curve: final value x step / 500, so the mean at step 500 is the arm's final mean
    assert c["efficiency"]["mean"][-1] == pytest.approx(summary["arms"][ARMS[0]]["metrics"]["efficiency"]["mean"])
    assert all(lo <= m <= hi for lo, m, hi in zip(c["efficiency"]["ci_low"], c["efficiency"]["mean"],
                                                   c["efficiency"]["ci_high"]))
    assert summary["curves"][ARMS[2]]["seeds"] == 4  # the failed run's partial curve is not used
    assert summary["curves"][ARMS[2]]["env_steps"] == list(STEPS)


def test_numeric_axis_is_found(summary):
    axes = summary["axes"]
    assert list(axes) == ["env.params.tag_cost"]  # train.total_steps does not vary
    assert axes["env.params.tag_cost"]["numeric"]
    assert axes["env.params.tag_cost"]["groups"] == {"all arms": list(ARMS)}


def test_axis_value_of_an_arm_without_the_override_comes_from_config_yaml(tmp_path):
    root = make_sweep(tmp_path / "sweep", baseline_sets_axis=False)
    axis = report_summary(root, reps=REPS)["axes"]["env.params.tag_cost"]
    assert axis["numeric"]
    assert axis["values"] == dict(zip(ARMS, TAG_COSTS))  # the baseline's 0.0 read from its config.yaml


# ------------------------------------------------------------------------------------------ edge cases
def test_one_arm_sweep_has_no_comparison_table(tmp_path):
    root = make_sweep(tmp_path / "one", arms=ARMS[:1], seeds=(0, 1), failed=None, nan=None,
                      pending=[(ARMS[0], 1)])
    out = write_report(root, reps=REPS)
    text = (out / "report.md").read_text()
    assert "No comparison table: the sweep has one arm" in text
    assert "| p (" not in text
    s = report_summary(root, reps=REPS)
    assert s["comparisons"] == {}
    eff = s["arms"][ARMS[0]]["metrics"]["efficiency"]
    assert eff["n"] == 1 and all(math.isnan(v) for v in eff["mean_ci"])  # stats docs: no interval from 1 seed
    assert all(math.isnan(v) for v in eff["iqm_ci"])  # stats docs: no interval from 1 seed
    assert "1 of 2 runs are not done (1 pending)" in text
    assert "has 1 done seed" in text and "no interval can be computed" in text
    # one seed cannot be shown better than the random team (report.py docstring: the lower end must be above it)
    assert {(d["metric"], d["reason"]) for d in s["not_better"]} == {(m, "no_interval") for m in METRICS}
    assert (f"- `{ARMS[0]}`: efficiency 2 (1 seed, no interval) cannot be shown better than the `random` team's "
            "0.3 (an interval needs at least 2 seeds)") in text  # invented data: efficiency 2 + 0 + 0.1 * 0
    assert sorted(p.name for p in (out / "figures").glob("bars_*.png")) == sorted(f"bars_{m}.png" for m in METRICS)


def test_done_run_without_summary_uses_the_ledger(tmp_path):
    root = make_sweep(tmp_path / "sweep")
    (root / "runs" / "run1s3" / "summary.json").unlink()
    s = report_summary(root, reps=REPS)
    assert s["arms"][ARMS[1]]["metrics"]["efficiency"]["mean"] == pytest.approx(3.2)
    assert any("run1s3" in w and "from the ledger" in w for w in s["warnings"])


def test_not_a_sweep_directory(tmp_path):
    with pytest.raises(RunDirError, match="not a sweep directory"):
        write_report(tmp_path)


@pytest.mark.parametrize("kwargs, word", [
    ({"test": "ttest"}, "test = 'ttest'"),
    ({"reps": 0}, "reps = 0"),
    ({"seed": -1}, "seed = -1"),
    ({"holm_family": "arm"}, "holm_family = 'arm'"),
], ids=["test", "reps", "seed", "holm_family"])
def test_bad_arguments(sweep, kwargs, word):
    with pytest.raises(ConfigError, match=word):
        report_summary(sweep[0], **kwargs)


def test_report_never_imports_torch(sweep):
    # the `sweep` fixture wrote the report in a subprocess that asserts "torch" not in sys.modules after
    # the import and after write_report; here: it did finish and wrote its report
    root, out = sweep
    assert out == root / "report" and (out / "report.md").is_file()


# ------------------------------------------------------------------------------ non-learning teams
def team_values(k: int, seed: int) -> dict:
    """Invented ``baselines`` of arm k's run at a seed (demo data only): ``greedy`` forages well (strong on
    efficiency, with a wobble that averages out over seeds 0..4), ``stay`` never moves (all returns 0, so it is
    perfectly equal and never tags: peace = 3 agents), ``random`` as in the older summaries."""
    wobble = 0.01 * (seed - 2)  # sums to 0 over seeds 0..4 (hand-computed)
    rand = random_values(k)
    return {
        "random": {"eval_episodes": 4, "episode_length": 100.0, **rand},
        "stay": {"eval_episodes": 4, "returns": dict.fromkeys(AGENTS, 0.0), "return_mean": 0.0,
                 "episode_length": 100.0, "efficiency": 0.0, "equality": 1.0, "sustainability": None,
                 "peace": 3.0},
        "greedy": {"eval_episodes": 4, "returns": dict.fromkeys(AGENTS, 5.0), "return_mean": 5.0,
                   "episode_length": 100.0, "efficiency": 3.3 + wobble, "equality": 0.4, "sustainability": 150.0,
                   "peace": 1.0},
    }


@pytest.fixture(scope="module")
def team_sweep(tmp_path_factory):
    """Three arms of 5 seeds each, every run done, every summary with ``baselines``."""
    root = make_sweep(tmp_path_factory.mktemp("teams") / "sweep", failed=None, nan=None, baselines_of=team_values)
    out = write_report(root, reps=REPS, figures=False)
    return report_summary(root, reps=REPS), (out / "report.md").read_text(), out


def test_team_means_and_the_strongest_team(team_sweep):
    s, text, _ = team_sweep
    assert s["baseline_teams"] == ["random", "stay", "greedy"]  # order of first appearance in summary.json
    eff = s["arms"][ARMS[0]]["metrics"]["efficiency"]
    # invented data (team_values), the greedy wobble averages out over seeds 0..4
    assert eff["teams"] == pytest.approx({"random": 0.3, "stay": 0.0, "greedy": 3.3})
    assert eff["best_team"] == "greedy" and eff["best_team_mean"] == pytest.approx(3.3)
    sus = s["arms"][ARMS[1]]["metrics"]["sustainability"]
    assert set(sus["teams"]) == {"random", "greedy"}  # stay's sustainability is null (NaN): left out
    assert sus["best_team"] == "greedy"  # 150 > random's 120 (invented data)
    assert "| arm | n | mean [95% CI, Student t] | IQM [95% CI, trimmed t] | std | random | stay | greedy |" in text
    row = next(line for line in text.split("### efficiency")[1].splitlines() if line.startswith(f"| `{ARMS[0]}`"))
    assert row.endswith("| 0.3 | 0 | **3.3** |")  # the strongest team in bold


def test_arms_not_better_than_the_strongest_team_are_named(team_sweep):
    s, text, _ = team_sweep
    # invented data: efficiency 2 + k + 0.1 seed -> means 2.2, 3.2, 4.2 with Student t half-width
    # t_{0.975, 4} * 0.1 * sd(0..4) / sqrt(5) = 2.776 * 0.1581 / 2.236 = 0.196 (scipy.stats.t.ppf, hand-computed);
    # greedy 3.3 lies above arm 0's interval, inside arm 1's and below arm 2's. equality (0.72, 0.77, 0.815 +- 0.02)
    # and peace (2.1, 2.3, 2.5 +- 0.1) lie wholly below stay's 1.0 and 3.0.
    expected = {(ARMS[0], "efficiency", "greedy", "below"), (ARMS[1], "efficiency", "greedy", "reaches_below")}
    expected |= {(a, "equality", "stay", "below") for a in ARMS} | {(a, "peace", "stay", "below") for a in ARMS}
    assert {(d["arm"], d["metric"], d["team"], d["reason"]) for d in s["not_better"]} == expected
    for k, arm in enumerate(ARMS):
        runs = [final_values(k, seed)["efficiency"] for seed in SEEDS]  # every run done in this sweep
        low, high = stats.t_interval(runs, 0.95)  # the interval Table 1 shows (held against scipy in test_stats)
        assert s["arms"][arm]["metrics"]["efficiency"]["mean_ci"] == pytest.approx((low, high))
    assert ("- `tag_cost=0.0`: efficiency 2.2 [2.004, 2.396] is not better than the `greedy` team's 3.3 "
            "(the whole interval lies below it)") in text  # numbers: the comment above, 4 significant digits
    assert ("- `tag_cost=0.5`: efficiency 3.2 [3.004, 3.396] is not better than the `greedy` team's 3.3 "
            "(interval reaches below it)") in text
    assert "## Against the non-learning teams" in text and "Every other arm and metric" in text


def test_arm_better_than_every_team_gets_no_sentence(team_sweep):
    s, text, _ = team_sweep
    eff = s["arms"][ARMS[2]]["metrics"]["efficiency"]
    assert eff["beats_best_team"] is True and eff["mean_ci"][0] > 3.3  # 4.2 - 0.196 > 3.3 (hand-computed above)
    assert f"`{ARMS[2]}`: efficiency" not in text
    for arm in ARMS:  # return_mean (22, 42, 62) and sustainability (202, 212, 222) beat greedy's 5 and 150
        for m in ("return_mean", "sustainability"):
            assert s["arms"][arm]["metrics"][m]["beats_best_team"] is True, (arm, m)


def test_runs_csv_has_a_column_per_team_and_metric(team_sweep):
    with open(team_sweep[2] / "runs.csv", newline="") as f:
        rows = {r["run_id"]: r for r in csv.DictReader(f)}
    cols = next(iter(rows.values())).keys()
    for team in ("random", "stay", "greedy"):
        for m in METRICS:
            assert f"baseline/{team}/{m}" in cols
    assert float(rows["run0s3"]["baseline/greedy/efficiency"]) == pytest.approx(3.31)  # 3.3 + 0.01 (seed 3)
    assert rows["run1s0"]["baseline/stay/sustainability"] == ""  # JSON null: NaN, written empty
    assert float(rows["run2s4"]["baseline/stay/peace"]) == 3.0  # invented data


def test_old_summaries_without_baselines_fall_back_to_random(summary, sweep):
    # the module fixture's summaries are old ones: `random` only, no `baselines`
    text = (sweep[1] / "report.md").read_text()
    assert summary["baseline_teams"] == ["random"]
    for k, arm in enumerate(ARMS):
        peace = summary["arms"][arm]["metrics"]["peace"]
        assert peace["teams"] == pytest.approx({"random": random_values(k)["peace"]})  # invented: 1.5 - 0.1 k
        assert peace["best_team"] == "random" and peace["beats_best_team"] is True
    assert summary["not_better"] == []
    assert "Every arm with results is better than its strongest non-learning team on every metric." in text


def test_no_team_at_all(tmp_path):
    root = make_sweep(tmp_path / "sweep", with_random=False)
    s = report_summary(root, reps=REPS)
    assert s["baseline_teams"] == [] and s["not_better"] == []
    assert s["arms"][ARMS[0]]["metrics"]["efficiency"]["beats_best_team"] is None  # documented: no team
    text = (write_report(root, reps=REPS, figures=False) / "report.md").read_text()
    assert "No run records a non-learning team" in text


def test_every_bundled_spec_has_enough_seeds_for_the_report():
    # report.FEW_SEEDS (5, common practice (no source)): below it the report warns that intervals are rough;
    # the bundled specs are examples to copy, so none of them starts below it.
    specs = sorted((Path(__file__).resolve().parents[2] / "configs" / "ablations").glob("*.yaml"))
    assert specs
    for path in specs:
        seeds = yaml.safe_load(path.read_text(encoding="utf-8"))["seeds"]
        assert len(seeds) >= FEW_SEEDS, (path.name, seeds)


def test_the_ledger_copy_keeps_the_non_learning_teams(tmp_path):
    root = make_sweep(tmp_path / "sweep", failed=None, nan=None, baselines_of=team_values)
    (root / "runs" / "run1s3" / "summary.json").unlink()  # the report falls back to the ledger's copy
    s = report_summary(root, reps=REPS)
    run = next(r for r in s["runs"] if r["run_id"] == "run1s3")
    assert run["baselines"]["greedy"]["efficiency"] == pytest.approx(3.3 + 0.01)  # team_values(1, 3)
    assert run["baselines"]["stay"]["peace"] == 3.0


# ------------------------------------------------------------------------------------ smoke tests
@pytest.mark.parametrize("flag", [True, False, None])
def test_report_says_when_a_sweep_is_a_smoke_test(tmp_path, flag, capsys):
    from marl_core.ablation.report import is_smoke_test
    from marl_core.cli import main

    root = make_sweep(tmp_path / "sweep", smoke_test=flag)
    out = write_report(root, figures=False)
    text = (out / "report.md").read_text()
    head = text.split("\n## ", 1)[0]
    # report.py module docstring: the note comes first, in the header, only for `smoke_test: true`
    assert ("**Smoke test.**" in head) is (flag is True)
    assert ("smoke_test: true" in text) is (flag is True)
    assert report_summary(root, reps=REPS)["smoke_test"] is (flag is True)
    assert is_smoke_test(root) is (flag is True)
    assert main(["report", str(root)]) == 0
    assert ("a smoke test" in capsys.readouterr().out) is (flag is True)  # the CLI says it too


def test_report_files_have_the_usual_mode(sweep):
    """report.md and runs.csv get the mode of any new file, like the figures beside them (not 0600)."""
    import os
    import stat

    mask = os.umask(0)
    os.umask(mask)
    out = sweep[1]
    modes = {p.name: stat.S_IMODE(p.stat().st_mode) for p in
             [out / "report.md", out / "runs.csv", *sorted((out / "figures").glob("*.png"))[:1]]}
    assert set(modes.values()) == {0o666 & ~mask}, modes  # marl_core/files.py docstring


# ------------------------------------------------------------------------------ config differences
def _sweep_from_spec(root: Path, spec: dict) -> Path:
    """A sweep directory whose ledger and run configs come from a real parsed spec (the runs' metrics are
    invented, demo only), as ``ablate`` would record them."""
    from marl_core.ablation.spec import parse_spec
    from marl_core.config import config_to_dict

    sweep = parse_spec(spec, Path(__file__).resolve().parents[2] / "configs")
    root.mkdir(parents=True)
    ledger = Ledger(root / "ledger.sqlite")
    ledger.set_meta("spec", json.dumps(spec))
    ledger.set_meta("baseline", sweep.baseline)
    ledger.set_meta("sources", json.dumps(sweep.sources))
    ledger.register(sweep.runs, run_dir_of=lambda rid: str(root / "runs" / rid))
    for k, run in enumerate(sweep.runs):
        write_run(root / "runs" / run.run_id, config_to_dict(run.config), final_values(k, run.seed),
                  random_values(0))
        ledger.mark_running(run.run_id, worker="test")
        ledger.mark_done(run.run_id, final_metrics(json.loads((root / "runs" / run.run_id / "summary.json")
                                                              .read_text())))
    ledger.close()
    return root


def test_switching_the_learner_kind_shows_kind_defaults_and_no_inherited_difference(tmp_path):
    root = _sweep_from_spec(tmp_path / "kinds", {
        "base": "harvest_idqn.yaml", "seeds": [0, 1], "set": {"train.total_steps": 500},
        "arms": {"dqn": {}, "critic": {"learner.kind": "maddpg", "learner.lr": 3e-4}}, "baseline": "dqn"})
    s = report_summary(root, reps=REPS)
    rows = {r["key"]: r for r in s["config_differences"]["critic"]}
    assert rows["learner.kind"]["why"] == "asked" and rows["learner.lr"]["why"] == "asked"
    assert (rows["learner.gamma"]["value"], rows["learner.gamma"]["baseline_value"]) == (0.95, 0.99)
    assert rows["learner.gamma"]["why"] == "kind default"  # maddpg's own default, config.py's table
    assert rows["learner.double"]["absent"] and rows["learner.double"]["why"] == "kind default"
    assert not [r for r in rows.values() if r["why"] == "inherited"]
    text = (write_report(root, reps=REPS) / "report.md").read_text()
    assert "## Config differences from the baseline arm" in text
    assert "Inherited differences: **0** (no confound from the config)." in text
    assert "| `critic` | `learner.gamma` | `0.95` | `0.99` | kind default |" in text


def test_a_base_value_kept_across_a_kind_switch_is_marked_inherited_even_when_equal(tmp_path):
    base = {"env": {"name": "harvest_v0", "params": {"num_agents": 2}},
            "learner": {"kind": "idqn", "share_parameters": True}, "train": {"total_steps": 500}}
    root = _sweep_from_spec(tmp_path / "kept", {
        "base": base, "seeds": [0, 1], "arms": {"dqn": {}, "critic": {"learner.kind": "maddpg"}},
        "baseline": "dqn"})
    s = report_summary(root, reps=REPS)
    rows = {r["key"]: r for r in s["config_differences"]["critic"]}
    assert rows["learner.share_parameters"]["why"] == "inherited"
    assert rows["learner.share_parameters"]["value"] is True is rows["learner.share_parameters"]["baseline_value"]
    assert any("`critic` differs from the baseline `dqn` in config keys the spec did not ask for (inherited): "
               "learner.share_parameters" in w for w in s["warnings"])


def test_an_unasked_difference_outside_the_learner_is_inherited(tmp_path):
    # a sweep recorded without 'sources' (older ledgers): judged from the runs' overrides alone
    root = make_sweep(tmp_path / "old", arms=ARMS[:2], seeds=(0, 1), failed=None, nan=None)
    config = yaml.safe_load((root / "runs" / "run1s0" / "config.yaml").read_text())
    for seed in (0, 1):
        config["env"]["params"]["view_radius"] = 7  # differs from the baseline, asked for by nobody
        config["train"]["seed"] = seed
        (root / "runs" / f"run1s{seed}" / "config.yaml").write_text(yaml.safe_dump(config))
    rows = {r["key"]: r["why"] for r in report_summary(root, reps=REPS)["config_differences"][ARMS[1]]}
    assert rows == {"env.params.tag_cost": "asked", "env.params.view_radius": "inherited"}


def test_findings_over_training_apply_the_dip_and_recovery_test_to_each_seed(tmp_path):
    root = _sweep_from_spec(tmp_path / "dip", {"base": "harvest_idqn.yaml", "seeds": [0, 1, 2],
                                               "set": {"train.total_steps": 500}, "over_training": True})
    dip = [1.0, 1.0, 1.0, 0.8, 0.6, 0.4, 0.3, 0.35, 0.5, 0.7, 0.8, 0.9, 0.9, 0.9, 0.9, 0.9, 0.9, 0.9, 0.9, 0.9]
    for k, run in enumerate(sorted((root / "runs").iterdir())):  # invented curves (demo only)
        with open(run / "metrics.jsonl", "w") as f:
            for i, v in enumerate(dip):
                v = v + (0.01 if i % 2 else -0.01) * (k + 1)
                f.write(json.dumps({"env_steps": 100 * (i + 1), "efficiency": v, "sustainability": 100 * v,
                                    "peace": 2.0, "return_mean": v}) + "\n")
    s = report_summary(root, reps=REPS)
    eff = s["over_training"]["base"]["efficiency"]
    assert eff["judged"] == 3 and eff["shows"] == 3 and eff["verdict"] == "dip and recovery"
    by_seed = {x["seed"]: x for x in eff["seeds"]}
    assert by_seed[0]["at"] == 700  # the lowest 3-point mean is centred on the 7th evaluation
    assert s["over_training"]["base"]["peace"]["verdict"] == "no dip claimed"  # a flat curve
    text = (write_report(root, reps=REPS) / "report.md").read_text()
    assert "## Findings over training" in text and "| `base` | efficiency | 3 of 3 |" in text


def test_intervals_are_clipped_to_the_metrics_range_and_bars_show_each_seed(tmp_path):
    root = _sweep_from_spec(tmp_path / "clip", {"base": "harvest_idqn.yaml", "seeds": [0, 1, 2],
                                                "set": {"train.total_steps": 500}})
    for run, peace in zip(sorted((root / "runs").iterdir()), (2.9, 3.0, 3.0)):  # invented (demo only)
        data = json.loads((run / "summary.json").read_text())
        data["peace"] = peace  # at most N = 3 agents not tagged out per step (envs/metrics.py)
        data["return_mean"] = -5.0 - peace  # negative returns
        (run / "summary.json").write_text(json.dumps(data))
    s = report_summary(root, reps=REPS)
    peace = s["arms"]["base"]["metrics"]["peace"]
    unclipped = stats.t_interval([2.9, 3.0, 3.0])
    assert unclipped[1] > 3.0  # the t interval crosses the maximum ...
    assert peace["mean_ci"] == (pytest.approx(unclipped[0]), 3.0) and peace["clipped"]  # ... and is clipped
    assert peace["range"] == (0.0, 3.0) and sorted(peace["values"]) == [2.9, 3.0, 3.0]
    text = (write_report(root, reps=REPS) / "report.md").read_text()
    assert "clipped here: `base` peace" in text


def test_a_metric_appears_only_where_the_game_declares_it(tmp_path):
    # a matrix game declares efficiency alone (envs.declared_metrics): no equality, sustainability or peace
    # in the tables, findings or figures
    root = make_sweep(tmp_path / "matrix", arms=ARMS[:2], seeds=(0, 1, 2), failed=None, nan=None)
    for summary_file in (root / "runs").glob("*/summary.json"):
        data = json.loads(summary_file.read_text())
        data["metrics"] = ["efficiency"]
        summary_file.write_text(json.dumps(data))
    s = report_summary(root, reps=REPS)
    assert s["metrics"] == ["return_mean", "efficiency"]
    assert not {"equality", "sustainability", "peace"} & set(s["measures"])
    out = write_report(root, reps=REPS)
    drawn = {p.name for p in (out / "figures").glob("*.png")}
    assert {n for n in drawn if not n.startswith("axis_")} == {
        f"{kind}_{m}.png" for kind in ("bars", "curve") for m in ("return_mean", "efficiency")}
    assert all(n.endswith(("_return_mean.png", "_efficiency.png")) for n in drawn)
    assert "### peace" not in (out / "report.md").read_text()


def test_curves_against_wall_clock_time_when_runs_record_it(tmp_path):
    root = _sweep_from_spec(tmp_path / "clock", {"base": "harvest_idqn.yaml", "seeds": [0, 1],
                                                 "set": {"train.total_steps": 500}})
    for run in (root / "runs").iterdir():  # invented times (demo only): seed k's run is 10 k s slower
        k = yaml.safe_load((run / "config.yaml").read_text())["train"]["seed"]
        rows = [json.loads(x) for x in (run / "metrics.jsonl").read_text().splitlines()]
        with open(run / "metrics.jsonl", "w") as f:
            for i, row in enumerate(rows):
                f.write(json.dumps({**row, "wall_seconds": 60.0 * (i + 1) + 10 * k}) + "\n")
    s = report_summary(root, reps=REPS)
    c = s["curves"]["base"]
    assert c["wall_seconds_per_seed"] == [[60.0 * (i + 1) + 10 * k for i in range(len(STEPS))] for k in (0, 1)]
    assert c["wall_seconds"] == pytest.approx([60.0 * (i + 1) + 5 for i in range(len(STEPS))])
    out = write_report(root, reps=REPS)
    assert (out / "figures" / "time_efficiency.png").is_file()
    assert "Learning curves against wall-clock minutes" in (out / "report.md").read_text()
