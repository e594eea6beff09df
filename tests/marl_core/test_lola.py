"""Exact LOLA and naive learners on iterated two-player games (marl_core/learners/lola.py).

Checked against things outside the code under test:
- closed-form values of known memory-one strategies, summed by hand below (geometric series);
- a Monte-Carlo estimate of the same values from the batched matrix engine (envs/matrix_v0.py), within a
  stated confidence interval;
- the update rules, re-done with finite differences of the closed form (no autograd);
- the paper's qualitative results over 5 seeds (Foerster et al. 2018, from memory: docs/sources.md, "LOLA").
"""

from __future__ import annotations

import numpy as np
import pytest
import torch

from envs.matrix_v0 import MatrixGame
from marl_core.learners import lola

GAMMA = 0.96  # Foerster et al. 2018, from memory (docs/sources.md, "LOLA")
# IPD payoffs (C,C) -1, (C,D) -3, (D,C) 0, (D,D) -2: Foerster et al. 2018, from memory (docs/sources.md, "LOLA")
IPD_FLAT = [-1, -1, -3, 0, 0, -3, -2, -2]
IPD = np.asarray(IPD_FLAT, dtype=np.float64).reshape(2, 2, 2)
PENNIES = np.asarray([[[1, -1], [-1, 1]], [[-1, 1], [1, -1]]], dtype=np.float64)

# memory-one strategies as probabilities of cooperating: first round, then after CC, CD, DC, DD
# (agent_0's action first, for either player)
ALL_C = [1.0, 1, 1, 1, 1]
ALL_D = [0.0, 0, 0, 0, 0]
TFT_0 = [1.0, 1, 0, 1, 0]  # agent_0 copies agent_1's last action
TFT_1 = [1.0, 1, 1, 0, 0]  # agent_1 copies agent_0's last action
SUSPICIOUS_TFT_0 = [0.0, 1, 0, 1, 0]  # tit-for-tat that defects first


def _v(p0, p1, table=IPD, gamma=GAMMA):
    t = lola.joint_payoffs(table)
    out = lola.values_from_probs(torch.tensor(p0, dtype=torch.float64), torch.tensor(p1, dtype=torch.float64),
                                 t, gamma)
    return out.numpy()


# --------------------------------------------------------------------------- closed form, by hand

@pytest.mark.parametrize("p0, p1, expected", [
    # every round (C, C): -1 / (1 - gamma) = -25 each
    (TFT_0, TFT_1, (-1 / (1 - GAMMA), -1 / (1 - GAMMA))),
    (ALL_C, ALL_C, (-25.0, -25.0)),
    # every round (D, D): -2 / (1 - gamma) = -50 each
    (ALL_D, ALL_D, (-50.0, -50.0)),
    # always-defect against tit-for-tat: (D, C) once, then (D, D): 0 + gamma * -2 / (1 - gamma) = -48;
    # the tit-for-tat player -3 + gamma * -2 / (1 - gamma) = -51
    (ALL_D, TFT_1, (-2 * GAMMA / (1 - GAMMA), -3 - 2 * GAMMA / (1 - GAMMA))),
    # always-cooperate against always-defect: -3 / (1 - gamma) = -75 and 0
    (ALL_C, ALL_D, (-75.0, 0.0)),
    # a suspicious tit-for-tat against tit-for-tat alternates (D, C), (C, D), ...:
    # agent_0 gets 0, -3, 0, -3, ... = -3 gamma / (1 - gamma^2); agent_1 gets -3 / (1 - gamma^2)
    (SUSPICIOUS_TFT_0, TFT_1, (-3 * GAMMA / (1 - GAMMA ** 2), -3 / (1 - GAMMA ** 2))),
])
def test_closed_form_values_of_known_strategies(p0, p1, expected):
    np.testing.assert_allclose(_v(p0, p1), expected, rtol=1e-12)


