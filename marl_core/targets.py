"""The arithmetic of the updates as pure functions of tensors, testable with hand-made numbers.

Shapes use K for the batch and N for agents; every function works on any leading shape unless noted.
Each formula's source has an entry in docs/sources.md (e.g. docs/sources.md, "DQN").
"""

from __future__ import annotations

import torch
from torch import nn

__all__ = ["dqn_target", "dueling_combine", "huber", "linear_schedule", "gumbel_softmax_st", "polyak_update",
           "one_hot", "td_priorities", "set_lr_scale", "gae", "clipped_surrogate", "counterfactual_baseline",
           "explained_variance", "normalise", "clip_per_network"]


def dqn_target(returns: torch.Tensor, discounts: torch.Tensor, next_q_target: torch.Tensor,
               next_q_online: torch.Tensor | None = None) -> torch.Tensor:
    """Bootstrapped DQN target ``y = G + d * Q_target(s', a*)``.

    With ``next_q_online`` (Double DQN, van Hasselt et al. 2016) ``a* = argmax_a Q_online(s', a)``;
    without it (DQN, Mnih et al. 2015) ``a* = argmax_a Q_target(s', a)``. ``returns`` is the (n-step)
    discounted reward sum G and ``discounts`` is ``gamma**m`` times (1 - terminated).

    Shape: returns, discounts: (...,); next_q_*: (..., A) -> (...,)
    """
    if next_q_online is None:
        best = next_q_target.max(dim=-1).values
    else:
        a = next_q_online.argmax(dim=-1, keepdim=True)
        best = next_q_target.gather(-1, a).squeeze(-1)
    return returns + discounts * best


def dueling_combine(value: torch.Tensor, advantage: torch.Tensor) -> torch.Tensor:
    """Dueling aggregation (Wang et al. 2016, eq. 9): ``Q = V + A - mean_a A``. Shape: (..., 1), (..., A)."""
    return value + advantage - advantage.mean(dim=-1, keepdim=True)


def huber(x: torch.Tensor, delta: float = 1.0) -> torch.Tensor:
    """Elementwise Huber loss: ``x²/2`` for ``|x| <= delta``, else ``delta (|x| - delta/2)``."""
    a = x.abs()
    return torch.where(a <= delta, 0.5 * x * x, delta * (a - 0.5 * delta))


def linear_schedule(step: int, start: float, end: float, steps: int) -> float:
    """``start`` moving linearly to ``end`` over ``steps``, then ``end``."""
    frac = min(max(step, 0) / max(steps, 1), 1.0)
    return start + frac * (end - start)


def set_lr_scale(optimizer: torch.optim.Optimizer, base_lr: float, scale: float) -> None:
    """Set every parameter group of ``optimizer`` to ``base_lr * scale`` (a learning-rate schedule step)."""
    for group in optimizer.param_groups:
        group["lr"] = base_lr * scale


def gumbel_softmax_st(logits: torch.Tensor, temperature: float = 1.0,
                      generator: torch.Generator | None = None) -> torch.Tensor:
    """Straight-through Gumbel-softmax (Jang et al. 2017; Maddison et al. 2017).

    Forward: the one-hot of ``argmax(logits + g)``, g ~ Gumbel(0, 1). Backward: the gradient of
    ``softmax((logits + g) / temperature)``. With the global generator it draws the noise exactly as
    ``torch.nn.functional.gumbel_softmax(..., hard=True)`` does, so the two agree under the same seed.
    """
    noise = -torch.empty_like(logits).exponential_(generator=generator).log()
    soft = ((logits + noise) / temperature).softmax(dim=-1)
    hard = one_hot(soft.argmax(dim=-1), logits.shape[-1]).to(soft.dtype)
    return hard - soft.detach() + soft


def one_hot(index: torch.Tensor, n: int) -> torch.Tensor:
    """Float one-hot of integer ``index``: (...,) -> (..., n)."""
    return torch.nn.functional.one_hot(index.long(), n).float()


@torch.no_grad()
def polyak_update(target: nn.Module, source: nn.Module, tau: float) -> None:
    """``target <- (1 - tau) target + tau source`` for every parameter (Lillicrap et al. 2016)."""
    for t, s in zip(target.parameters(), source.parameters(), strict=True):
        t.lerp_(s, tau)


def td_priorities(td: torch.Tensor) -> torch.Tensor:
    """One priority magnitude per joint transition from per-agent TD errors ``(K, N)``: the mean |δ|."""
    return td.abs().mean(dim=-1)


