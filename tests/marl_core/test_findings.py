"""The report's findings (``marl_core.ablation.report``): one sentence per measure, its direction, effect,
interval and corrected p, and whether it agrees with the spec's ``expect``; the behaviour measures beside
the metrics; the spec's ``expect`` and ``against`` keys.

Every sweep here is built by hand (a ledger through ``Ledger``'s own methods, run directories with
synthetic files). All data is invented (demo only): the numbers mean nothing about any game.
"""

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
import yaml
from scipy import stats as sps

from marl_core.ablation import stats
from marl_core.ablation.ledger import Ledger
from marl_core.ablation.report import report_summary, write_report
from marl_core.ablation.runner import final_metrics
from marl_core.ablation.spec import parse_spec
from marl_core.cli import main
from marl_core.errors import ConfigError

SEEDS = (0, 1, 2, 3, 4)
AGENTS = ("player_0", "player_1")


@dataclass(frozen=True)
class FakeRun:
    run_id: str
    arm: str
    seed: int
    overrides: dict = field(default_factory=dict)


def values(level: float, seed: int) -> dict:
    """Invented final figures at an axis level: tags fall and peace rises with the level, efficiency does
    not move beyond noise, waste removed rises."""
    wobble = (-1) ** seed * 0.01 * seed
    return {"returns": dict.fromkeys(AGENTS, 10.0 + wobble), "return_mean": 10.0 + wobble,
            "efficiency": 0.2 + wobble, "equality": 0.9 + wobble, "sustainability": 50.0 + wobble,
            "peace": 1.0 + 0.3 * level + 0.02 * seed,
            "behaviour": {"tags_fired": 20.0 - 4.0 * level + 0.1 * seed, "times_tagged": 3.0 + wobble,
                          "resources_taken": 30.0 + wobble, "waste_removed": 2.0 * level + 0.05 * seed}}


def team_values(seed: int) -> dict:
    return {"return_mean": 12.0, "efficiency": 0.25, "equality": 0.9, "sustainability": 60.0 + seed,
            "peace": 2.0, "returns": dict.fromkeys(AGENTS, 12.0),
            "behaviour": {"tags_fired": 0.0, "times_tagged": 0.0, "resources_taken": 35.0}}


def make_sweep(root: Path, spec: dict, arms: dict[str, dict], level_of: dict[str, float]) -> Path:
    """A sweep of done runs: ``arms`` maps arm name -> its overrides; ``level_of`` its level in values()."""
    root.mkdir(parents=True)
    ledger = Ledger(root / "ledger.sqlite")
    ledger.set_meta("spec", json.dumps(spec))
    ledger.set_meta("baseline", spec.get("baseline", next(iter(arms))))
    runs = [FakeRun(f"{i}s{s}", arm, s, {**o, "train.seed": s}) for i, (arm, o) in enumerate(arms.items())
            for s in SEEDS]
    ledger.register(runs, run_dir_of=lambda rid: str(root / "runs" / rid))
    for r in runs:
        d = root / "runs" / r.run_id
        d.mkdir(parents=True)
        (d / "config.yaml").write_text(yaml.safe_dump({"env": {"name": "harvest_v0"}, "learner": {"kind": "idqn"},
                                                       "train": {"seed": r.seed}}))
        final = values(level_of[r.arm], r.seed)
        (d / "metrics.jsonl").write_text(json.dumps({"env_steps": 100, **final}) + "\n")
        summary = {"env_steps": 100, "episodes": 2, **final, "baselines": {"restrained": team_values(r.seed)}}
        (d / "summary.json").write_text(json.dumps(summary))
        ledger.mark_running(r.run_id, worker="test")
        ledger.mark_done(r.run_id, final_metrics(summary))
    ledger.close()
    return root


AXIS = "env.params.regrow_scale"
LEVELS = (0.5, 1.0, 2.0)


@pytest.fixture(scope="module")
def axis_sweep(tmp_path_factory):
    arms = {f"regrow_scale={v}": {AXIS: v} for v in LEVELS}
    spec = {"base": "x.yaml", "seeds": list(SEEDS), "axes": {AXIS: list(LEVELS)}, "baseline": "regrow_scale=0.5",
            "expect": {"tags_fired": "decreases", "peace": "increases", "efficiency": "no_change",
                       "equality": "increases"}}
    return make_sweep(tmp_path_factory.mktemp("axis") / "sweep", spec, arms, dict(zip(arms, LEVELS)))