def test_closed_form_value_of_memoryless_mixed_strategies():
    # memoryless: cooperate with p and q every round; each round pays the same expected amount, summed over
    # a geometric series (hand algebra)
    p, q = 0.3, 0.8
    r0 = p * q * -1 + p * (1 - q) * -3 + (1 - p) * q * 0 + (1 - p) * (1 - q) * -2
    r1 = p * q * -1 + p * (1 - q) * 0 + (1 - p) * q * -3 + (1 - p) * (1 - q) * -2
    np.testing.assert_allclose(_v([p] * 5, [q] * 5), np.array([r0, r1]) / (1 - GAMMA), rtol=1e-12)
    # uniform random on both sides: mean payoff (-1 - 3 + 0 - 2) / 4 = -1.5 per round
    np.testing.assert_allclose(_v([0.5] * 5, [0.5] * 5), [-1.5 / (1 - GAMMA)] * 2, rtol=1e-12)


def test_the_table_layout_is_the_engines():
    game = MatrixGame(1, payoffs=IPD_FLAT)
    np.testing.assert_array_equal(game.payoff_table, IPD.astype(np.float32))
    np.testing.assert_array_equal(lola.joint_payoffs(game.payoff_table).numpy(),
                                  [[-1, -1], [-3, 0], [0, -3], [-2, -2]])


def test_state_index_reads_the_engines_observation():
    game = MatrixGame(4, payoffs=IPD_FLAT)
    obs, _ = game.reset(seed=0)
    assert (lola.state_index(obs) == 0).all()
    joint = np.array([[0, 0], [0, 1], [1, 0], [1, 1]])
    obs, *_ = game.step(joint)
    np.testing.assert_array_equal(lola.state_index(obs), [[1, 1], [2, 2], [3, 3], [4, 4]])


# --------------------------------------------------------------------------- against the engine

def _monte_carlo(p0, p1, copies: int, rounds: int, seed: int):
    """Discounted returns of each copy, played through the batched engine."""
    game = MatrixGame(copies, payoffs=IPD_FLAT, max_cycles=rounds, horizon="time_limit")
    rng = np.random.default_rng(seed)
    probs = np.stack([np.asarray(p0), np.asarray(p1)])  # (2, 5)
    obs, _ = game.reset(seed=seed)
    total = np.zeros((copies, 2))
    for t in range(rounds):
        s = lola.state_index(obs)                                    # (B, 2)
        coop = probs[np.arange(2)[None, :], s]                       # (B, 2)
        actions = (rng.random((copies, 2)) >= coop).astype(np.int64)  # 0 = cooperate
        obs, rewards, *_ = game.step(actions)
        total += GAMMA ** t * rewards
    return total


def test_closed_form_matches_the_engine_within_its_interval():
    p0 = [0.7, 0.9, 0.2, 0.6, 0.1]
    p1 = [0.4, 0.8, 0.5, 0.3, 0.35]
    rounds = 300
    returns = _monte_carlo(p0, p1, copies=4000, rounds=rounds, seed=3)
    mean = returns.mean(axis=0)
    se = returns.std(axis=0, ddof=1) / np.sqrt(len(returns))
    # the rounds after `rounds` are cut off: at most max |payoff| * gamma^rounds / (1 - gamma) (< 0.0005)
    tail = 3 * GAMMA ** rounds / (1 - GAMMA)
    closed = _v(p0, p1)
    # 4 standard errors: a two-sided 99.99% normal interval per player (common practice, no source)
    assert np.all(np.abs(mean - closed) <= 4 * se + tail), (mean, closed, se)
    # and the estimate is sharp enough to tell a wrong closed form apart: under a tenth of the value
    assert np.all(4 * se < 0.1 * np.abs(closed))


# --------------------------------------------------------------------------- the update rules

def _num_grad(f, x, h=1e-5):
    g = np.zeros_like(x)
    for k in range(len(x)):
        e = np.zeros_like(x)
        e[k] = h
        g[k] = (f(x + e) - f(x - e)) / (2 * h)
    return g


def _value(i, t0, t1, table):
    return lola.values(torch.tensor(t0), torch.tensor(t1), lola.joint_payoffs(table), GAMMA)[i].item()


