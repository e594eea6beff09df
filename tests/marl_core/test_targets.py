"""The update arithmetic of ``marl_core.targets`` on hand-made numbers.

Every expected value names its source beside it: a paper and equation, "hand-computed from the formula",
or the torch function the result is held against.
"""

import math

import pytest
import torch
import torch.nn.functional as F
from torch import nn

from marl_core.targets import (
    dqn_target,
    dueling_combine,
    gumbel_softmax_st,
    huber,
    linear_schedule,
    one_hot,
    polyak_update,
    td_priorities,
)

# ---------------------------------------------------------------------------------------------- DQN targets
# One transition, r = 1, gamma = 0.9. The online net prefers action 1 at s', the target net action 2, so the
# two targets differ.
R, GAMMA = 1.0, 0.9
Q_ONLINE_NEXT = [1.0, 3.0, 2.0]  # argmax = 1
Q_TARGET_NEXT = [4.0, 0.0, 5.0]  # argmax = 2


def test_dqn_target_bootstraps_on_the_target_max():
    y = dqn_target(torch.tensor([R]), torch.tensor([GAMMA]), torch.tensor([Q_TARGET_NEXT]))
    # DQN (Mnih et al. 2015): y = r + gamma max_a Q_target(s', a) = 1 + 0.9 * 5 = 5.5 (hand-computed)
    assert y.tolist() == pytest.approx([5.5])


def test_double_dqn_target_values_the_online_argmax_with_the_target_net():
    y = dqn_target(torch.tensor([R]), torch.tensor([GAMMA]), torch.tensor([Q_TARGET_NEXT]),
                   torch.tensor([Q_ONLINE_NEXT]))
    # Double DQN (van Hasselt et al. 2016): y = r + gamma Q_target(s', argmax_a Q_online(s', a))
    #   = 1 + 0.9 * Q_target(s', 1) = 1 + 0.9 * 0 = 1.0 (hand-computed)
    assert y.tolist() == pytest.approx([1.0])
    dqn = dqn_target(torch.tensor([R]), torch.tensor([GAMMA]), torch.tensor([Q_TARGET_NEXT]))
    assert dqn.item() != pytest.approx(y.item())  # the example is one where the two targets differ


@pytest.mark.parametrize("double", [False, True], ids=["dqn", "double"])
def test_zero_discount_gives_the_reward(double):
    online = torch.tensor([Q_ONLINE_NEXT]) if double else None
    y = dqn_target(torch.tensor([R]), torch.tensor([0.0]), torch.tensor([Q_TARGET_NEXT]), online)
    # terminal transition (discount 0): y = r (Mnih et al. 2015, Algorithm 1)
    assert y.tolist() == pytest.approx([R])


def test_dqn_targets_keep_the_agent_axis():
    # (K, N, A) = (1, 2, 3): agent 0 as above, agent 1 with the roles of the nets swapped and gamma^2 = 0.81
    returns = torch.tensor([[1.0, 2.0]])
    discounts = torch.tensor([[0.9, 0.81]])
    target = torch.tensor([[Q_TARGET_NEXT, Q_ONLINE_NEXT]])
    online = torch.tensor([[Q_ONLINE_NEXT, Q_TARGET_NEXT]])
    y_dqn = dqn_target(returns, discounts, target)
    y_double = dqn_target(returns, discounts, target, online)
    assert y_dqn.shape == y_double.shape == (1, 2)
    # agent 1, DQN: 2 + 0.81 * max(1, 3, 2) = 4.43; double: online argmax 2 -> 2 + 0.81 * 2 = 3.62
    # (hand-computed from the formulas of Mnih et al. 2015 and van Hasselt et al. 2016)
    assert y_dqn.tolist() == [pytest.approx([5.5, 4.43])]
    assert y_double.tolist() == [pytest.approx([1.0, 3.62])]


# ---------------------------------------------------------------------------------------------- dueling
def test_dueling_aggregation_on_hand_numbers():
    value = torch.tensor([[2.0], [-1.0]])
    advantage = torch.tensor([[1.0, 2.0, 6.0], [0.0, 0.0, 3.0]])
    q = dueling_combine(value, advantage)
    # Wang et al. 2016 eq. 9, Q = V + A - mean A (hand-computed):
    #   row 0: mean A = 3 -> 2 + (1, 2, 6) - 3 = (0, 1, 5); row 1: mean A = 1 -> -1 + (0, 0, 3) - 1 = (-2, -2, 1)
    assert q.tolist() == [pytest.approx([0.0, 1.0, 5.0]), pytest.approx([-2.0, -2.0, 1.0])]


