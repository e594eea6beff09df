"""Tests of envs.metrics: the social outcome metrics and the Gini coefficient."""

from __future__ import annotations

import math

import numpy as np
import pytest

from envs.errors import EnvError
from envs.metrics import (
    METRIC_NAMES,
    MetricError,
    efficiency,
    equality,
    gini,
    peace,
    social_outcomes,
    social_outcomes_batch,
    sustainability,
)


def one_step(returns) -> np.ndarray:
    """A (1, N) reward array whose returns are ``returns``."""
    return np.asarray(returns, dtype=np.float64)[None, :]


def spread_over_time(returns, steps: int = 4) -> np.ndarray:
    """A (steps, N) reward array with the given returns, paid in equal parts at every step."""
    r = np.asarray(returns, dtype=np.float64)
    return np.repeat(r[None, :] / steps, steps, axis=0)


# --- equality: worked examples (Perolat et al. 2017; docs/sources.md, "Social outcome metrics") ---------

@pytest.mark.parametrize(("returns", "expected"), [
    ((1, 1, 1, 1), 1.0),          # docs/sources.md, "Social outcome metrics": (1,1,1,1) -> 1
    ((0, 0, 0, 1), 0.25),         # docs/sources.md, "Social outcome metrics": (0,0,0,1) -> 0.25
    ((1, 2, 3, 4, 5), 11 / 15),   # docs/sources.md, "Social outcome metrics": (1,2,3,4,5) -> 11/15
], ids=["equal", "one-takes-all", "one-to-five"])
def test_equality_worked_examples(returns, expected):
    assert equality(one_step(returns)) == pytest.approx(expected)
    assert equality(spread_over_time(returns)) == pytest.approx(expected)


def test_equality_is_one_minus_gini():
    r = np.array([[0.0, 2.0, 1.0], [3.0, 0.0, 1.0]])
    # Perolat et al. 2017 (docs/sources.md, "Social outcome metrics"): E = 1 - Gini of the returns
    assert equality(r) == pytest.approx(1.0 - gini(r.sum(axis=0)))


# --- Gini: examples from the MathWorld formula (docs/sources.md, "Gini coefficient") -------------------

@pytest.mark.parametrize(("values", "expected"), [
    ((1, 1, 1, 1), 0.0),              # MathWorld (docs/sources.md, "Gini coefficient"): (1,1,1,1) -> 0
    ((0, 0, 0, 1), 0.75),             # MathWorld (docs/sources.md, "Gini coefficient"): (0,0,0,1) -> 0.75
    ((0, 100), 0.5),                  # MathWorld (docs/sources.md, "Gini coefficient"): (0,100) -> 0.5
    ((1, 2, 3, 4, 5), 4 / 15),        # MathWorld (docs/sources.md, "Gini coefficient"): (1,2,3,4,5) -> 4/15
    ((2, 4, 6, 8), 0.25),             # MathWorld (docs/sources.md, "Gini coefficient"): (2,4,6,8) -> 0.25
    ((20, 30, 40, 50, 60), 0.2),      # MathWorld (docs/sources.md, "Gini coefficient"): (20,30,40,50,60) -> 0.2
], ids=["equal", "one-takes-all", "two", "one-to-five", "evens", "tens"])
def test_gini_mathworld_examples(values, expected):
    assert gini(values) == pytest.approx(expected)


@pytest.mark.parametrize("n", range(1, 13))
def test_gini_closed_form_of_one_to_n(n):
    # MathWorld closed form G(1..n) = (n - 1) / (3n) (docs/sources.md, "Gini coefficient")
    assert gini(np.arange(1, n + 1)) == pytest.approx((n - 1) / (3 * n))


def test_gini_matches_the_pairwise_formula():
    rng = np.random.default_rng(0)
    x = rng.uniform(0, 10, size=7)
    # MathWorld pairwise form G = sum_i sum_j |x_i - x_j| / (2 n^2 mean) (docs/sources.md, "Gini coefficient")
    pairwise = np.abs(x[:, None] - x[None, :]).sum() / (2 * x.size ** 2 * x.mean())
    assert gini(x) == pytest.approx(pairwise)


def test_gini_ignores_order_and_scale():
    # common practice (no source): the Gini coefficient depends on neither the order nor the unit
    assert gini([5, 1, 4, 2, 3]) == pytest.approx(gini([1, 2, 3, 4, 5]))
    assert gini([10, 20, 30, 40, 50]) == pytest.approx(gini([1, 2, 3, 4, 5]))


def test_gini_over_the_last_axis():
    g = gini(np.array([[1, 1, 1, 1], [0, 0, 0, 1], [2, 4, 6, 8]]))
    assert isinstance(g, np.ndarray)
    assert g.shape == (3,)
    # MathWorld (docs/sources.md, "Gini coefficient"): (1,1,1,1) -> 0, (0,0,0,1) -> 0.75, (2,4,6,8) -> 0.25
    np.testing.assert_allclose(g, [0.0, 0.75, 0.25])