def _hand_step(i, t0, t1, table, lr, la, shaping, h=1e-4):
    """Player i's new logits by the module docstring's rules, with finite differences only."""
    j = 1 - i
    mine, theirs = (t0, t1) if i == 0 else (t1, t0)

    def v(who, a, b):  # value of player `who` with player i at a and player j at b
        return _value(who, *((a, b) if i == 0 else (b, a)), table)

    step = _num_grad(lambda x: v(i, x, theirs), mine)
    if shaping:
        c = _num_grad(lambda y: v(i, mine, y), theirs)  # grad_j V_i, held fixed
        # mixed second derivatives d^2 V_j / d theta_i[a] d theta_j[b], four-point stencil
        hess = np.zeros((5, 5))
        for a in range(5):
            for b in range(5):
                ea, eb = np.eye(5)[a] * h, np.eye(5)[b] * h
                hess[a, b] = (v(j, mine + ea, theirs + eb) - v(j, mine + ea, theirs - eb)
                              - v(j, mine - ea, theirs + eb) + v(j, mine - ea, theirs - eb)) / (4 * h * h)
        step = step + la * hess @ c
    return mine + lr * step


@pytest.mark.parametrize("table", [IPD, PENNIES], ids=["ipd", "pennies"])
@pytest.mark.parametrize("shaping", [(False, False), (True, True), (True, False)])
def test_exact_step_against_finite_differences(table, shaping):
    rng = np.random.default_rng(7)
    t0, t1 = rng.normal(size=5), rng.normal(size=5)
    lr, la = 0.3, 0.7
    expected = [_hand_step(i, t0, t1, table, lr, la, shaping[i]) for i in range(2)]
    n0, n1 = lola.exact_step(torch.tensor(t0), torch.tensor(t1), lola.joint_payoffs(table), GAMMA, lr, la,
                             shaping)
    np.testing.assert_allclose(n0.numpy(), expected[0], rtol=1e-5, atol=1e-5)
    np.testing.assert_allclose(n1.numpy(), expected[1], rtol=1e-5, atol=1e-5)
    if shaping[0]:  # the shaping term is not negligible here, so the test can tell LOLA from NL
        naive, _ = lola.exact_step(torch.tensor(t0), torch.tensor(t1), lola.joint_payoffs(table), GAMMA, lr,
                                   la, (False, False))
        assert np.abs(naive.numpy() - expected[0]).max() > 1e-3


# --------------------------------------------------------------------------- the paper's results

SEEDS = range(5)


@pytest.fixture(scope="module")
def ipd_runs():
    # learning rates delta = eta = 1 in the exact case: Foerster et al. 2018, from memory
    return {pair: [lola.train_exact(IPD, pair, updates=100, seed=s) for s in SEEDS]
            for pair in [(True, True), (False, False), (True, False)]}


def test_lola_pair_ends_near_mutual_cooperation_in_the_ipd(ipd_runs):
    # the paper: about -1.0 to -1.1 per step (from memory); mutual cooperation pays -1
    per_round = np.array([r.reward_per_round for r in ipd_runs[(True, True)]])
    assert np.median(per_round) >= -1.1, per_round
    assert per_round.min() >= -1.2, per_round


def test_naive_pair_ends_near_mutual_defection_in_the_ipd(ipd_runs):
    # the paper: about -2 (from memory); mutual defection pays -2
    per_round = np.array([r.reward_per_round for r in ipd_runs[(False, False)]])
    assert np.median(per_round) <= -1.9, per_round


def test_lola_earns_at_least_as_much_as_a_naive_opponent(ipd_runs):
    per_round = np.array([r.reward_per_round for r in ipd_runs[(True, False)]])  # (seeds, [LOLA, NL])
    assert np.median(per_round[:, 0] - per_round[:, 1]) >= -0.01, per_round
    # and the naive learner, facing LOLA, does better than against another naive learner
    naive = np.array([r.reward_per_round for r in ipd_runs[(False, False)]])
    assert np.median(per_round[:, 1]) > np.median(naive[:, 1])


