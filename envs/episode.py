"""Play one episode of a PettingZoo ``ParallelEnv`` under a policy and keep what the metrics need.

``play_episode(env, policy, seed)`` returns an :class:`Episode`: per-step rewards ``(T, N)``, per-step
frozen flags ``(T, N)`` (from ``infos["frozen"]`` where the game reports it) and, if asked, the rendered
frames for a GIF (``envs.render.write_gif``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from envs.metrics import social_outcomes

__all__ = ["Episode", "play_episode"]


@dataclass
class Episode:
    """What one episode produced. ``rewards``, ``frozen``: (T, N), agents in ``agents`` order."""

    agents: list[str]
    rewards: np.ndarray
    frozen: np.ndarray
    frames: list[np.ndarray] = field(default_factory=list)

    @property
    def returns(self) -> dict[str, float]:
        return {a: float(r) for a, r in zip(self.agents, self.rewards.sum(axis=0))}

    def outcomes(self) -> dict[str, float]:
        """The four social outcome metrics of the episode (``envs.metrics``)."""
        return social_outcomes(self.rewards, self.frozen)


def play_episode(env: Any, policy: Callable[[dict], dict], seed: int | None = None,
                 render: bool = False) -> Episode:
    """Reset ``env`` with ``seed`` and step it with ``policy(obs) -> actions`` until every agent is done.

    With ``render=True`` the env must have been made with ``render_mode="rgb_array"``; one frame is kept
    after the reset and after every step.
    """
    agents = list(env.possible_agents)
    obs, _ = env.reset(seed=seed)
    frames = [env.render()] if render else []
    rewards, frozen = [], []
    while env.agents:
        obs, rew, _, _, infos = env.step(policy(obs))
        rewards.append([rew.get(a, 0.0) for a in agents])
        frozen.append([bool(infos.get(a, {}).get("frozen", 0)) for a in agents])
        if render:
            frames.append(env.render())
    return Episode(agents, np.asarray(rewards, np.float64).reshape(-1, len(agents)),
                   np.asarray(frozen, bool).reshape(-1, len(agents)), frames)
