"""TeamSpec: what a learner needs to know about a team — agent ids and spaces — and nothing else.

Every env the trainer accepts (our games, any PettingZoo ParallelEnv, a single-agent gymnasium env) is
described by one :class:`TeamSpec`; every learner is built from a TeamSpec and a validated config.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from gymnasium import spaces

from marl_core.errors import EnvAdapterError

__all__ = ["TeamSpec"]


@dataclass(frozen=True)
class TeamSpec:
    """Agents and spaces of a team.

    Attributes:
        agents: agent ids, in the order of the agent axis of every array (``(B, N, ...)``).
        obs_space: one agent's observation space (a ``Box``; every agent has the same shape and dtype).
        num_actions: size of every agent's ``Discrete`` action space.
        state_space: the ``Box`` of the env's global state, or ``None`` when the env has none.
    """

    agents: tuple[str, ...]
    obs_space: spaces.Box
    num_actions: int
    state_space: spaces.Box | None = None

    def __post_init__(self) -> None:
        if not self.agents:
            raise EnvAdapterError("team: the env has no agents")
        if not isinstance(self.obs_space, spaces.Box):
            raise EnvAdapterError(f"team: observation space {self.obs_space} is not supported; expected a Box")
        if self.num_actions < 1:
            raise EnvAdapterError(f"team: num_actions = {self.num_actions}; expected a Discrete space")

    @property
    def num_agents(self) -> int:
        return len(self.agents)

    @property
    def obs_shape(self) -> tuple[int, ...]:
        return tuple(self.obs_space.shape)

    @property
    def obs_dtype(self) -> np.dtype:
        return np.dtype(self.obs_space.dtype)

    @property
    def is_image(self) -> bool:
        """True for (C, H, W) observations, which get a conv encoder; False for flat vectors."""
        return len(self.obs_shape) == 3

    def describe(self) -> dict:
        """A JSON-ready description, saved beside each policy so that a later run can check it fits."""
        def box(s: spaces.Box | None):
            return None if s is None else {"shape": list(s.shape), "dtype": str(s.dtype)}

        return {"agents": list(self.agents), "obs_space": box(self.obs_space), "num_actions": self.num_actions,
                "state_space": box(self.state_space)}