def test_lola_pair_ends_near_the_mixed_equilibrium_in_matching_pennies():
    # LOLA-LOLA converges to 0.5 everywhere (Foerster et al. 2018, from memory); naive learners drift away.
    # Learning rates 0.1 (delta) and 1 (eta) are our own choice: at delta = 1 neither pair settles.
    lola_dev = [np.abs(lola.train_exact(PENNIES, (True, True), 1000, s, lr=0.1).probs - 0.5).max()
                for s in SEEDS]
    naive_dev = [np.abs(lola.train_exact(PENNIES, (False, False), 1000, s, lr=0.1).probs - 0.5).max()
                 for s in SEEDS]
    assert max(lola_dev) < 0.05, lola_dev
    assert min(naive_dev) > 0.3, naive_dev


# --------------------------------------------------------------------------- sampled (DiCE) gradients

def _first_and_second(value_fn, t0, t1):
    """grad_0 V_0 and LOLA's term (grad_1 V_0)^T (grad_0 grad_1 V_1), by autograd on ``value_fn``."""
    a, b = t0.clone().requires_grad_(True), t1.clone().requires_grad_(True)
    v = value_fn(a, b)
    g00 = torch.autograd.grad(v[0], a, create_graph=True)[0]
    g01 = torch.autograd.grad(v[0], b, create_graph=True)[0]
    g11 = torch.autograd.grad(v[1], b, create_graph=True)[0]
    shaping = torch.autograd.grad((g11 * g01.detach()).sum(), a)[0]
    return g00.detach().numpy(), shaping.detach().numpy()


def _score_surrogate(theta0, theta1, states, actions, rewards, gamma):
    """A surrogate that is NOT DiCE: sum_t gamma^t r_t * (sum of log-probabilities up to t). Its first
    derivative is the same score-function estimate, but its second derivative lacks the product of
    first derivatives that DiCE's magic box keeps: the bug the DiCE test must be able to catch."""
    s = torch.as_tensor(states, dtype=torch.long)
    a = torch.as_tensor(actions, dtype=torch.float64)
    r = torch.as_tensor(rewards, dtype=torch.float64)
    disc = gamma ** torch.arange(s.shape[1], dtype=torch.float64)
    z = torch.stack([theta0, theta1])[:, s].permute(1, 2, 0)
    cum = torch.cumsum(torch.nn.functional.logsigmoid(torch.where(a == 0, z, -z)).sum(-1), dim=1)
    return (cum.unsqueeze(-1) * r * disc[None, :, None]).sum(1).mean(0)


def test_dice_derivatives_estimate_the_closed_forms():
    # DiCE's derivatives of every order are unbiased Monte-Carlo estimates (Foerster et al. 2018, "DiCE",
    # from memory: docs/sources.md, "DiCE"); checked on the closed form's first derivative and on the
    # second-order term that LOLA uses, from episodes played through the batched engine. gamma = 0.5 (the
    # closed form takes any gamma) keeps the episodes short and the estimates sharp: measured here, the
    # second-order term's standard error over 6 batches is 0.0006-0.0015 against terms of 0.011-0.024, so a
    # surrogate without the second-order part (its term is 0) lies 8 or more standard errors away
    gamma, rounds = 0.5, 30  # the rounds cut off weigh 0.5^30 < 1e-9
    rng0 = np.random.default_rng(1)
    t0, t1 = torch.tensor(rng0.normal(size=5)), torch.tensor(rng0.normal(size=5))
    payoffs = lola.joint_payoffs(IPD)
    exact = _first_and_second(lambda a, b: lola.values(a, b, payoffs, gamma), t0, t1)
    game = MatrixGame(2048, payoffs=IPD_FLAT, max_cycles=rounds, horizon="time_limit")
    probs = torch.sigmoid(torch.stack([t0, t1])).numpy()
    rng = np.random.default_rng(0)
    dice, score = [], []
    for k in range(6):
        batch = lola.play(probs, game, rounds, rng, seed=k)
        dice.append(_first_and_second(lambda a, b, batch=batch: lola.dice_values(a, b, *batch, gamma), t0, t1))
        score.append(_first_and_second(lambda a, b, batch=batch: _score_surrogate(a, b, *batch, gamma), t0, t1))
    for q, name in enumerate(["first derivative", "second-order term"]):
        arr = np.array([e[q] for e in dice])
        mean, se = arr.mean(0), arr.std(0, ddof=1) / np.sqrt(len(arr))
        # 4 standard errors of the mean over 6 batches (common practice, no source)
        assert np.all(np.abs(mean - exact[q]) <= 4 * se), (name, mean, exact[q], se)
        # power: the tolerance is a small part of every element of the term it checks
        assert np.all(4 * se < 0.5 * np.abs(exact[q])), (name, se, exact[q])
    # ... so a surrogate that loses the second-order part fails the same check (and is right to first order)
    se2 = np.array([e[1] for e in dice]).std(0, ddof=1) / np.sqrt(len(dice))
    wrong = np.array([e[1] for e in score]).mean(0)
    assert np.all(np.abs(wrong - exact[1]) > 4 * se2), (wrong, exact[1], se2)
    first = np.array([e[0] for e in score])
    assert np.all(np.abs(first.mean(0) - exact[0]) <= 4 * first.std(0, ddof=1) / np.sqrt(len(first)))