def gae(rewards: torch.Tensor, values: torch.Tensor, next_values: torch.Tensor, terminated: torch.Tensor,
        ended: torch.Tensor, gamma: float, lam: float) -> tuple[torch.Tensor, torch.Tensor]:
    """Generalised advantage estimation (Schulman et al. 2016) over a rollout of T steps.

    ``next_values[t]`` is V of the observation after step t: for a step that ended an episode, the
    episode's final observation (not the next episode's first). A termination does not bootstrap
    (``terminated``); a time-limit end does, from that final value; either end stops the advantage
    carrying over from the next step (``ended``)::

        delta_t = r_t + gamma * V(s_t+1) * (1 - term_t) - V(s_t)
        A_t     = delta_t + gamma * lam * (1 - end_t) * A_t+1,   A_T = 0

    Returns ``(advantages, returns)`` with ``returns = advantages + values`` (the lambda-return, the
    critic's target). Source: docs/sources.md, "GAE".

    Shape: every input (T, ...) (``terminated``/``ended`` bool or 0/1, broadcastable to ``rewards``)
    -> two (T, ...) tensors
    """
    term = terminated.to(rewards.dtype)
    carry = gamma * lam * (1.0 - ended.to(rewards.dtype))
    deltas = rewards + gamma * next_values * (1.0 - term) - values
    adv = torch.empty_like(deltas)
    running = torch.zeros_like(deltas[0])
    for t in range(deltas.shape[0] - 1, -1, -1):
        running = deltas[t] + carry[t] * running
        adv[t] = running
    return adv, adv + values


def clipped_surrogate(logp: torch.Tensor, old_logp: torch.Tensor, advantages: torch.Tensor,
                      clip: float) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor]:
    """PPO's clipped surrogate objective as a loss (Schulman et al. 2017, eq. 7, negated).

    ``rho = exp(logp - old_logp)``; loss ``= -mean(min(rho * A, clip(rho, 1 - clip, 1 + clip) * A))``.
    Also returns the approximate KL divergence of the new policy from the old, ``mean((rho - 1) - log
    rho)`` (an estimator that is never negative; from memory, Schulman 2020, "Approximating KL divergence"),
    and the clip fraction, the share of samples with ``|rho - 1| > clip`` (both without gradient).
    Source: docs/sources.md, "PPO".

    Shape: every input (...,) -> three scalars
    """
    log_ratio = logp - old_logp
    ratio = log_ratio.exp()
    loss = -torch.min(ratio * advantages, ratio.clamp(1.0 - clip, 1.0 + clip) * advantages).mean()
    with torch.no_grad():
        kl = ((ratio - 1.0) - log_ratio).mean()
        clipped = ((ratio - 1.0).abs() > clip).float().mean()
    return loss, kl, clipped


def counterfactual_baseline(q_own: torch.Tensor, probs: torch.Tensor) -> torch.Tensor:
    """The counterfactual baseline of agent i (Foerster et al. 2018, COMA, eq. 4):
    ``b_i = sum_a pi_i(a | o_i) * Q_i(s, (u_-i, a))``, the other agents' actions held at those taken.

    ``q_own[..., a]`` is ``Q_i(s, (u_-i, a))`` for each own action a (one critic pass gives all of them);
    the advantage of the action taken is ``q_own[..., u_i] - b_i``. Source: docs/sources.md, "COMA".

    Shape: q_own, probs: (..., A) -> (...,)
    """
    return (probs * q_own).sum(dim=-1)


def explained_variance(predicted: torch.Tensor, target: torch.Tensor) -> float:
    """``1 - Var(target - predicted) / Var(target)``: 1 for a perfect critic, 0 for a constant one, negative
    for one worse than a constant (NaN when the targets do not vary). Common practice (no source)."""
    var = target.var(unbiased=False)
    if float(var) == 0.0:
        return float("nan")
    return float(1.0 - (target - predicted).var(unbiased=False) / var)


def normalise(x: torch.Tensor, eps: float = 1e-8) -> torch.Tensor:
    """``(x - mean) / (std + eps)`` over every element (advantage normalisation, common practice, no
    source)."""
    return (x - x.mean()) / (x.std(unbiased=False) + eps)


def clip_per_network(networks, max_norm: float | None) -> None:
    """Clip the gradient of each network in ``networks`` to norm ``max_norm`` on its own (None: no
    clipping), so that independent learners stay independent. Common practice (no source)."""
    if max_norm:
        for net in networks:
            torch.nn.utils.clip_grad_norm_(net.parameters(), max_norm)