def test_dueling_advantages_have_zero_mean():
    gen = torch.Generator().manual_seed(0)
    value = torch.randn(5, 3, 1, generator=gen)
    advantage = torch.randn(5, 3, 7, generator=gen) * 4
    q = dueling_combine(value, advantage)
    # mean_a (Q - V) = mean_a A - mean_a A = 0 (Wang et al. 2016 eq. 9, hand-derived)
    torch.testing.assert_close((q - value).mean(dim=-1), torch.zeros(5, 3), atol=1e-6, rtol=0)


# ---------------------------------------------------------------------------------------------- Huber
def test_huber_values_at_half_and_three():
    out = huber(torch.tensor([0.5, -0.5, 3.0, -3.0]))
    # delta = 1: x^2/2 = 0.125 inside, |x| - 1/2 = 2.5 outside (hand-computed from the formula)
    assert out.tolist() == pytest.approx([0.125, 0.125, 2.5, 2.5])
    # the same as torch.nn.functional.huber_loss with delta = 1
    torch.testing.assert_close(out, F.huber_loss(torch.tensor([0.5, -0.5, 3.0, -3.0]), torch.zeros(4),
                                                 reduction="none", delta=1.0))


def test_huber_gradient_is_the_td_error_clipped_to_one():
    x = torch.tensor([-5.0, -3.0, -1.0, -0.5, 0.0, 0.25, 0.5, 1.0, 3.0, 40.0], requires_grad=True)
    huber(x).sum().backward()
    # Mnih et al. 2015: the TD error term clipped to [-1, 1] (== Huber with delta 1; docs/sources.md, "DQN")
    expected = [-1.0, -1.0, -1.0, -0.5, 0.0, 0.25, 0.5, 1.0, 1.0, 1.0]  # hand-computed: clamp(x, -1, 1)
    assert x.grad.tolist() == pytest.approx(expected)


def test_huber_with_another_delta():
    out = huber(torch.tensor([1.0, 4.0]), delta=2.0)
    # delta = 2: 1^2/2 = 0.5; 2 * (4 - 1) = 6 (hand-computed from the formula)
    assert out.tolist() == pytest.approx([0.5, 6.0])


# ---------------------------------------------------------------------------------------------- Gumbel-softmax
LOGITS = [[1.0, 0.0, -1.0, 0.5], [0.0, 2.0, 0.0, -0.5], [-1.0, -1.0, 3.0, 0.0]]