# ------------------------------------------------------------------------------------------- stats
def test_trend_is_spearmans_rank_correlation_on_a_hand_worked_example():
    # Spearman's rho = 1 - 6 sum d^2 / (n (n^2 - 1)) without ties, from memory:
    # docs/sources.md, "Spearman rank correlation and the paired t-test"
    # ranks of y = 2, 1, 4, 3, 5 against 1..5 differ by d = 1, -1, 1, -1, 0, so rho = 1 - 24 / 120 = 0.8;
    # its p is that of t = rho sqrt((n - 2) / (1 - rho^2)) on n - 2 = 3 degrees of freedom
    t = stats.trend([1, 2, 3, 4, 5], [2, 1, 4, 3, 5])
    assert t["n"] == 5 and t["rho"] == pytest.approx(0.8)
    t_stat = 0.8 * math.sqrt(3 / (1 - 0.64))
    assert t["p_value"] == pytest.approx(2 * sps.t.sf(t_stat, 3), rel=1e-9)
    assert math.isnan(stats.trend([1, 1, 1], [1, 2, 3])["rho"])  # no spread in x: nothing to rank against


def test_paired_difference_is_the_one_sample_t_on_the_differences():
    # differences 1, 2, 3: mean 2, s = 1, se = 1 / sqrt 3, t = 2 sqrt 3 on 2 df (the paired t-test, from
    # memory: docs/sources.md, "Spearman rank correlation and the paired t-test")
    p = stats.paired([3.0, 5.0, 7.0], [2.0, 3.0, 4.0])
    se, q = 1 / math.sqrt(3), sps.t.ppf(0.975, 2)
    assert p["difference"] == pytest.approx(2.0)
    assert p["difference_ci"] == pytest.approx((2 - q * se, 2 + q * se))
    assert p["p_value"] == pytest.approx(2 * sps.t.sf(2 / se, 2))


# ------------------------------------------------------------------------------------------- findings
def test_findings_along_a_numeric_axis_state_direction_effect_and_agreement(axis_sweep):
    summary = report_summary(axis_sweep)
    assert summary["findings_along"] == AXIS
    found = {f["measure"]: f for f in summary["findings"]}
    assert set(found) >= {"efficiency", "peace", "tags_fired", "waste_removed"}  # behaviour measures too
    tags = found["tags_fired"]
    assert tags["observed"] == "decreases" and tags["verdict"] == "agrees"
    # the effect is the difference between the arms at the axis's two ends: level 2 against level 0.5
    hi = np.array([values(2.0, s)["behaviour"]["tags_fired"] for s in SEEDS])
    lo = np.array([values(0.5, s)["behaviour"]["tags_fired"] for s in SEEDS])
    assert tags["difference"] == pytest.approx(hi.mean() - lo.mean())
    assert tags["difference_ci"] == pytest.approx(stats.welch_interval(hi, lo))
    assert found["peace"]["verdict"] == "agrees"
    assert found["efficiency"]["observed"] == "no_change" and found["efficiency"]["verdict"] == "agrees"
    assert found["equality"]["verdict"] == "disagrees"  # the data show no rise
    assert found["resources_taken"]["expected"] is None and found["resources_taken"]["verdict"] is None
    # Holm over the measures tested: the corrected p is at least the raw one
    assert tags["p_holm"] >= tags["p_value"]
    assert "tags_fired falls as env.params.regrow_scale rises" in tags["sentence"]
    assert "Expected: decreases; the data agree." in tags["sentence"]


def test_the_report_shows_the_findings_and_the_behaviour_tables(axis_sweep):
    out = write_report(axis_sweep, figures=False)
    text = (out / "report.md").read_text()
    head = text.index("## Findings")
    assert head < text.index("## Notes on method")
    findings = text[head:text.index("## Notes on method")]
    lines = [ln for ln in findings.splitlines() if ln.startswith("- ")]
    # the expected measures first, one sentence each, then the rest
    assert [ln.split()[1] for ln in lines[:4]] == ["efficiency", "equality", "peace", "tags_fired"]
    assert "### Behaviour" in text and "### waste_removed" in text
    saved = json.loads((out / "findings.json").read_text())
    assert saved["along"] == AXIS and len(saved["findings"]) == len(lines)
    header = (out / "runs.csv").read_text().splitlines()[0].split(",")
    assert {"tags_fired", "waste_removed"} <= set(header)


def test_report_command_prints_the_expected_findings(axis_sweep, capsys):
    assert main(["report", str(axis_sweep)]) == 0
    out = capsys.readouterr().out.splitlines()
    said = [ln for ln in out if "Expected:" in ln]
    assert len(said) == 4 and any(ln.startswith("tags_fired falls") for ln in said)
    assert out[-1].endswith("more finding(s) in report.md, section Findings")


