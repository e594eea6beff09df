"""The dilemmas are real: restraint and cleaning pay the team, greed and free-riding cost it.

Source: the defining property of a common-pool resource and of a public good (fact of the trade, no
source); the scripted teams are in envs/scripted.py.
"""

import numpy as np
import pytest

import envs
from envs.episode import play_episode
from envs.scripted import cleanup_team, distance_to, greedy_team, restrained_team


def _left(env):
    return int(env.game.interior(env.game.resource)[0].sum())


@pytest.mark.parametrize("seed", [0, 1])
@pytest.mark.parametrize("num_agents", [3, 5])
def test_harvest_greed_strips_the_commons(seed, num_agents):
    env = envs.harvest_v0.parallel_env(num_agents=num_agents)
    greedy = play_episode(env, greedy_team(env), seed=seed)
    greedy_left = _left(env)
    restrained = play_episode(env, restrained_team(env), seed=seed)
    restrained_left = _left(env)
    # greedy: fewer resources standing at the end and a lower total return (no source: the dilemma)
    assert greedy_left < restrained_left
    assert greedy.rewards.sum() < restrained.rewards.sum()
    # restraint keeps every patch alive: at least one resource per patch remains
    patches = env.game.layout.patches()
    res = env.game.interior(env.game.resource)[0]
    assert set(np.unique(patches[res])) == set(range(patches.max() + 1))
    # greed gets little after the first rush: sustainability (mean reward time) is far lower
    assert greedy.outcomes()["sustainability"] < restrained.outcomes()["sustainability"]


@pytest.mark.parametrize("seed", [0, 1])
@pytest.mark.parametrize("num_agents", [3, 5])
def test_cleanup_free_riding_costs_the_team(seed, num_agents):
    env = envs.cleanup_v0.parallel_env(num_agents=num_agents)
    nobody = play_episode(env, cleanup_team(env, cleaners=0), seed=seed)
    one = play_episode(env, cleanup_team(env, cleaners=1), seed=seed)
    # a team where one agent cleans earns more in total than one where nobody does (no source: the dilemma)
    assert nobody.rewards.sum() < one.rewards.sum()
    # and the cleaner itself earns less than the pickers: cleaning pays nothing directly
    assert one.rewards[:, 0].sum() < one.rewards[:, 1:].sum(axis=0).min()


def test_distance_to_matches_hand_counted_steps():
    # hand-counted breadth-first distances on a 3 x 4 grid with one wall (no source needed: counting)
    passable = np.array([[1, 1, 1, 1], [1, 0, 0, 1], [1, 1, 1, 1]], bool)
    targets = np.zeros((3, 4), bool)
    targets[0, 0] = True
    dist = distance_to(targets, passable)
    assert dist[0, 3] == 3 and dist[2, 3] == 5 and dist[2, 0] == 2 and dist[2, 2] == 4
