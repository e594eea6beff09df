"""Reward transforms (marl_core.rewards): the papers' formulas on hand-computed examples, episode resets,
config errors, and the training loop learning from the transformed rewards while scoring the env's own.

Formulas: prosocial after Peysakhovich & Lerer 2018 and inequity aversion after Hughes et al. 2018, as
written in docs/sources.md, "Prosocial reward" and "Inequity aversion" (the formulas from memory of the
papers; every expected value below is computed by hand from them).
"""

from __future__ import annotations

import numpy as np
import pytest

from marl_core import train
from marl_core.config import config_hash, parse_config
from marl_core.errors import ConfigError
from marl_core.rewards import RewardShaper


def _shaper(reward: dict, num_envs: int = 1, num_agents: int = 3) -> RewardShaper:
    return RewardShaper(parse_config({"reward": reward}).reward, num_envs, num_agents)


def _no_end(b: int = 1) -> np.ndarray:
    return np.zeros(b, bool)


# -------------------------------------------------------------------------------------- prosocial
@pytest.mark.parametrize("w, expected", [
    (0.0, [1.0, 0.0, 2.0]),  # selfish: unchanged
    (0.5, [1.0, 0.5, 1.5]),  # mean 1: 0.5 * [1, 0, 2] + 0.5 * 1
    (1.0, [1.0, 1.0, 1.0]),  # team reward: everyone gets the mean
])
def test_prosocial_by_hand(w, expected):
    out = _shaper({"prosocial": w})(np.array([[1.0, 0.0, 2.0]], np.float32), _no_end())
    np.testing.assert_allclose(out, [expected], rtol=0, atol=1e-6)


def test_prosocial_keeps_the_team_total():
    r = np.random.default_rng(0).normal(size=(4, 5)).astype(np.float32)
    out = _shaper({"prosocial": 0.3}, num_envs=4, num_agents=5)(r, _no_end(4))
    np.testing.assert_allclose(out.sum(axis=1), r.sum(axis=1), atol=1e-5)


def test_no_transform_returns_the_rewards_themselves():
    r = np.ones((2, 3), np.float32)
    shaper = _shaper({})
    assert not shaper.active and shaper(r, _no_end(2)) is r


# ----------------------------------------------------------------------------- inequity aversion
IA = {"alpha": 5.0, "beta": 0.05, "smoothing": 0.5}


def test_inequity_aversion_by_hand_over_two_steps_and_a_reset():
    shaper = _shaper({"inequity_aversion": IA})
    # step 1: r = [1, 0, 0], e = [1, 0, 0]
    #   agent 0: ahead of both by 1 -> 1 - 0.05/2 * 2 = 0.95
    #   agents 1, 2: agent 0 ahead by 1 -> 0 - 5/2 * 1 = -2.5
    out = shaper(np.array([[1.0, 0.0, 0.0]], np.float32), _no_end())
    np.testing.assert_allclose(out, [[0.95, -2.5, -2.5]], atol=1e-6)
    # step 2: r = [0, 2, 0], e = 0.5 * [1, 0, 0] + r = [0.5, 2, 0]
    #   agent 0: behind agent 1 by 1.5, ahead of agent 2 by 0.5 -> -2.5 * 1.5 - 0.025 * 0.5 = -3.7625
    #   agent 1: ahead by 1.5 and 2 -> 2 - 0.025 * 3.5 = 1.9125
    #   agent 2: behind by 0.5 and 2 -> -2.5 * 2.5 = -6.25
    out = shaper(np.array([[0.0, 2.0, 0.0]], np.float32), np.array([True]))
    np.testing.assert_allclose(out, [[-3.7625, 1.9125, -6.25]], atol=1e-6)
    # the episode ended with step 2: the smoothed rewards start again from zero, so step 1 repeats
    out = shaper(np.array([[1.0, 0.0, 0.0]], np.float32), _no_end())
    np.testing.assert_allclose(out, [[0.95, -2.5, -2.5]], atol=1e-6)


def test_inequity_aversion_resets_only_the_copies_that_ended():
    shaper = _shaper({"inequity_aversion": IA}, num_envs=2, num_agents=2)
    r = np.array([[1.0, 0.0], [1.0, 0.0]], np.float32)
    shaper(r, np.array([True, False]))
    out = shaper(np.zeros((2, 2), np.float32), _no_end(2))
    # copy 0 restarted: e = [0, 0], nothing to compare; copy 1: e = [0.5, 0], agent 1 behind by 0.5
    np.testing.assert_allclose(out, [[0.0, 0.0], [-0.05 * 0.5, -5.0 * 0.5]], atol=1e-6)


def test_equal_rewards_cost_nothing():
    shaper = _shaper({"inequity_aversion": IA}, num_envs=3, num_agents=4)
    r = np.full((3, 4), 0.7, np.float32)
    for _ in range(5):
        np.testing.assert_allclose(shaper(r, _no_end(3)), r, atol=1e-6)


