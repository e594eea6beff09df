"""``learner.kind: lola`` runs: configs/ipd_lola.yaml and configs/ipd_naive.yaml train, evaluate, resume.

The learning itself is checked in test_lola.py; here the run machinery around it (config, run directory,
checkpoint, evaluation through the batched engine, one-line errors).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from marl_core import train
from marl_core.config import load_config, parse_config
from marl_core.errors import ConfigError
from marl_core.policy import safe_torch_load

ROOT = Path(__file__).resolve().parents[2]
FAST = ["learner.updates=60", "train.eval_episodes=64", "log.tensorboard=false"]


def _cfg(name: str, extra: list[str] | None = None):
    return load_config(ROOT / "configs" / name, FAST + (extra or []))


def test_ipd_lola_config_trains_to_mutual_cooperation_and_evaluates_per_round(tmp_path):
    summary = train.run(_cfg("ipd_lola.yaml"), tmp_path / "run")
    assert summary["updates"] == 60 and summary["env_steps"] == 0  # exact gradients play no env steps
    # Foerster et al. 2018 (from memory: docs/sources.md, "LOLA"): LOLA-LOLA about -1.0 to -1.1 per step
    assert all(-1.1 <= r <= -0.9 for r in summary["reward_per_round"].values()), summary["reward_per_round"]
    assert all(-1.1 <= r <= -0.9 for r in summary["closed_form"]["reward_per_round"])
    ev = train.evaluate_run(tmp_path / "run", episodes=32)
    assert set(ev["reward_per_round"]) == {"agent_0", "agent_1"}
    assert ev["updates"] == 60
    policy = safe_torch_load(tmp_path / "run" / "policies" / "agent_0.pt", "policy")
    assert policy["kind"] == "memory_one" and tuple(policy["logits"].shape) == (5,)
    rows = [json.loads(line) for line in (tmp_path / "run" / "metrics.jsonl").read_text().splitlines()]
    assert [r["updates"] for r in rows] == [50, 60]


def test_ipd_naive_config_ends_near_mutual_defection(tmp_path):
    summary = train.run(_cfg("ipd_naive.yaml"), tmp_path / "run")
    # Foerster et al. 2018 (from memory): naive learners about -2 per step
    assert all(r <= -1.8 for r in summary["reward_per_round"].values()), summary["reward_per_round"]


def test_an_interrupted_exact_run_resumes_to_the_same_policies(tmp_path):
    whole = train.run(_cfg("ipd_lola.yaml", ["learner.checkpoint_every_updates=20"]), tmp_path / "whole")

    def stop(step, total, last):
        if step == 30:
            raise KeyboardInterrupt

    with pytest.raises(train.TrainingInterrupted) as info:
        train.run(_cfg("ipd_lola.yaml", ["learner.checkpoint_every_updates=20"]), tmp_path / "cut", progress=stop)
    assert info.value.env_steps == 30 and info.value.total_steps == 60  # counted in updates
    resumed = train.resume(tmp_path / "cut")
    assert resumed["updates"] == 60
    assert resumed["policies"] == whole["policies"]
    assert train.finished_summary(tmp_path / "cut") is not None


def test_sampled_gradients_play_whole_episodes_on_the_copies(tmp_path):
    cfg = _cfg("ipd_lola.yaml", ["learner.gradient=sampled", "learner.updates=4", "env.num_envs=16",
                                 "env.params.max_cycles=30"])
    summary = train.run(cfg, tmp_path / "run")
    assert summary["env_steps"] == 4 * 16 * 30 and summary["episodes"] == 4 * 16
    assert np.isfinite(summary["closed_form"]["values"]).all()


@pytest.mark.parametrize("data, message", [
    ({"learner": {"kind": "lola"}},  # the default env is harvest
     r"^env\.name = 'harvest_v0' is not allowed: expected 'matrix_v0' with learner\.kind = 'lola'"),
    ({"env": {"name": "matrix_v0"}, "learner": {"kind": "lola"}, "reward": {"prosocial": 0.5}},
     r"^the reward section is not allowed with learner\.kind = 'lola'"),
    ({"env": {"name": "matrix_v0"}, "learner": {"kind": "lola", "batch_size": 4}},
     r"^learner\.batch_size is an idqn key; learner\.kind is 'lola'$"),
])
def test_lola_configs_that_do_not_fit_get_one_line(data, message):
    with pytest.raises(ConfigError, match=message) as info:
        parse_config(data)
    assert "\n" not in str(info.value)


def test_a_game_lola_cannot_play_is_refused_before_any_file(tmp_path):
    cfg = parse_config({"env": {"name": "matrix_v0", "params": {"game": "public_goods", "num_agents": 3}},
                        "learner": {"kind": "lola"}})
    with pytest.raises(ConfigError, match=r"^learner\.kind = 'lola' needs two players with two actions"):
        train.run(cfg, tmp_path / "run")
    assert not (tmp_path / "run").exists()
