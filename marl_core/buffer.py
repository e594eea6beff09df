"""The rollout buffer of on-policy learners: T vector steps x B copies x N agents, filled once, read once.

The on-policy loop (:mod:`marl_core.onpolicy`) calls :meth:`RolloutBuffer.start` with the observation the
team acts on first, :meth:`RolloutBuffer.add` once per vector step and hands the full buffer to the
learner, whose update reads it through :meth:`RolloutBuffer.get` (any set of joint steps) and
:meth:`RolloutBuffer.next_values_from` (the value after each step). Then the buffer starts again from the
observation the last step left.

What is kept per vector step t: the observation the team acted on (and the state, when a critic reads it),
the actions, the rewards the agents learn from, ``terminated`` (per agent) and ``end`` (per copy). For a
step that ended a copy's episode, the episode's final observation is kept too (a time-limit end bootstraps
from its value); the observation after the last step is kept as the rollout's bootstrap.

Observations (and states) whose every cell is 0 or 1 are stored bit-packed, eight cells a byte
(``numpy.packbits``), and unpacked for each set of steps read; others are stored as they are. Joint steps
are indexed ``t * B + b`` (time-major).

Shape:
    start: obs (B, N, *obs_shape), state (B, *state_shape) or None
    add: actions (B, N) int, rewards (B, N) float, terminated (B, N) bool, end (B,) bool,
         final_obs (B, N, *obs_shape) (rows where ``end`` are used), next_obs as ``start``
    get(index): obs (K, N, *obs_shape), state (K, ...), actions (K, N) int64, rewards (K, N) float32,
         terminated (K, N) bool, end (K,) bool
"""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["RolloutBuffer", "zero_one"]


def zero_one(space: Any) -> bool:
    """A uint8 Box whose every cell lies in [0, 1]: its values can be stored bit-packed."""
    return (getattr(space, "dtype", None) == np.uint8 and bool(np.all(space.low == 0))
            and bool(np.all(space.high == 1)))