def test_two_agents_divide_by_one():
    # N = 2, smoothing 0 (e = r): agent 0 at 3, agent 1 at 1 -> 3 - 0.1 * 2 and 1 - 2 * 2
    shaper = _shaper({"inequity_aversion": {"alpha": 2.0, "beta": 0.1, "smoothing": 0.0}}, num_agents=2)
    out = shaper(np.array([[3.0, 1.0]], np.float32), _no_end())
    np.testing.assert_allclose(out, [[2.8, -3.0]], atol=1e-6)


def test_transforms_chain_in_order_prosocial_first():
    shaper = _shaper({"prosocial": 1.0, "inequity_aversion": IA})
    # a team reward leaves no inequity to dislike
    out = shaper(np.array([[3.0, 0.0, 0.0]], np.float32), _no_end())
    np.testing.assert_allclose(out, [[1.0, 1.0, 1.0]], atol=1e-6)


def test_inequity_aversion_needs_two_agents():
    with pytest.raises(ConfigError, match=r"reward\.inequity_aversion is not allowed with 1 agent"):
        _shaper({"inequity_aversion": IA}, num_agents=1)


# ----------------------------------------------------------------------------------------- config
@pytest.mark.parametrize("reward, message", [
    ({"prosocial": 1.5}, r"^reward\.prosocial = 1\.5 is not allowed: expected a number in \[0, 1\]$"),
    ({"prosocal": 0.5}, r"^unknown key 'reward\.prosocal'; did you mean 'reward\.prosocial'\?$"),
    ({"inequity_aversion": 3}, r"^reward\.inequity_aversion = 3 is not allowed: expected null or a mapping"),
    ({"inequity_aversion": {"alpha": 5}}, r"^reward\.inequity_aversion\.beta is missing"),
    ({"inequity_aversion": {"alpha": 5, "betta": 0}}, r"did you mean 'reward\.inequity_aversion\.beta'"),
    ({"inequity_aversion": {"alpha": -1, "beta": 0}},
     r"^reward\.inequity_aversion\.alpha = -1 is not allowed: expected a number >= 0$"),
    ({"inequity_aversion": {"alpha": 1, "beta": 0, "smoothing": 1.0}},
     r"^reward\.inequity_aversion\.smoothing = 1\.0 is not allowed: expected a number in \[0, 1\)$"),
])
def test_bad_reward_config_is_one_line(reward, message):
    with pytest.raises(ConfigError, match=message):
        parse_config({"reward": reward})


def test_dotted_overrides_reach_the_mapping():
    cfg = parse_config({}, ["reward.inequity_aversion.alpha=5", "reward.inequity_aversion.beta=0.05"])
    assert (cfg.reward.inequity_aversion.alpha, cfg.reward.inequity_aversion.beta) == (5.0, 0.05)
    assert cfg.reward.inequity_aversion.smoothing == 0.965


def test_a_config_without_rewards_keeps_its_hash():
    # the section came after the first release: run ids and checkpoints of older configs stay valid
    assert config_hash(parse_config({})) == config_hash(parse_config({"reward": {"prosocial": 0.0}}))
    assert config_hash(parse_config({})) != config_hash(parse_config({"reward": {"prosocial": 0.5}}))


# ------------------------------------------------------------------------------------ in training
def _tiny(reward: dict) -> dict:
    return {
        "env": {"name": "harvest_v0", "num_envs": 2,
                "params": {"layout": "harvest_tiny", "num_agents": 2, "view_radius": 2, "max_cycles": 50}},
        "learner": {"kind": "idqn", "hidden": 16, "conv_channels": [4, 8], "batch_size": 16,
                    "warmup_steps": 100, "replay_size": 2000, "train_every": 2},
        "train": {"total_steps": 300, "eval_every": 300, "eval_episodes": 2, "checkpoint_every": 300},
        "log": {"tensorboard": False, "gif_every": 0},
        "reward": reward,
    }


def test_training_learns_from_the_team_reward_and_scores_the_env_rewards(tmp_path):
    # evaluation with random actions (learner.eval_eps 1), so that the agents pick different amounts
    cfg = parse_config(_tiny({"prosocial": 1.0}), ["learner.eval_eps=1.0", "train.eval_episodes=4"])
    r = train._Run(cfg, tmp_path / "team", None)
    (tmp_path / "team" / "checkpoints").mkdir(parents=True)
    r.open_logs(purge_step=None)
    r.measure_baselines()
    team = r.train()
    stored = r.replay._reward  # (capacity, copies, agents); unfilled slots are zeros
    assert np.abs(stored).sum() > 0  # resources were taken ...
    np.testing.assert_array_equal(stored[..., 0], stored[..., 1])  # ... and every agent learnt the mean
    # the learned team is scored on the env's own rewards. Under the team reward (prosocial 1) every agent
    # learns from the mean, so a score taken from the transformed rewards would give both agents one return
    # and an equality of exactly 1; the env's rewards differ per agent (they are what each agent picked)
    returns = team["returns"]
    assert len(set(returns.values())) == 2, returns
    assert team["equality"] < 1.0