# --- efficiency, sustainability, peace: small hand-computed arrays ----------------------------------------

def test_efficiency_hand_computed():
    r = np.array([[1.0, 2.0], [0.0, 3.0]])
    # hand-computed from the formula (docs/sources.md, "Social outcome metrics"):
    # U = (1 + 2 + 0 + 3) / T = 6 / 2
    assert efficiency(r) == pytest.approx(3.0)


def test_efficiency_counts_negative_rewards():
    r = np.array([[1.0, -1.0], [2.0, 0.0], [0.0, 0.0]])
    # hand-computed from the formula (docs/sources.md, "Social outcome metrics"): U = (1 - 1 + 2) / 3
    assert efficiency(r) == pytest.approx(2 / 3)


def test_sustainability_hand_computed():
    r = np.array([[1.0, 0.0], [0.0, 0.0], [1.0, 2.0]])
    # hand-computed from the formula (docs/sources.md, "Social outcome metrics"), 1-based steps:
    # t_0 = (1 + 3) / 2 = 2, t_1 = 3, S = 2.5
    assert sustainability(r) == pytest.approx(2.5)


def test_sustainability_ignores_size_and_non_positive_rewards():
    r = np.array([[5.0, -1.0], [0.0, 1.0], [1.0, 0.0], [-2.0, 1.0]])
    # hand-computed from the formula (docs/sources.md, "Social outcome metrics"), 1-based steps, positive
    # rewards counted once each:
    # t_0 = (1 + 3) / 2 = 2, t_1 = (2 + 4) / 2 = 3, S = 2.5
    assert sustainability(r) == pytest.approx(2.5)


def test_sustainability_leaves_out_an_agent_without_positive_reward():
    r = np.array([[1.0, 0.0], [0.0, -1.0], [1.0, 0.0]])
    # convention of envs.metrics (module docstring): agent_1 has no t_i and is left out; S = t_0 = 2
    assert sustainability(r) == pytest.approx(2.0)


def test_sustainability_is_nan_when_nobody_is_rewarded():
    # convention of envs.metrics (module docstring): no agent with a positive reward -> NaN
    assert math.isnan(sustainability(np.zeros((5, 3))))


def test_sustainability_of_one_step_is_one():
    # convention of envs.metrics (module docstring): time steps are 1-based
    assert sustainability(np.ones((1, 2))) == 1.0


def test_peace_hand_computed():
    tagged = np.array([[0, 1], [0, 1], [0, 0]], dtype=bool)
    # hand-computed from the formula (docs/sources.md, "Social outcome metrics"):
    # P = (N T - 2) / T = (6 - 2) / 3
    assert peace(tagged) == pytest.approx(4 / 3)


def test_peace_bounds():
    # docs/sources.md, "Social outcome metrics": P lies in [0, N]; N when nobody is tagged, 0 when
    # everybody always is
    assert peace(np.zeros((4, 3), dtype=bool)) == 3.0
    assert peace(np.ones((4, 3), dtype=int)) == 0.0


# --- equality edge cases ----------------------------------------------------------------------------------

def test_equality_all_zero_returns_is_one():
    # convention of envs.metrics (module docstring): all returns equal (here all 0) -> E = 1
    assert equality(np.zeros((3, 4))) == 1.0


def test_equality_equal_negative_returns_is_one():
    # convention of envs.metrics (module docstring): all returns equal -> E = 1, whatever their sign
    assert equality(one_step((-1, -1, -1))) == 1.0


def test_equality_equal_up_to_rounding_is_one():
    r = np.array([[0.1, 0.3], [0.2, 0.0], [-0.3, -0.3]])   # returns 0.1 + 0.2 - 0.3 (not exactly 0) and 0
    # convention of envs.metrics (module docstring): equal up to float rounding -> E = 1
    assert equality(r) == 1.0


@pytest.mark.parametrize("returns", [(-1, 1), (-2, 1), (-3, -1)],
                         ids=["zero-sum", "negative-sum", "all-negative"])
def test_equality_is_nan_for_unequal_returns_with_non_positive_sum(returns):
    # convention of envs.metrics (module docstring): unequal returns with sum <= 0 -> NaN
    assert math.isnan(equality(one_step(returns)))


def test_equality_with_a_negative_return_and_positive_sum():
    # hand-computed from the formula (docs/sources.md, "Social outcome metrics") on returns as given:
    # (-1, 3): sum |R_i - R_j| = 8, 2 N sum R = 8 -> E = 0;  (-2, 4): 12 / 8 -> E = -0.5
    assert equality(one_step((-1, 3))) == pytest.approx(0.0)
    assert equality(one_step((-2, 4))) == pytest.approx(-0.5)


