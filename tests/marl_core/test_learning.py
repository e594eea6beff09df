"""The learners learn: checked against outside thresholds on the bundled configs (slow; CI runs them).

Each test trains from a bundled config through the real trainer, then evaluates with exploration off.
"""

from pathlib import Path

import pytest

from marl_core.config import load_config
from marl_core.train import evaluate_run, run

CONFIGS = Path(__file__).resolve().parents[2] / "configs"


def _train(name, tmp_path, *overrides):
    cfg = load_config(CONFIGS / name, ["log.tensorboard=false", "log.gif_every=0", *overrides])
    return run(cfg, tmp_path / "run"), tmp_path / "run"


@pytest.mark.slow
def test_idqn_solves_cartpole(tmp_path):
    _, out = _train("cartpole_idqn.yaml", tmp_path)
    res = evaluate_run(out, episodes=100)
    # gymnasium's CartPole-v0 "solved" threshold: mean return >= 195 over 100 consecutive episodes
    # (gymnasium.spec("CartPole-v0").reward_threshold == 195.0; we play v1, whose episodes are longer)
    assert res["eval_episodes"] == 100
    assert res["return_mean"] >= 195.0, res["return_mean"]


@pytest.mark.slow
def test_quickstart_harvest_team_doubles_the_random_teams_efficiency(tmp_path):
    summary, _ = _train("harvest_idqn.yaml", tmp_path)
    # the bar for the quick start (no outside source): learned efficiency >= 2x a random team's
    assert summary["efficiency"] >= 2.0 * summary["random"]["efficiency"], summary


@pytest.mark.slow
def test_maddpg_beats_a_random_team_on_cooperative_navigation(tmp_path):
    summary, _ = _train("spread_maddpg.yaml", tmp_path, "train.total_steps=20000", "train.eval_every=10000")
    # margin (ours, no source): after 20k env steps each agent's mean episode return is at least 3 higher
    # than a uniformly random team's (returns are negative distances; random is about -26 per agent)
    assert summary["return_mean"] >= summary["random"]["return_mean"] + 3.0, summary