@pytest.mark.parametrize("tau", [1.0, 0.5, 2.0], ids=["tau1", "tau0.5", "tau2"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_gumbel_softmax_st_matches_torch(seed, tau):
    weights = torch.tensor([[0.3, -1.0, 2.0, 0.5], [1.5, 0.2, -0.7, 1.0], [-0.4, 0.9, 0.1, 2.5]])

    def run(fn):
        logits = torch.tensor(LOGITS, requires_grad=True)
        torch.manual_seed(seed)
        out = fn(logits)
        (out * weights).sum().backward()  # a fixed linear function of the output
        return out.detach(), logits.grad

    ours, our_grad = run(lambda lg: gumbel_softmax_st(lg, tau))
    ref, ref_grad = run(lambda lg: F.gumbel_softmax(lg, tau=tau, hard=True))
    # torch.nn.functional.gumbel_softmax(logits, tau, hard=True) under the same seed
    torch.testing.assert_close(ours, ref, atol=1e-6, rtol=0)
    torch.testing.assert_close(our_grad, ref_grad)
    # forward: exactly one-hot rows (straight-through estimator, Jang et al. 2017)
    assert torch.all((ours == 0) | (ours == 1))
    assert ours.sum(dim=-1).tolist() == [1.0, 1.0, 1.0]
    assert our_grad.abs().sum() > 0  # the backward pass is the soft sample's, not zero


def test_gumbel_softmax_st_uses_its_generator():
    logits = torch.zeros(50, 5)
    a = gumbel_softmax_st(logits, 1.0, torch.Generator().manual_seed(3))
    b = gumbel_softmax_st(logits, 1.0, torch.Generator().manual_seed(3))
    c = gumbel_softmax_st(logits, 1.0, torch.Generator().manual_seed(4))
    torch.testing.assert_close(a, b)  # same generator seed, same draw (hand-made check)
    assert not torch.equal(a, c)


def test_gumbel_argmax_frequencies_match_softmax():
    n = 20_000
    logits = torch.tensor([1.0, 0.0, -1.0, 0.5])
    hard = gumbel_softmax_st(logits.expand(n, 4), 0.7, torch.Generator().manual_seed(0))
    freq = hard.sum(dim=0) / n
    p = logits.softmax(dim=-1)  # Gumbel-max trick: argmax(logits + g) ~ softmax(logits), at any temperature
    # binomial tolerance: 4 standard deviations of a frequency over n draws
    tol = 4 * torch.sqrt(p * (1 - p) / n)
    assert torch.all((freq - p).abs() <= tol), (freq, p)


# ---------------------------------------------------------------------------------------------- small helpers
def test_polyak_update_moves_a_quarter_of_the_way():
    target, source = nn.Linear(1, 1, bias=False), nn.Linear(1, 1, bias=False)
    with torch.no_grad():
        target.weight.fill_(1.0)
        source.weight.fill_(5.0)
    polyak_update(target, source, 0.25)
    # (1 - 0.25) * 1 + 0.25 * 5 = 2.0 (hand-computed from the formula, Lillicrap et al. 2016)
    assert target.weight.item() == pytest.approx(2.0)
    polyak_update(target, source, 0.25)
    # 0.75 * 2 + 0.25 * 5 = 2.75 (hand-computed)
    assert target.weight.item() == pytest.approx(2.75)
    assert source.weight.item() == 5.0  # the source is left alone
    assert target.weight.grad is None


def test_polyak_update_with_tau_one_copies():
    target, source = nn.Linear(3, 2), nn.Linear(3, 2)
    polyak_update(target, source, 1.0)
    # tau = 1: target <- source (hand-computed from the formula)
    for t, s in zip(target.parameters(), source.parameters()):
        torch.testing.assert_close(t, s)


@pytest.mark.parametrize(("step", "expected"), [
    (0, 1.0),     # start
    (50, 0.55),   # midway: 1 + 0.5 * (0.1 - 1) = 0.55 (hand-computed)
    (100, 0.1),   # end
    (250, 0.1),   # past the end: held at the end value
    (-5, 1.0),    # before the start: held at the start value
], ids=["start", "mid", "end", "past-end", "negative"])
def test_linear_schedule(step, expected):
    assert linear_schedule(step, 1.0, 0.1, 100) == pytest.approx(expected)  # hand-computed from the formula


def test_td_priorities_are_the_mean_absolute_td_error():
    td = torch.tensor([[1.0, -3.0], [0.5, 0.5], [-2.0, 0.0]])
    # mean_i |delta_i| per transition: (1 + 3)/2 = 2, 0.5, (2 + 0)/2 = 1 (hand-computed)
    assert td_priorities(td).tolist() == pytest.approx([2.0, 0.5, 1.0])


def test_one_hot():
    out = one_hot(torch.tensor([2, 0, 1]), 3)
    assert out.dtype == torch.float32
    # torch.nn.functional.one_hot, as float (hand-checked)
    assert out.tolist() == [[0.0, 0.0, 1.0], [1.0, 0.0, 0.0], [0.0, 1.0, 0.0]]
    batched = one_hot(torch.tensor([[1, 3], [0, 0]], dtype=torch.int32), 4)
    assert batched.shape == (2, 2, 4)
    assert batched.sum(dim=-1).tolist() == [[1.0, 1.0], [1.0, 1.0]]
    assert batched[0, 1].tolist() == [0.0, 0.0, 0.0, 1.0]


def test_huber_is_finite_for_large_errors():
    # common practice (no source): the linear branch keeps the loss finite where x^2/2 would overflow
    assert math.isfinite(huber(torch.tensor([1e30])).item())
