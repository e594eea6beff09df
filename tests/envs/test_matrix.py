"""Tests of envs.matrix_v0: tables, repeated-game observation, episode end (horizon), batching, PettingZoo API."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from pettingzoo.test import api_test, parallel_api_test, render_test
from pettingzoo.utils.conversions import parallel_to_aec

import envs
import envs.matrix_v0 as matrix
from envs.errors import ActionError, ParamError
from envs.metrics import social_outcomes_batch

BUNDLED = ("prisoners_dilemma", "stag_hunt", "chicken", "matching_pennies", "public_goods")


def pure_nash(table: np.ndarray) -> list[tuple[int, ...]]:
    """Joint actions at which no agent gains by changing only its own action (best responses by table)."""
    n = table.shape[-1]
    stable = np.ones(table.shape[:-1], dtype=bool)
    for i in range(n):
        mine = table[..., i]
        stable &= mine >= mine.max(axis=i, keepdims=True)
    return [tuple(int(k) for k in j) for j in np.argwhere(stable)]


# --- tables -----------------------------------------------------------------------------------------------

@pytest.mark.parametrize(("joint", "expected"), [
    ((0, 0), (3.0, 3.0)),   # Axelrod 1984: R = 3 for mutual cooperation
    ((0, 1), (0.0, 5.0)),   # Axelrod 1984: S = 0 for the cooperator, T = 5 for the defector
    ((1, 0), (5.0, 0.0)),   # Axelrod 1984: T = 5 for the defector, S = 0 for the cooperator
    ((1, 1), (1.0, 1.0)),   # Axelrod 1984: P = 1 for mutual defection
], ids=["CC", "CD", "DC", "DD"])
def test_prisoners_dilemma_rewards(joint, expected):
    par = matrix.parallel_env(game="prisoners_dilemma", max_cycles=1)
    par.reset(seed=0)
    _, rewards, _, _, _ = par.step(dict(zip(par.possible_agents, joint, strict=True)))
    assert rewards == dict(zip(par.possible_agents, expected, strict=True))
    assert all(isinstance(r, float) for r in rewards.values())


def test_prisoners_dilemma_action_names_and_dtype():
    game = matrix.vector_env(1)
    assert game.action_names == ("cooperate", "defect")
    game.reset(seed=0)
    _, rewards, _, _, _ = game.step([[0, 1]])
    assert rewards.dtype == np.float32


def test_prisoners_dilemma_unique_nash_is_mutual_defection():
    table = matrix.vector_env(1, game="prisoners_dilemma").payoff_table
    # common textbook fact (docs/sources.md, "Matrix games"): mutual defection is the unique Nash equilibrium
    # of the one-shot PD
    assert pure_nash(table) == [(1, 1)]
    # common textbook fact (docs/sources.md, "Matrix games"): mutual cooperation pays both more than mutual
    # defection
    assert np.all(table[0, 0] > table[1, 1])


def test_public_goods_unique_nash_is_nobody_contributing():
    table = matrix.vector_env(1, game="public_goods", num_agents=4, multiplier=1.6).payoff_table
    # Ledyard 1995 (from memory): with 1 < multiplier < N keeping is dominant, yet all contributing pays more
    assert pure_nash(table) == [(1, 1, 1, 1)]
    assert np.all(table[0, 0, 0, 0] > table[1, 1, 1, 1])


def test_public_goods_payoffs_hand_computed():
    table = matrix.vector_env(1, game="public_goods", num_agents=3, multiplier=1.5).payoff_table
    # hand-computed from payoff_i = (1 - c_i) + m * sum_j c_j / N (module docstring), m = 1.5, N = 3
    np.testing.assert_allclose(table[0, 0, 0], [1.5, 1.5, 1.5])   # all contribute: 1.5 * 3 / 3
    np.testing.assert_allclose(table[1, 1, 1], [1.0, 1.0, 1.0])   # all keep: the endowment
    np.testing.assert_allclose(table[1, 0, 0], [2.0, 1.0, 1.0])   # one keeps: 1 + 1.5 * 2 / 3, others 1.0


def test_other_bundled_tables_equilibria():
    # from memory (textbook facts): stag hunt has two pure equilibria, chicken two asymmetric ones,
    # matching pennies none
    assert pure_nash(matrix.vector_env(1, game="stag_hunt").payoff_table) == [(0, 0), (1, 1)]
    assert pure_nash(matrix.vector_env(1, game="chicken").payoff_table) == [(0, 1), (1, 0)]
    assert pure_nash(matrix.vector_env(1, game="matching_pennies").payoff_table) == []
    # von Neumann & Morgenstern 1944 (from memory): matching pennies is zero-sum
    assert np.all(matrix.vector_env(1, game="matching_pennies").payoff_table.sum(axis=-1) == 0)


def test_custom_table_in_documented_layout_reproduces_the_prisoners_dilemma():
    # module docstring: the PD is [3, 3, 0, 5, 5, 0, 1, 1] in the custom layout (Axelrod 1984 values)
    custom = matrix.vector_env(1, payoffs=[3, 3, 0, 5, 5, 0, 1, 1])
    assert custom.params["game"] == "custom"
    assert custom.action_names == ("action_0", "action_1")
    np.testing.assert_array_equal(custom.payoff_table, matrix.vector_env(1).payoff_table)


def test_custom_table_with_three_actions():
    # rock, paper, scissors for agent_0 (win 1, loss -1, draw 0; common practice (no source)), zero-sum
    win = np.array([[0, -1, 1], [1, 0, -1], [-1, 1, 0]], dtype=float)
    flat = np.stack([win, -win], axis=-1).ravel().tolist()
    game = matrix.vector_env(2, payoffs=flat, max_cycles=1)
    assert game.action_space.n == 3
    assert game.observation_space.shape == (6,)
    game.reset(seed=0)
    _, rewards, _, _, _ = game.step([[1, 0], [2, 0]])
    np.testing.assert_array_equal(rewards, [[1, -1], [-1, 1]])


def test_resolved_params_round_trip():
    for kwargs in ({}, {"game": "public_goods", "num_agents": 3}, {"payoffs": [1, 2, 3, 4, 5, 6, 7, 8]}):
        first = matrix.vector_env(1, **kwargs)
        again = matrix.vector_env(1, **first.params)
        assert again.params == first.params
        np.testing.assert_array_equal(again.payoff_table, first.payoff_table)


# --- observation, state, infos, truncation ----------------------------------------------------------------

def test_observation_is_the_previous_joint_action_one_hot():
    par = matrix.parallel_env(max_cycles=4)
    obs, _ = par.reset(seed=0)
    for agent in par.possible_agents:
        assert obs[agent].dtype == np.uint8
        np.testing.assert_array_equal(obs[agent], np.zeros(4, np.uint8))   # module docstring: zeros at first
        assert par.observation_space(agent).contains(obs[agent])
    for joint in [(0, 1), (1, 1), (1, 0), (0, 0)]:
        obs, _, _, _, _ = par.step(dict(zip(par.possible_agents, joint, strict=True)))
        expected = np.zeros(4, np.uint8)
        expected[[joint[0], 2 + joint[1]]] = 1                # entry i * A + a_i
        for agent in par.possible_agents:
            np.testing.assert_array_equal(obs[agent], expected)
        np.testing.assert_array_equal(par.state(), expected)
        assert par.state_space.contains(par.state())


def test_spaces_have_exact_bounds():
    game = matrix.vector_env(1, game="public_goods", num_agents=3)
    for space in (game.observation_space, game.state_space):
        assert space.shape == (6,)
        assert space.dtype == np.uint8
        assert np.all(space.low == 0) and np.all(space.high == 1)


def test_infos_report_action_and_frozen():
    game = matrix.vector_env(3, max_cycles=2)
    _, infos = game.reset(seed=0)
    assert tuple(infos) == matrix.MatrixGame.info_keys == ("action", "frozen")
    np.testing.assert_array_equal(infos["action"], -np.ones((3, 2)))   # module docstring: -1 at reset
    actions = np.array([[0, 1], [1, 1], [1, 0]])
    _, _, _, _, infos = game.step(actions)
    for key in game.info_keys:
        assert infos[key].shape == (3, 2)
        assert np.issubdtype(infos[key].dtype, np.integer)
    np.testing.assert_array_equal(infos["action"], actions)
    np.testing.assert_array_equal(infos["frozen"], 0)


def test_default_horizon_is_terminal():
    assert matrix.parallel_env().params["horizon"] == "terminal"   # module docstring: the default


@pytest.mark.parametrize("horizon", ["terminal", "time_limit"])
def test_horizon_ends_every_agent_at_max_cycles_with_its_own_flag(horizon):
    par = matrix.parallel_env(max_cycles=3, horizon=horizon)
    par.reset(seed=0)
    seen = []
    while par.agents:
        _, _, term, trunc, _ = par.step(dict.fromkeys(par.agents, 0))
        flag, other = (term, trunc) if horizon == "terminal" else (trunc, term)
        assert not any(other.values())                       # module docstring: the other flag never fires
        seen.append((all(flag.values()), any(flag.values())))
    assert seen == [(False, False), (False, False), (True, True)]   # module docstring: every agent at once
    with pytest.raises(ActionError, match="after the episode ended"):
        par.step({"agent_0": 0, "agent_1": 0})


@pytest.mark.parametrize(("horizon", "terminated"), [("terminal", True), ("time_limit", False)])
def test_one_shot_game_ends_after_one_round(horizon, terminated):
    game = matrix.vector_env(2, max_cycles=1, horizon=horizon)
    game.reset(seed=0)
    _, _, term, trunc, _ = game.step([[0, 0], [1, 1]])
    # module docstring, Episode end: all terminated ("terminal") or all truncated ("time_limit"), never both
    np.testing.assert_array_equal(term, np.full((2, 2), terminated))
    np.testing.assert_array_equal(trunc, np.full((2, 2), not terminated))
    with pytest.raises(ActionError, match="max_cycles = 1"):
        game.step([[0, 0], [1, 1]])


def test_horizon_param_is_declared_and_listed():
    param = next(p for p in matrix.PARAMS if p.name == "horizon")
    assert (param.kind, param.default, param.choices) == (str, "terminal", ("terminal", "time_limit"))
    listed = {p["name"]: p for p in envs.list_envs()["matrix_v0"]}
    assert listed["horizon"]["default"] == "terminal"
    assert listed["horizon"]["allowed"] == "one of 'terminal', 'time_limit'"


def test_rejects_unknown_horizon_on_one_line():
    with pytest.raises(ParamError) as err:
        matrix.parallel_env(horizon="forever")
    # envs/errors.py: the message names the parameter, the value and what is allowed, on one line
    assert str(err.value) == ("matrix_v0: parameter 'horizon' = 'forever' is not allowed; expected one of "
                              "'terminal', 'time_limit'")


@pytest.mark.filterwarnings("ignore:Observation numpy array is all zeros")  # the first round, by design
@pytest.mark.parametrize("horizon", ["terminal", "time_limit"])
def test_project_checks_pass_for_both_horizons(horizon):
    from envs.checks import check_game

    check_game("matrix_v0", {"horizon": horizon, "max_cycles": 4}, cycles=40)
    check_game("matrix_v0", {"horizon": horizon, "game": "public_goods", "num_agents": 3, "max_cycles": 1},
               cycles=10)


def test_resolve_params_makes_the_game_custom_when_payoffs_are_given():
    # module docstring: game is "custom" when payoffs is given and game is not
    assert matrix.resolve_params({"payoffs": [3, 3, 0, 5, 5, 0, 1, 1]})["game"] == "custom"
    assert matrix.resolve_params({"payoffs": None})["game"] == "prisoners_dilemma"
    assert matrix.resolve_params({})["game"] == "prisoners_dilemma"
    resolved = matrix.resolve_params({"payoffs": [1, 2, 3, 4, 5, 6, 7, 8], "max_cycles": 2})
    assert matrix.resolve_params(resolved) == resolved == matrix.vector_env(1, **resolved).params


def test_batched_engine_matches_single_envs():
    copies, rounds = 4, 6
    rng = np.random.default_rng(7)
    actions = rng.integers(0, 2, size=(rounds, copies, 3))
    params = {"game": "public_goods", "num_agents": 3, "max_cycles": rounds}
    batch = matrix.vector_env(copies, **params)
    singles = [matrix.parallel_env(**params) for _ in range(copies)]
    obs_b, _ = batch.reset(seed=11)
    for b, par in enumerate(singles):
        obs, _ = par.reset(seed=11 + b)                      # envs/core.py: copy b is seeded with seed + b
        for i, agent in enumerate(par.possible_agents):
            np.testing.assert_array_equal(obs[agent], obs_b[b, i])
    for t in range(rounds):
        obs_b, rew_b, term_b, trunc_b, info_b = batch.step(actions[t])
        for b, par in enumerate(singles):
            obs, rew, term, trunc, info = par.step(dict(zip(par.possible_agents, actions[t, b], strict=True)))
            for i, agent in enumerate(par.possible_agents):
                np.testing.assert_array_equal(obs[agent], obs_b[b, i])
                assert rew[agent] == rew_b[b, i]
                assert term[agent] == term_b[b, i] and trunc[agent] == trunc_b[b, i]
                assert info[agent] == {k: int(v[b, i]) for k, v in info_b.items()}
            np.testing.assert_array_equal(par.state(), batch.state()[b])


def test_reset_with_a_seed_is_repeatable():
    game = matrix.vector_env(2)
    first = game.reset(seed=5)[0]
    game.step([[0, 1], [1, 0]])
    np.testing.assert_array_equal(game.reset(seed=5)[0], first)


def test_frozen_info_feeds_the_peace_metric():
    copies, rounds = 3, 5
    game = matrix.vector_env(copies, max_cycles=rounds)
    game.reset(seed=0)
    rewards, frozen = [], []
    for _ in range(rounds):
        _, r, _, _, info = game.step(np.ones((copies, 2), dtype=int))
        rewards.append(r)
        frozen.append(info["frozen"])
    out = social_outcomes_batch(np.stack(rewards), np.stack(frozen))
    # docs/sources.md, "Social outcome metrics": peace = N when nobody is tagged out; Axelrod 1984
    # (docs/sources.md, "Matrix games"): P = 1 each per round of mutual defection
    np.testing.assert_allclose(out["peace"], 2.0)
    np.testing.assert_allclose(out["efficiency"], 2.0)


# --- rendering --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("game", BUNDLED)
def test_render_modes(game):
    params = {"game": game, "num_agents": 3} if game == "public_goods" else {"game": game}
    rgb = matrix.parallel_env(render_mode="rgb_array", **params)
    rgb.reset(seed=0)
    before = rgb.render()
    rgb.step(dict.fromkeys(rgb.agents, 1))
    after = rgb.render()
    assert after.dtype == np.uint8 and after.ndim == 3 and after.shape[2] == 3
    assert before.shape == after.shape and not np.array_equal(before, after)
    text = matrix.parallel_env(render_mode="ansi", **params)
    text.reset(seed=0)
    text.step(dict.fromkeys(text.agents, 1))
    out = text.render()
    assert isinstance(out, str) and text.game.action_names[1] in out


# --- PettingZoo checkers ----------------------------------------------------------------------------------

@pytest.mark.parametrize("game", BUNDLED)
def test_parallel_api(game):
    params = {"game": game, "num_agents": 3} if game == "public_goods" else {"game": game}
    parallel_api_test(matrix.parallel_env(max_cycles=5, **params), num_cycles=20)


# the first observation of a repeated game is all zeros by design (no previous joint action)
@pytest.mark.filterwarnings("ignore:Observation numpy array is all zeros")
def test_aec_api():
    api_test(matrix.env(max_cycles=5), num_cycles=20)
    api_test(parallel_to_aec(matrix.parallel_env(game="public_goods", num_agents=3, max_cycles=3)),
             num_cycles=10)


def test_pettingzoo_render_test():
    # render_test first builds the env with render_mode="human", which our facade rejects
    render_test(lambda render_mode=None: matrix.env(
        render_mode=None if render_mode == "human" else render_mode))


def test_module_factories_and_registry():
    assert matrix.NAME == "matrix_v0"
    assert matrix.MatrixParallelEnv.metadata["name"] == "matrix_v0"
    assert {p.name for p in matrix.PARAMS} == {"game", "payoffs", "num_agents", "max_cycles", "horizon",
                                              "multiplier"}
    assert isinstance(envs.make("matrix_v0"), matrix.MatrixParallelEnv)
    assert envs.make_vector("matrix_v0", 3).num_envs == 3
    par = matrix.parallel_env()
    assert par.observation_space("agent_0") is par.observation_space("agent_1")


# --- rejected inputs --------------------------------------------------------------------------------------

def test_rejects_unknown_parameter():
    with pytest.raises(ParamError, match="unknown parameter 'max_cycle'; did you mean 'max_cycles'"):
        matrix.parallel_env(max_cycle=3)


def test_rejects_bad_action():
    par = matrix.parallel_env()
    par.reset(seed=0)
    with pytest.raises(ActionError, match=r"action 2 for agent_1 .* expected an integer in \[0, 1\]"):
        par.step({"agent_0": 0, "agent_1": 2})


def test_rejects_batched_actions_of_wrong_shape():
    game = matrix.vector_env(2)
    game.reset(seed=0)
    with pytest.raises(ActionError, match=r"actions have shape \(2,\); expected \(2, 2\)"):
        game.step([0, 1])


def test_rejects_bad_payoff_table_length():
    with pytest.raises(ParamError, match="parameter 'payoffs' has 7 numbers; expected N \\* A\\*\\*N"):
        matrix.parallel_env(payoffs=[1, 2, 3, 4, 5, 6, 7])


def test_rejects_one_action_payoff_table():
    with pytest.raises(ParamError, match="parameter 'payoffs' has 2 numbers"):
        matrix.parallel_env(payoffs=[1, 2])


def test_rejects_non_numeric_payoffs():
    with pytest.raises(ParamError, match="parameter 'payoffs'"):
        matrix.parallel_env(payoffs=["a", "b"])


def test_rejects_infinite_payoffs():
    with pytest.raises(ParamError, match="parameter 'payoffs' = .* expected payoffs that are finite"):
        matrix.parallel_env(payoffs=[1, 2, 3, 4, 5, 6, 7, float("inf")])


def test_rejects_negative_num_agents():
    with pytest.raises(ParamError, match="parameter 'num_agents' = -2 is not allowed"):
        matrix.parallel_env(game="public_goods", num_agents=-2)


def test_rejects_team_size_the_table_does_not_have():
    with pytest.raises(ParamError, match="parameter 'num_agents' = 3 is not allowed; expected 2"):
        matrix.parallel_env(game="prisoners_dilemma", num_agents=3)


def test_rejects_unknown_game_name():
    with pytest.raises(ParamError, match="parameter 'game' = 'prisoner' is not allowed"):
        matrix.parallel_env(game="prisoner")


def test_rejects_game_together_with_payoffs():
    with pytest.raises(ParamError, match="'game' = 'stag_hunt' is not allowed together with 'payoffs'"):
        matrix.parallel_env(game="stag_hunt", payoffs=[3, 3, 0, 5, 5, 0, 1, 1])


def test_rejects_custom_game_without_payoffs():
    with pytest.raises(ParamError, match="parameter 'payoffs' is missing"):
        matrix.parallel_env(game="custom")


def test_rejects_zero_max_cycles():
    with pytest.raises(ParamError, match="parameter 'max_cycles' = 0 is not allowed"):
        matrix.parallel_env(max_cycles=0)


def test_rejects_bad_num_envs():
    with pytest.raises(ParamError, match="num_envs = 0 is not allowed"):
        matrix.vector_env(0)


def test_rejects_human_render_mode():
    with pytest.raises(ParamError, match="parameter 'render_mode' = 'human' is not allowed"):
        matrix.parallel_env(render_mode="human")


def test_rejects_step_before_reset():
    with pytest.raises(ActionError, match=r"step\(\) called before reset\(\)"):
        matrix.vector_env(1).step([[0, 0]])


def test_rejects_bad_render_index():
    game = matrix.vector_env(2)
    game.reset(seed=0)
    with pytest.raises(ParamError, match="render index = 2 is not allowed"):
        game.render_rgb(2)


def test_every_joint_action_of_every_table_is_reachable():
    for game in BUNDLED:
        eng = matrix.vector_env(4, game=game, max_cycles=1)
        joints = np.array(list(itertools.product(range(2), repeat=2)))
        eng.reset(seed=0)
        _, rewards, _, _, _ = eng.step(joints)
        # common practice (no source): the engine's reward is the table entry of the joint action
        np.testing.assert_array_equal(rewards, eng.payoff_table[joints[:, 0], joints[:, 1]])
