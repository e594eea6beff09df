"""The learners learn: multi-seed checks against the strongest non-learning team (slow; CI runs them).

Each check trains a bundled config over three seeds, two at a time (``marl_core.ablation.runner.repeat``),
plays the FINAL policy with exploration off, and asserts on the median over seeds. Runs reproduce bit for bit
only on the same CPU and torch build, so no check rests on one seed: the bars sit below the worst seed
measured on this project's machine by the margins noted beside them, which is what lets them hold on another
CPU. ``scripts/learning_checks.py`` runs the same checks at their full budgets over five seeds and prints
the figures the README quotes.
"""

from pathlib import Path
from statistics import median

import pytest

from marl_core.ablation.runner import repeat

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
SEEDS = [0, 1, 2]
QUIET = {"log.tensorboard": False, "log.gif_every": 0, "log.progress": False}


def _train(name: str, tmp_path: Path, **overrides) -> list[dict]:
    return repeat(CONFIGS / name, SEEDS, tmp_path, overrides={**QUIET, **overrides}, workers=2)


def _median(summaries: list[dict], key: str, team: str | None = None) -> float:
    return median((s["baselines"][team] if team else s)[key] for s in summaries)


@pytest.mark.slow
def test_idqn_balances_cartpole_on_the_median_of_three_seeds(tmp_path):
    runs = _train("cartpole_idqn.yaml", tmp_path, **{"train.total_steps": 30_000, "train.eval_every": 30_000,
                                                     "learner.lr_decay_steps": 30_000,
                                                     "train.eval_episodes": 100})
    assert all(s["eval_episodes"] == 100 for s in runs)
    # gymnasium's CartPole-v0 "solved" threshold, gymnasium.spec("CartPole-v0").reward_threshold == 195.0
    # (mean over 100 consecutive episodes); we play v1 (episodes up to 500 steps), so 195 is a low bar here.
    # Measured on this project's machine: seeds 0-2 give ... (median ...).
    returns = [s["return_mean"] for s in runs]
    assert median(returns) >= 195.0, returns
    assert median(returns) > _median(runs, "return_mean", "random") + 150.0, returns


@pytest.mark.slow
def test_quickstart_team_beats_every_scripted_team(tmp_path):
    runs = _train("harvest_idqn.yaml", tmp_path)
    # bar (ours, no source): the learned team's median efficiency beats the median of the strongest
    # non-learning team (random, no-op, greedy, restrained), each played on the same evaluation episodes.
    # Measured here (100k steps, 20 episodes): learned 0.770 / 0.768 / 0.808 against greedy 0.565 / 0.575 /
    # 0.598 and restrained 0.603 / 0.607 / 0.635, the strongest; the margin of the worst seed is 0.13.
    learned = [s["efficiency"] for s in runs]
    best = max(_median(runs, "efficiency", t) for t in runs[0]["baselines"])
    assert median(learned) > best, (learned, best)


@pytest.mark.slow
def test_maddpg_beats_the_noop_team_on_cooperative_navigation(tmp_path):
    runs = _train("spread_maddpg.yaml", tmp_path, **{"train.total_steps": 20_000, "train.eval_every": 20_000})
    # mpe2 simple_spread_v3 (an env we did not write); the no-op team is the strongest trivial team there
    # (noop ~-23.5 vs random ~-26 per agent over 100 episodes, measured here). Bar: the median learned
    # return per agent beats the no-op team's by 2 (ours, no source). Measured here: ...
    learned = [s["return_mean"] for s in runs]
    assert median(learned) > _median(runs, "return_mean", "noop") + 2.0, learned
