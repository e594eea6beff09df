"""The learners learn: multi-seed checks against the strongest non-learning team (slow; CI runs them).

Each check trains a bundled config over three seeds, two at a time (``marl_core.ablation.runner.repeat``),
plays the FINAL policy with exploration off, and asserts on the median over seeds. Runs reproduce bit for bit
only on the same CPU and torch build, so no check rests on one seed: the bars sit below the worst seed
measured on this project's machine by the margins noted beside them, which is what lets them hold on another
CPU. ``scripts/learning_checks.py`` runs the same checks at their full budgets over five seeds and prints
the figures docs/learning_checks.md quotes.
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
    runs = _train("cartpole_idqn.yaml", tmp_path)  # the full config: 150k env steps, 100 greedy episodes
    assert all(s["eval_episodes"] == 100 for s in runs)
    # gymnasium's CartPole-v0 "solved" threshold, gymnasium.spec("CartPole-v0").reward_threshold == 195.0
    # (mean over 100 consecutive episodes), on the median of 3 seeds; we play v1, whose episodes run to 500
    # steps. Measured on this project's machine (AMD EPYC), seeds 0-4: 500, 489.75, 500, 500, 232.67 (random
    # 22.5): the worst seed is 38 above the bar and the median 305 above it; scripts/learning_checks.py
    # checks v1's own threshold, IQM >= 475 over 5 seeds (measured 496.6).
    returns = [s["return_mean"] for s in runs]
    assert median(returns) >= 195.0, returns
    # and far above the random team, the strongest trivial team here (margin 150 ours, no source)
    assert median(returns) > _median(runs, "return_mean", "random") + 150.0, returns


@pytest.mark.slow
def test_quickstart_team_beats_every_scripted_team(tmp_path):
    runs = _train("harvest_idqn.yaml", tmp_path)
    # bar (ours, no source): the learned team's median efficiency beats the median of the strongest
    # non-learning team (random, no-op, greedy, restrained), each played on the same evaluation episodes.
    # Measured here (100k steps, 20 episodes), seeds 0-2: learned 0.782 / 0.830 / 0.794 against restrained
    # 0.689 / 0.689 / 0.694 (the strongest), greedy 0.590 / 0.590 / 0.598, random 0.18-0.21, no-op 0; the
    # worst seed clears the strongest team by 0.09, the median by 0.11.
    learned = [s["efficiency"] for s in runs]
    best = max(_median(runs, "efficiency", t) for t in runs[0]["baselines"])
    assert median(learned) > best, (learned, best)


@pytest.mark.slow
def test_maddpg_beats_the_stay_team_on_cooperative_navigation(tmp_path):
    runs = _train("spread_maddpg.yaml", tmp_path, **{"train.total_steps": 40_000, "train.eval_every": 40_000})
    # mpe2's simple_spread_v3 (an env we did not write). The no-op team is the strongest TRIVIAL team there
    # (it beats random); the landmark_walk heuristic is far stronger and is reported, not used as the bar.
    # Bar (ours, no source): the median return per agent beats the no-op team's median by 1. Measured here
    # at 40k steps (20 episodes), seeds 0-2: learned -20.20 / -20.75 / -20.45 against no-op -23.59 / -24.73 /
    # -24.46 (every seed 3.4 or more above its no-op team) and landmark_walk -12.23 / -13.24 / -13.24.
    learned = [s["return_mean"] for s in runs]
    assert median(learned) > _median(runs, "return_mean", "stay") + 1.0, learned


@pytest.mark.slow
def test_cleanup_learners_clean_and_beat_every_scripted_team(tmp_path):
    runs = _train("cleanup_tiny_idqn.yaml", tmp_path)  # the full config: 300k env steps, 2 agents
    # bar (ours, no source): the median efficiency beats the median of the strongest non-learning team
    # (random, no-op, nobody_cleans, one_cleaner), each played on the same evaluation episodes. Measured here,
    # seeds 0-4: learned 0.281 / 0.242 / 0.260 / 0.265 / 0.267 against one_cleaner 0.119-0.127 (the
    # strongest), nobody_cleans 0.026-0.029, random 0.053-0.061: the worst seed clears the strongest team by
    # 0.12. The learned agents clean (4-5 waste cells an episode each); nobody_cleans never does.
    learned = [s["efficiency"] for s in runs]
    best = max(_median(runs, "efficiency", t) for t in runs[0]["baselines"])
    assert median(learned) > best, (learned, best)
    assert median(s["behaviour"]["waste_removed"] for s in runs) > 1.0


@pytest.mark.slow
def test_ppo_quickstart_team_beats_every_scripted_team(tmp_path):
    runs = _train("harvest_ppo.yaml", tmp_path)  # the full config: 163,840 env steps on 64 copies
    # bar (ours, no source): the on-policy learner with a central critic beats, on the median efficiency,
    # the median of the strongest non-learning team (random, no-op, greedy, restrained), each played on the
    # same evaluation episodes. Measured here, seeds 0-4: learned 1.403 / 1.385 / 1.384 / 1.455 / 1.467
    # against restrained 1.116-1.123 (the strongest), greedy 0.99-1.00; the worst seed clears the strongest
    # team by 0.26 (docs/learners.md, "Measured"). About 50 s a run.
    learned = [s["efficiency"] for s in runs]
    best = max(_median(runs, "efficiency", t) for t in runs[0]["baselines"])
    assert median(learned) > best, (learned, best)
