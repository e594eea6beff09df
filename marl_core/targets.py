"""The arithmetic of the updates as pure functions of tensors, testable with hand-made numbers.

Shapes use K for the batch and N for agents; every function works on any leading shape unless noted.
Each formula's source has an entry in docs/sources.md (e.g. docs/sources.md, "DQN").
"""

from __future__ import annotations

import torch
from torch import nn

__all__ = ["dqn_target", "dueling_combine", "huber", "linear_schedule", "gumbel_softmax_st", "polyak_update",
           "one_hot", "td_priorities", "set_lr_scale"]


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