def test_findings_against_the_baseline_without_a_numeric_axis(tmp_path):
    arms = {"selfish": {"reward.prosocial": 0.0}, "team": {"reward.prosocial": 1.0},
            "ineq": {"reward.inequity_aversion.alpha": 5.0}}
    spec = {"base": "x.yaml", "seeds": list(SEEDS), "arms": {a: o for a, o in arms.items()},
            "baseline": "selfish", "expect": {"waste_removed": "increases"}}
    sweep = make_sweep(tmp_path / "s", spec, arms, {"selfish": 0.0, "team": 2.0, "ineq": 0.0})
    summary = report_summary(sweep)
    assert summary["findings_along"] is None
    found = {(f["arm"], f["measure"]): f for f in summary["findings"]}
    team = found[("team", "waste_removed")]
    assert team["against"] == "selfish" and team["observed"] == "increases" and team["verdict"] == "agrees"
    assert team["p_holm"] == summary["comparisons"]["team"]["waste_removed"]["p_holm"]  # Table 2's number
    assert found[("ineq", "waste_removed")]["verdict"] == "disagrees"  # the same data as the baseline


def test_findings_of_one_arm_against_a_scripted_team(tmp_path):
    spec = {"base": "x.yaml", "seeds": list(SEEDS), "against": "restrained",
            "expect": {"sustainability": "decreases"}}
    sweep = make_sweep(tmp_path / "s", spec, {"base": {}}, {"base": 1.0})
    found = {f["measure"]: f for f in report_summary(sweep)["findings"]}
    s = found["sustainability"]
    learned = np.array([values(1.0, x)["sustainability"] for x in SEEDS])
    team = np.array([team_values(x)["sustainability"] for x in SEEDS])
    assert s["difference"] == pytest.approx((learned - team).mean())
    assert s["observed"] == "decreases" and s["verdict"] == "agrees" and s["against"] == "restrained"
    assert "waste_removed" not in found  # the team does not record it: nothing to pair


# ------------------------------------------------------------------------------------------- spec keys
BASE = {"env": {"name": "harvest_v0", "params": {"layout": "harvest_tiny", "num_agents": 2}},
        "learner": {"kind": "idqn"}, "train": {"total_steps": 100}}


@pytest.mark.parametrize(("expect", "message"), [
    ({"tag_fired": "decreases"}, "expect.tag_fired is not a measure the report knows; did you mean 'tags_fired'"),
    ({"peace": "up"}, "expect.peace = 'up' is not allowed: expected one of increases, decreases, no_change"),
    (["peace"], "expect = ['peace'] is not allowed"),
])
def test_a_bad_expect_is_a_one_line_error(expect, message):
    with pytest.raises(ConfigError) as err:
        parse_spec({"base": BASE, "seeds": [0], "expect": expect})
    assert message in str(err.value) and "\n" not in str(err.value)


def test_against_needs_one_arm_and_a_measured_team():
    with pytest.raises(ConfigError, match="compares one arm with a non-learning team; this spec has 2 arms"):
        parse_spec({"base": BASE, "seeds": [0], "axes": {"learner.double": [True, False]},
                    "baseline": "double=true", "against": "restrained"})
    with pytest.raises(ConfigError, match="'nobody' is not a team these runs measure; expected one of"):
        parse_spec({"base": BASE, "seeds": [0], "against": "nobody"})
    sweep = parse_spec({"base": BASE, "seeds": [0], "against": "restrained", "expect": {"peace": "no_change"}})
    assert sweep.against == "restrained" and sweep.expect == {"peace": "no_change"}


def test_a_finding_names_its_decision_rule_where_interval_and_test_disagree():
    from marl_core.ablation.report import _rule_clause

    # the Welch interval excludes 0, the Mann–Whitney p (Holm) is 0.14: no clear change, and the sentence says
    # why (the rule needs both); the issue that asked for this quoted exactly such a case
    said = _rule_clause((0.1, 0.9), 0.14, "no_change", "Mann–Whitney U")
    assert "The interval excludes 0, but the decision rule also needs the Mann–Whitney U test's" in said
    assert "p below 0.05" in said
    said = _rule_clause((-0.1, 0.9), 0.01, "no_change", "paired t")
    assert "corrected p is below 0.05, but the interval includes 0" in said
    assert _rule_clause((0.1, 0.9), 0.01, "increases", "paired t") == ""  # both agree: nothing to add
    assert _rule_clause((-0.1, 0.9), 0.3, "no_change", "paired t") == ""
