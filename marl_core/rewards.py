"""Reward transforms: what each agent learns from, computed from the env's rewards.

A transform sits between the env and the learner: the training loop passes every step's env rewards
``r`` of shape ``(B, N)`` (B copies, N agents) through the config's ``reward`` section and stores the
result in the replay. Evaluation, the social metrics, the baselines and ``summary.json`` always use the
env's own rewards, so a transform changes what agents want, never how their outcomes are scored.

Each transform is one function ``f(r, state, params) -> (r', state)`` over ``(B, N)`` float64 arrays plus a
state (or ``None``), registered in :data:`TRANSFORMS` with the function that makes its first state. The
state belongs to the episode: after a step that ends copy b's episode, copy b's state is reset. Transforms
given together apply in the order of :data:`TRANSFORMS`, each to the output of the one before.

* ``prosocial`` (``reward.prosocial``, a weight w in [0, 1]), after Peysakhovich & Lerer 2018
  (docs/sources.md, "Prosocial reward"): ``r_i' = (1 - w) r_i + w mean_j r_j``. w = 0 is selfish, w = 1 a
  team reward (every agent learns from the team's mean).
* ``inequity_aversion`` (``reward.inequity_aversion``, a mapping with ``alpha``, ``beta``, ``smoothing``),
  after Hughes et al. 2018 (docs/sources.md, "Inequity aversion"). Each agent keeps a temporally smoothed
  reward ``e_i(t) = smoothing * e_i(t-1) + r_i(t)`` (the paper's smoothing factor is the product of the
  discount and a trace parameter, gamma * lambda), and learns from::

      r_i' = r_i - alpha / (N - 1) * sum_j max(e_j - e_i, 0) - beta / (N - 1) * sum_j max(e_i - e_j, 0)

  alpha weighs disadvantageous inequity (others ahead of i), beta advantageous inequity (i ahead of
  others). It needs N >= 2.

To add a transform: write its function and its initial state, add both to :data:`TRANSFORMS`, add its
key to ``marl_core.config.RewardConfig`` (``None`` or a neutral default means off), and test it against a
hand-computed example.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from marl_core.errors import ConfigError

__all__ = ["TRANSFORMS", "RewardShaper", "prosocial", "inequity_aversion"]

Transform = Callable[[np.ndarray, Any, Any], tuple[np.ndarray, Any]]


def prosocial(r: np.ndarray, state: None, w: float) -> tuple[np.ndarray, None]:
    """``(1 - w) * r_i + w * mean_j r_j`` for every agent i; no state."""
    return (1.0 - w) * r + w * r.mean(axis=1, keepdims=True), None


def inequity_aversion(r: np.ndarray, e: np.ndarray, p: Any) -> tuple[np.ndarray, np.ndarray]:
    """Hughes et al.'s inequity-averse reward; ``e`` (B, N) is the smoothed reward up to the last step."""
    n = r.shape[1]
    e = p.smoothing * e + r
    gap = e[:, None, :] - e[:, :, None]  # gap[b, i, j] = e_j - e_i
    behind = np.maximum(gap, 0.0).sum(axis=2)  # sum_j max(e_j - e_i, 0)
    ahead = np.maximum(-gap, 0.0).sum(axis=2)  # sum_j max(e_i - e_j, 0)
    return r - p.alpha / (n - 1) * behind - p.beta / (n - 1) * ahead, e


# name -> (transform, first state from (B, N)), in the order they apply
TRANSFORMS: dict[str, tuple[Transform, Callable[[int, int], Any]]] = {
    "prosocial": (prosocial, lambda b, n: None),
    "inequity_aversion": (inequity_aversion, lambda b, n: np.zeros((b, n))),
}


def _active(name: str, value: Any) -> bool:
    return value is not None and not (name == "prosocial" and value == 0.0)


class RewardShaper:
    """The config's reward transforms over B copies of an N-agent game.

    ``shaper(rewards, end)`` returns the learned rewards (float32, like the env's) for one step and resets
    the state of the copies whose episode ``end`` says ended with it. With no transform active it returns
    ``rewards`` itself.
    """

    def __init__(self, reward_cfg: Any, num_envs: int, num_agents: int):
        self.steps: list[tuple[str, Transform, Any]] = []
        self.state: dict[str, Any] = {}
        self._first: dict[str, Any] = {}  # each transform's first state, copied in where an episode ends
        for name, (fn, init) in TRANSFORMS.items():
            value = getattr(reward_cfg, name)
            if not _active(name, value):
                continue
            if name == "inequity_aversion" and num_agents < 2:
                raise ConfigError(f"reward.inequity_aversion is not allowed with {num_agents} agent: "
                                  f"it compares agents, so the game needs at least 2")
            self.steps.append((name, fn, value))
            self._first[name] = init(num_envs, num_agents)
            self.state[name] = None if self._first[name] is None else self._first[name].copy()

    @property
    def active(self) -> bool:
        return bool(self.steps)

    def __call__(self, rewards: np.ndarray, end: np.ndarray) -> np.ndarray:
        if not self.steps:
            return rewards
        r = np.asarray(rewards, np.float64)
        for name, fn, value in self.steps:
            r, self.state[name] = fn(r, self.state[name], value)
        if end.any():
            for name, s in self.state.items():
                if s is not None:
                    s[end] = self._first[name][end]
        return r.astype(np.float32)