class _Store:
    """A preallocated (T, B, *shape) array of one kind of observation, bit-packed when asked."""

    def __init__(self, steps: int, num_envs: int, shape: tuple[int, ...], dtype: Any, pack: bool):
        self.shape, self.dtype, self.pack = tuple(shape), np.dtype(dtype), pack
        self.cells = int(np.prod(shape))
        inner = ((self.cells + 7) // 8,) if pack else self.shape
        self.data = np.zeros((steps, num_envs, *inner), np.uint8 if pack else self.dtype)

    def encode(self, x: np.ndarray, lead: int) -> np.ndarray:
        if not self.pack:
            return x
        return np.packbits(x.reshape(*x.shape[:lead], -1), axis=-1)

    def decode(self, x: np.ndarray) -> np.ndarray:
        if not self.pack:
            return x
        return np.unpackbits(x, axis=-1, count=self.cells).reshape(*x.shape[:-1], *self.shape)


class RolloutBuffer:
    """One rollout of ``steps`` vector steps from ``num_envs`` copies of a team of ``num_agents``.

    Args:
        obs_shape, obs_dtype: one agent's observation.
        state_shape, state_dtype: the env state, when the critic reads it (else None: no state is kept).
        pack: store 0/1 observations (and states) bit-packed; the caller says whether the spaces allow it.
    """

    def __init__(self, steps: int, num_envs: int, num_agents: int, obs_shape: tuple[int, ...], obs_dtype: Any,
                 state_shape: tuple[int, ...] | None = None, state_dtype: Any = None, pack: bool = False):
        T, B, N = steps, num_envs, num_agents
        self.steps, self.num_envs, self.num_agents = T, B, N
        self.obs = _Store(T, B, (N, *obs_shape), obs_dtype, pack)
        self.state = None if state_shape is None else _Store(T, B, state_shape, state_dtype, pack)
        self.actions = np.zeros((T, B, N), np.int64)
        self.rewards = np.zeros((T, B, N), np.float32)
        self.terminated = np.zeros((T, B, N), bool)
        self.end = np.zeros((T, B), bool)
        self.final: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray | None]] = {}  # t -> copies, obs, state
        self.last_obs = self.last_state = None
        self.t = 0

    # ------------------------------------------------------------------ filling
    def start(self, obs: np.ndarray, state: np.ndarray | None = None) -> None:
        """Begin a new rollout from the observation (and state) the team acts on next."""
        self.t = 0
        self.final = {}
        self.last_obs = self.obs.encode(np.asarray(obs), 1)
        self.last_state = None if self.state is None else self.state.encode(np.asarray(state), 1)

    def add(self, actions: np.ndarray, rewards: np.ndarray, terminated: np.ndarray, end: np.ndarray,
            final_obs: np.ndarray, next_obs: np.ndarray, final_state: np.ndarray | None = None,
            next_state: np.ndarray | None = None) -> None:
        """Record one vector step taken from the current observation; ``next_obs`` is what the team acts on
        next (the next episode's first observation where ``end``), ``final_obs`` the observation the step
        produced (the ended episode's final one where ``end``)."""
        if self.last_obs is None:
            raise RuntimeError("RolloutBuffer.add before start")
        if self.t >= self.steps:
            raise RuntimeError(f"RolloutBuffer is full ({self.steps} steps); read it, then start again")
        t = self.t
        self.obs.data[t] = self.last_obs
        if self.state is not None:
            self.state.data[t] = self.last_state
        self.actions[t] = actions
        self.rewards[t] = rewards
        self.terminated[t] = terminated
        self.end[t] = end
        if np.any(end):
            copies = np.nonzero(end)[0]
            fs = None if self.state is None else self.state.encode(np.asarray(final_state)[copies], 1)
            self.final[t] = (copies, self.obs.encode(np.asarray(final_obs)[copies], 1), fs)
        self.last_obs = self.obs.encode(np.asarray(next_obs), 1)
        if self.state is not None:
            self.last_state = self.state.encode(np.asarray(next_state), 1)
        self.t += 1

    def __len__(self) -> int:
        """Joint steps recorded (vector steps x copies)."""
        return self.t * self.num_envs

    @property
    def full(self) -> bool:
        return self.t >= self.steps

    @property
    def nbytes(self) -> int:
        arrays = [self.obs.data, self.actions, self.rewards, self.terminated, self.end]
        if self.state is not None:
            arrays.append(self.state.data)
        return int(sum(a.nbytes for a in arrays))

    # ------------------------------------------------------------------ reading
    def get(self, index: np.ndarray) -> dict[str, np.ndarray | None]:
        """The joint steps ``index`` (flat ``t * B + b`` over the recorded steps)."""
        index = np.asarray(index)
        t, b = np.divmod(index, self.num_envs)
        return {"obs": self.obs.decode(self.obs.data[t, b]),
                "state": None if self.state is None else self.state.decode(self.state.data[t, b]),
                "actions": self.actions[t, b], "rewards": self.rewards[t, b],
                "terminated": self.terminated[t, b], "end": self.end[t, b]}

    def columns(self) -> dict[str, np.ndarray]:
        """Actions, rewards, terminated (T, B, N) and end (T, B) of the recorded steps."""
        T = self.t
        return {"actions": self.actions[:T], "rewards": self.rewards[:T], "terminated": self.terminated[:T],
                "end": self.end[:T]}

    def bootstrap(self) -> tuple[np.ndarray, np.ndarray | None]:
        """The observation (and state) after the last recorded step: (B, N, ...) and (B, ...) or None."""
        return (self.obs.decode(self.last_obs),
                None if self.state is None else self.state.decode(self.last_state))

    def finals(self) -> list[tuple[int, np.ndarray, np.ndarray, np.ndarray | None]]:
        """Each step that ended episodes: (t, copies, final obs (k, N, ...), final state (k, ...) or None)."""
        return [(t, c, self.obs.decode(o), None if s is None else self.state.decode(s))
                for t, (c, o, s) in sorted(self.final.items())]

    @staticmethod
    def next_values_from(values: np.ndarray, bootstrap: np.ndarray,
                         finals: dict[int, tuple[np.ndarray, np.ndarray]]) -> np.ndarray:
        """The value of the observation after each step: ``values[t + 1]`` within the rollout,
        ``bootstrap`` after the last step, and the final observation's value where a copy's episode ended
        (``finals``: t -> (copies, their values)).

        Shape: values (T, B, N), bootstrap (B, N) -> (T, B, N)
        """
        nxt = np.concatenate([values[1:], bootstrap[None]], axis=0)
        for t, (copies, v) in finals.items():
            nxt[t, copies] = v
        return nxt