def test_gini_edge_cases():
    # convention of envs.metrics (module docstring): equal values -> 0; unequal with sum <= 0 -> NaN
    assert gini([0, 0, 0]) == 0.0
    assert gini([7]) == 0.0
    assert math.isnan(gini([-1, 1]))


# --- social_outcomes and the batched form -----------------------------------------------------------------

def test_social_outcomes_hand_computed():
    rewards = np.array([[1.0, 0.0], [0.0, 0.0], [1.0, 2.0]])
    tagged = np.array([[0, 1], [0, 1], [0, 0]])
    out = social_outcomes(rewards, tagged)
    assert set(out) == set(METRIC_NAMES) == {"efficiency", "equality", "sustainability", "peace"}
    assert all(isinstance(v, float) for v in out.values())
    # hand-computed from the formulas (docs/sources.md, "Social outcome metrics"): returns (2, 2)
    assert out["efficiency"] == pytest.approx(4 / 3)     # (2 + 2) / 3
    assert out["equality"] == pytest.approx(1.0)         # equal returns
    assert out["sustainability"] == pytest.approx(2.5)   # t = (2, 3), 1-based
    assert out["peace"] == pytest.approx(4 / 3)          # (6 - 2) / 3


def test_batch_matches_single_episodes():
    rng = np.random.default_rng(3)
    steps, copies, agents = 6, 5, 3
    rewards = rng.integers(-1, 3, size=(steps, copies, agents)).astype(np.float32)
    rewards[:, 2] = 0.0                    # one copy where nobody is rewarded (NaN sustainability)
    rewards[:, 3, 0] = -5.0                # one copy with a negative team return (NaN equality)
    tagged = rng.random((steps, copies, agents)) < 0.3
    batch = social_outcomes_batch(rewards, tagged)
    for key in METRIC_NAMES:
        assert batch[key].shape == (copies,)
        single = [social_outcomes(rewards[:, b], tagged[:, b])[key] for b in range(copies)]
        # common practice (no source): the batched form equals the per-copy form
        np.testing.assert_allclose(batch[key], single)
    assert math.isnan(batch["sustainability"][2])
    assert math.isnan(batch["equality"][3])       # returns at most (-30, 12, 12): unequal, sum < 0


def test_each_function_agrees_with_social_outcomes():
    rng = np.random.default_rng(4)
    rewards = rng.normal(size=(7, 4)) + 1.0
    tagged = rng.random((7, 4)) < 0.2
    out = social_outcomes(rewards, tagged)
    # common practice (no source): one formula, reached through either function
    assert out["efficiency"] == pytest.approx(efficiency(rewards))
    assert out["equality"] == pytest.approx(equality(rewards))
    assert out["sustainability"] == pytest.approx(sustainability(rewards))
    assert out["peace"] == pytest.approx(peace(tagged))


# --- rejected inputs --------------------------------------------------------------------------------------

def test_errors_are_env_errors():
    assert issubclass(MetricError, EnvError)
    assert issubclass(MetricError, ValueError)


def test_rejects_rewards_with_wrong_number_of_axes():
    with pytest.raises(MetricError, match=r"rewards: expected an array of shape \(T, N\)"):
        efficiency(np.zeros(5))


def test_rejects_rewards_without_time_steps():
    with pytest.raises(MetricError, match="rewards: .*no time steps"):
        social_outcomes(np.zeros((0, 3)), np.zeros((0, 3)))


def test_rejects_rewards_without_agents():
    with pytest.raises(MetricError, match="rewards: .*no agents"):
        sustainability(np.zeros((4, 0)))


def test_rejects_non_finite_rewards():
    with pytest.raises(MetricError, match="rewards: contains NaN"):
        equality(np.array([[1.0, np.nan]]))


def test_rejects_ragged_rewards():
    with pytest.raises(MetricError, match="rewards: cannot be read as an array"):
        efficiency([[1.0, 2.0], [3.0]])


def test_rejects_non_numeric_rewards():
    with pytest.raises(MetricError, match="rewards: expected an array of real numbers"):
        efficiency(np.array([["a", "b"]]))


def test_rejects_tagged_out_values_other_than_zero_and_one():
    with pytest.raises(MetricError, match="tagged_out: contains the value 2"):
        peace(np.array([[0, 2]]))


def test_rejects_tagged_out_of_another_shape():
    with pytest.raises(MetricError, match=r"tagged_out: has shape \(3, 2\); expected the shape of rewards"):
        social_outcomes(np.zeros((4, 2)), np.zeros((3, 2), dtype=bool))


def test_batch_rejects_single_episode_arrays():
    with pytest.raises(MetricError, match=r"rewards: expected an array of shape \(T, B, N\)"):
        social_outcomes_batch(np.zeros((4, 2)), np.zeros((4, 2)))


def test_gini_rejects_empty_values():
    with pytest.raises(MetricError, match="values: has shape"):
        gini([])