def test_dice_surrogate_value_and_first_derivative_on_two_written_out_episodes():
    # two episodes of two rounds, with non-zero logits, written out by hand: states, actions, rewards
    gamma = 0.9
    theta0 = torch.tensor([0.3, -0.5, 0.8, 0.1, -1.2], dtype=torch.float64)
    theta1 = torch.tensor([-0.4, 0.6, 0.2, -0.9, 0.5], dtype=torch.float64)
    states = np.array([[0, 3], [0, 2]])                           # the state index of each round, as given
    actions = np.array([[[1, 1], [0, 1]], [[1, 0], [1, 1]]])      # (episode, round, player)
    rewards = np.array([[[-2., -2.], [-3., 0.]], [[0., -3.], [-2., -2.]]])
    v = lola.dice_values(theta0.clone().requires_grad_(True), theta1, states, actions, rewards, gamma)
    # the value: the mean discounted return (the magic box is 1 in value)
    expected = (rewards * gamma ** np.arange(2)[None, :, None]).sum(1).mean(0)
    np.testing.assert_allclose(v.detach().numpy(), expected, rtol=1e-12)
    # player 0's gradient, written out: with pi(0 | s) = sigmoid(theta[s]), d log pi(a | s) / d theta[s] is
    # 1 - sigmoid(theta[s]) for a = 0 and -sigmoid(theta[s]) for a = 1 (score function, from memory). Each
    # round's log-probability multiplies the discounted reward-to-go from that round minus the baseline,
    # the two episodes' mean reward-to-go (dice_values' docstring); the value is the mean over episodes
    sig = 1 / (1 + np.exp(-theta0.numpy()))
    disc = rewards * gamma ** np.arange(2)[None, :, None]
    togo = disc[:, ::-1].cumsum(1)[:, ::-1]                       # (episode, round, player)
    base = togo.mean(0)
    grad = np.zeros(5)
    for b in range(2):
        for t in range(2):
            st, a0 = states[b, t], actions[b, t, 0]
            dlogp = (1 - sig[st]) if a0 == 0 else -sig[st]
            grad[st] += dlogp * (togo[b, t, 0] - base[t, 0]) / 2
    theta = theta0.clone().requires_grad_(True)
    got = torch.autograd.grad(lola.dice_values(theta, theta1, states, actions, rewards, gamma)[0], theta)[0]
    np.testing.assert_allclose(got.numpy(), grad, rtol=1e-10, atol=1e-12)
    assert np.abs(grad).max() > 0.1  # not a vacuous zero


def test_sampled_lola_pair_cooperates_and_naive_pair_defects_in_the_ipd():
    # one seed each, a small budget: the qualitative results of the exact case, from sampled gradients
    coop = lola.train_sampled(IPD, (True, True), updates=60, seed=0, copies=128, rounds=80, lr=1.0,
                              lookahead=1.0)
    defect = lola.train_sampled(IPD, (False, False), updates=60, seed=0, copies=128, rounds=80, lr=1.0,
                                lookahead=1.0)
    assert coop.reward_per_round.min() >= -1.2, coop.reward_per_round
    assert defect.reward_per_round.max() <= -1.8, defect.reward_per_round
