"""One meaning per word: the earlier spellings of renamed values are refused in one line naming the new one.

"shared" once meant three things: agents that cannot be told apart in the state (now
``state_layout: anonymous``), one critic network for the team (now ``critic: one_network``) and parameter
sharing (``share_parameters``, the trade's term, kept). The team that always plays action 0 was ``noop``; it
plays the ``stay`` action, and is named ``stay``. The observation channel of the other agents is ``others``;
the anonymous state's channel of every agent is ``agents``.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from envs.grid import ANONYMOUS_STATE_CHANNELS, CHANNELS, MOVE_ACTIONS
from marl_core.baselines import make_team, team_names
from marl_core.cli import main
from marl_core.team_env import make_team_env

CASES = {
    "state_layout": ({"env": {"name": "harvest_v0", "params": {"state_layout": "shared"}}},
                     "env.params.state_layout = 'shared' was renamed: use 'anonymous'"),
    "critic": ({"env": {"name": "harvest_v0"}, "learner": {"kind": "maddpg", "critic": "shared"}},
               "learner.critic = 'shared' was renamed: use 'one_network'"),
    "baselines": ({"env": {"name": "harvest_v0"}, "train": {"baselines": ["noop"]}},
                  "train.baselines = 'noop' was renamed: use 'stay'"),
    "member": ({"env": {"name": "harvest_v0", "params": {"num_agents": 2}},
                "seats": {"agent_0": {"member": "noop"}}},
               "seats.agent_0.member = 'noop' was renamed: use 'stay'"),
}


@pytest.mark.parametrize("case", list(CASES))
def test_an_old_spelling_is_refused_in_one_line_naming_the_new_one(case, tmp_path, capsys):
    data, line = CASES[case]
    path = tmp_path / "run.yaml"
    path.write_text(yaml.safe_dump(data))
    assert main(["train", str(path), "--out", str(tmp_path / "run")]) == 2
    err = capsys.readouterr().err.strip()
    assert err == f"marl-core: error: {line}"
    assert not (tmp_path / "run").exists()  # nothing half-written


def test_a_sweep_against_the_old_team_name_is_refused(tmp_path, capsys):
    spec = tmp_path / "spec.yaml"
    spec.write_text(yaml.safe_dump({"base": {"env": {"name": "harvest_v0"}}, "seeds": [0], "against": "noop"}))
    assert main(["ablate", str(spec), "--out", str(tmp_path / "sweep")]) == 2
    assert capsys.readouterr().err.strip().endswith("against = 'noop' was renamed: use 'stay'")


def test_the_stay_team_plays_the_stay_action():
    # envs/grid.py: action 0 is 'stay' (MOVE_ACTIONS); the team of that name plays it and nothing else
    assert MOVE_ACTIONS[0] == "stay" and "stay" in team_names("harvest_v0") and "noop" not in team_names("cleanup_v0")
    env = make_team_env("harvest_v0", {"layout": "harvest_tiny", "num_agents": 2, "view_radius": 2}, 2, 0,
                        with_state=False)
    try:
        obs = env.reset(0)[0]
        assert make_team("stay", env, 0)(obs).tolist() == [[0, 0], [0, 0]]
    finally:
        env.close()


def test_observation_and_state_channels_use_one_word_each():
    assert "others" in CHANNELS and "agents" not in CHANNELS  # the observer's view: the other agents
    assert "agents" in ANONYMOUS_STATE_CHANNELS and "others" not in ANONYMOUS_STATE_CHANNELS  # every agent


def test_no_bundled_config_spells_an_old_value():
    root = Path(__file__).resolve().parents[2] / "configs"
    for path in root.rglob("*.yaml"):
        body = "\n".join(ln.split("#", 1)[0] for ln in path.read_text().splitlines())
        assert "critic: shared" not in body and "noop" not in body and "state_layout: shared" not in body, path


def test_a_run_stored_before_the_renames_loads_and_keeps_its_id(tmp_path):
    """A run directory's own config.yaml written with the first spellings loads with today's words, and its
    config_hash (the run id in sweep ledgers, the check before a resume) is the one it had."""
    from marl_core.config import config_hash, load_stored_config, parse_config

    old = {"env": {"name": "harvest_v0", "params": {"state_layout": "shared"}},
           "learner": {"kind": "maddpg", "critic": "shared"}}
    path = tmp_path / "config.yaml"
    path.write_text(yaml.safe_dump(old))
    cfg = load_stored_config(path)
    assert cfg.learner.critic == "one_network" and cfg.env.params["state_layout"] == "anonymous"
    today = parse_config({"env": {"name": "harvest_v0", "params": {"state_layout": "anonymous"}},
                          "learner": {"kind": "maddpg", "critic": "one_network"}})
    assert config_hash(cfg) == config_hash(today)
    # tests/marl_core/test_config.py pins the hash of a default maddpg config from before the rename
