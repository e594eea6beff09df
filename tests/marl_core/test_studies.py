"""The bundled studies (configs/studies/): each runs end to end on a tiny version of itself and its report
writes the finding lines.

A tiny version keeps the study's arms, axes, ``expect`` and ``against`` and shrinks everything else (2 seeds,
the tiny maps, a few hundred env steps, small networks), so it shows that the machinery runs, not what the
study finds: the full studies' measured results are in docs/results.md.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import yaml

import envs
from marl_core.ablation.spec import load_spec
from marl_core.cli import main

STUDIES = Path(__file__).resolve().parents[2] / "configs" / "studies"
NAMES = sorted(p.stem for p in STUDIES.glob("*.yaml"))
TINY = {"env.num_envs": 2, "env.params.num_agents": 2, "env.params.view_radius": 2, "env.params.max_cycles": 50,
        "learner.hidden": 16, "learner.conv_channels": [4, 8], "train.total_steps": 200,
        "train.eval_every": 200, "train.eval_episodes": 2, "train.checkpoint_every": 200,
        "log.tensorboard": False, "log.gif_every": 0, "log.progress": False}
# the learner keys of a tiny run, by learner.kind: a replay learner's small replay, ppo's short rollouts
TINY_BY_KIND = {"idqn": {"learner.batch_size": 16, "learner.replay_size": 1000, "learner.warmup_steps": 100},
                "maddpg": {"learner.batch_size": 16, "learner.replay_size": 1000, "learner.warmup_steps": 100},
                "ppo": {"learner.rollout_steps": 10}}
# a matrix-game study of learner.kind lola: a few updates, a few evaluation games
TINY_LOLA = {"learner.updates": 5, "learner.eval_every_updates": 5, "train.eval_episodes": 4,
             "log.tensorboard": False, "log.progress": False}


def test_the_bundled_studies_are_the_ten_of_the_docs():
    assert NAMES == ["cleanup_cures", "cleanup_team_critic", "commons_envy", "commons_over_training",
                     "learners_cleanup", "learners_harvest", "lola_ipd", "long_commons", "mixed_harvest",
                     "scarcity_harvest"]


@pytest.mark.parametrize("name", NAMES)
def test_a_study_header_states_finding_source_expectation_and_duration(name):
    head = [ln for ln in (STUDIES / f"{name}.yaml").read_text().splitlines() if ln.startswith("#")]
    text = " ".join(head)
    for word in ("Revisits:", "docs/sources.md", "Expected:", "Duration:", "Sizes:", "Run: marl-core ablate"):
        assert word in text, f"{name}: the header has no {word!r}"
    sweep = load_spec(STUDIES / f"{name}.yaml")
    assert sweep.seeds == [0, 1, 2, 3, 4]  # at least 5 seeds per arm (issue: studies)


@pytest.mark.parametrize("name", NAMES)
def test_every_study_has_three_sizes_and_the_published_one_is_the_papers_scale(name):
    """docs/studies.md, "Sizes": quick (a first look), full (the default, recorded in docs/results.md) and
    published; published is 5 agents on 1000-step episodes, 10M env steps a run, at least 5 seeds, for a
    game with agents and episodes to scale (a matrix game keeps its own rounds)."""
    sizes = {size: load_spec(STUDIES / f"{name}.yaml", size) for size in ("quick", "full", "published")}
    assert load_spec(STUDIES / f"{name}.yaml").spec_hash == sizes["full"].spec_hash  # full is the default
    assert len(sizes["quick"].seeds) >= 3 and len(sizes["published"].seeds) >= 5
    cfg = sizes["published"].runs[0].config
    if cfg.env.name in ("harvest_v0", "cleanup_v0"):
        assert cfg.env.params["num_agents"] == 5 and cfg.env.params["max_cycles"] == 1000
        assert cfg.train.total_steps >= 10_000_000
    quick, full = sizes["quick"].runs[0].config, sizes["full"].runs[0].config
    assert len(sizes["quick"].runs) * quick.train.total_steps <= len(sizes["full"].runs) * full.train.total_steps


def _kind_of(data: dict, arm: dict) -> str:
    return (arm or {}).get("learner.kind") or data.get("set", {}).get("learner.kind") or \
        yaml.safe_load(Path(data["base"]).read_text())["learner"]["kind"]


def _tiny_spec(name: str, tmp: Path) -> Path:
    data = yaml.safe_load((STUDIES / f"{name}.yaml").read_text())
    data.pop("sizes", None)  # the tiny version replaces every size's settings
    data["base"] = str((STUDIES / data["base"]).resolve())
    data["seeds"] = [0, 1]
    base = yaml.safe_load(Path(data["base"]).read_text())
    if base["learner"]["kind"] == "lola":
        data["set"] = {**data.get("set", {}), **TINY_LOLA}
    else:
        layout = "cleanup_tiny" if "cleanup" in data["base"] else "harvest_tiny"
        data["set"] = {**data.get("set", {}), **TINY, "env.params.layout": layout}
        if data.get("arms"):  # each arm gets the tiny keys of its own learner
            data["arms"] = {a: {**(over or {}), **TINY_BY_KIND[_kind_of(data, over)]}
                            for a, over in data["arms"].items()}
        else:
            data["set"].update(TINY_BY_KIND[base["learner"]["kind"]])
    data["smoke_test"] = True
    path = tmp / f"{name}.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


@pytest.mark.parametrize("name", NAMES)
def test_a_tiny_version_runs_and_reports_its_findings(name, tmp_path, capsys):
    spec = _tiny_spec(name, tmp_path)
    out = tmp_path / "sweep"
    assert main(["ablate", str(spec), "--out", str(out), "--workers", "1", "--quiet"]) == 0
    capsys.readouterr()
    assert main(["report", str(out)]) == 0
    printed = capsys.readouterr().out.splitlines()
    found = json.loads((out / "report" / "findings.json").read_text())
    sweep = load_spec(spec)
    assert found["findings"], "no finding line"
    assert found["expect"] == sweep.expect
    measures = {f["measure"] for f in found["findings"]}
    # the social metrics the game declares (envs.declared_metrics: efficiency alone on a matrix game)
    declared = set(envs.declared_metrics(sweep.runs[0].config.env.name))
    assert declared <= measures and not ({"equality", "sustainability", "peace"} - declared) & measures
    for measure in sweep.expect:  # each expected measure has its line, printed by the command too
        line = next(f for f in found["findings"] if f["measure"] == measure)
        assert line["expected"] == sweep.expect[measure] and "Expected:" in line["sentence"]
        assert any(p == line["sentence"] for p in printed)
    text = (out / "report" / "report.md").read_text()
    assert "## Findings" in text and "Smoke test" in text
