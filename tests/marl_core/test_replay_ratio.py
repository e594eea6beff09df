"""learner.replay_ratio: samples drawn per env step collected, held for any number of env copies."""

from __future__ import annotations

import pytest

from marl_core import train
from marl_core.config import parse_config
from marl_core.errors import ConfigError


def _tiny(num_envs: int, learner: dict) -> dict:
    return {
        "env": {"name": "harvest_v0", "num_envs": num_envs,
                "params": {"layout": "harvest_tiny", "num_agents": 2, "view_radius": 2, "max_cycles": 50}},
        "learner": {"kind": "idqn", "hidden": 16, "conv_channels": [4, 8], "batch_size": 16,
                    "warmup_steps": 96, "replay_size": 2000, **learner},
        "train": {"total_steps": 960, "eval_every": 960, "eval_episodes": 1, "checkpoint_every": 960,
                  "baselines": ["random"]},
        "log": {"tensorboard": False, "gif_every": 0},
    }


@pytest.mark.parametrize("num_envs", [2, 8, 32])
def test_replay_ratio_holds_for_any_number_of_copies(tmp_path, num_envs):
    summary = train.run(parse_config(_tiny(num_envs, {"replay_ratio": 1.5})), tmp_path / "run")
    assert summary["replay_ratio"] == 1.5
    # 864 env steps after the warm-up owe 1296 samples: 81 whole batches of 16 (hand-computed); the
    # measured ratio counts from the step before the first update, so it is 1296 / 864 up to one vector step
    measured = summary["replay_ratio_measured"]
    assert abs(measured - 1.5) <= 16 / (864 - num_envs), measured


def test_without_replay_ratio_the_summary_shows_the_one_train_every_gives(tmp_path):
    summary = train.run(parse_config(_tiny(4, {"train_every": 2})), tmp_path / "run")
    assert summary["replay_ratio"] == 16 * 1 / (4 * 2)  # batch * updates_per_round / (copies * train_every)
    assert summary["replay_ratio_measured"] == pytest.approx(2.0, abs=16 / 800)


@pytest.mark.parametrize("key", ["train_every", "updates_per_round"])
def test_replay_ratio_and_train_every_do_not_mix(key):
    with pytest.raises(ConfigError, match=rf"^learner\.{key} = 2 is not allowed together with "
                                          rf"learner\.replay_ratio"):
        parse_config({"learner": {"replay_ratio": 2.0, key: 2}})
    with pytest.raises(ConfigError, match=r"^learner\.replay_ratio = 0 is not allowed"):
        parse_config({"learner": {"replay_ratio": 0}})
