"""The two faces of every game: a batched engine and the PettingZoo facade over it.

A game is written once, as a :class:`BatchedGame`: B independent copies of the world advanced together by
whole-array numpy operations. :class:`GameParallelEnv` is PettingZoo's ``ParallelEnv`` around the same engine
with B = 1, so the single and the batched path can never drift apart.

Batched contract (every game):

* ``reset(seed=None) -> (obs, infos)`` resets all copies. Copy ``b`` is seeded with ``seed + b``, so copy ``b``
  of a batch equals a single env reset with ``seed + b`` and fed the same actions.
* ``step(actions) -> (obs, rewards, terminated, truncated, infos)`` with ``actions: (B, N)`` integers,
  ``obs: (B, N, *obs_shape)``, ``rewards: (B, N) float32``, ``terminated``/``truncated: (B, N) bool`` and
  ``infos`` a dict of ``(B, N)`` integer arrays (per-agent event counts of that step).
* Copies run in lockstep: every game ends after ``max_cycles`` steps, so all copies end together and the
  caller resets the batch. The game parameter ``horizon`` (:data:`HORIZONS`) says how that end is reported:
  ``"terminal"``: every agent is *terminated* (the last step is part of the game; a learner must not bootstrap
  past it); ``"time_limit"``: every agent is *truncated* (the episode is cut by a time limit; a learner
  bootstraps from the final observation). No game ends before ``max_cycles``; before it both flags are False.
* ``state() -> (B, *state_shape)``: the whole world, for centralised critics.
"""

from __future__ import annotations

from typing import Any, ClassVar

import numpy as np
from gymnasium import spaces
from pettingzoo.utils.env import ParallelEnv

from envs.errors import ActionError, ParamError
from envs.params import Param

__all__ = ["BatchedGame", "GameParallelEnv", "check_joint_actions", "HORIZONS", "TERMINAL", "TIME_LIMIT",
           "horizon_param", "end_flags"]

TERMINAL = "terminal"
TIME_LIMIT = "time_limit"
HORIZONS: tuple[str, ...] = (TERMINAL, TIME_LIMIT)


def horizon_param(default: str) -> Param:
    """The ``horizon`` parameter every game declares, with the game's own default."""
    return Param("horizon", str, default, "how the end at max_cycles is reported: 'terminal' (every agent "
                 "terminated, no bootstrap past it) or 'time_limit' (every agent truncated, learners bootstrap)",
                 choices=HORIZONS)


def end_flags(horizon: str, ended: bool, shape: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
    """``(terminated, truncated)``, both ``shape`` bool: all False while the episode goes on; when it ``ended``,
    all True in the flag the ``horizon`` names (``"terminal"``: terminated, ``"time_limit"``: truncated)."""
    done = np.full(shape, bool(ended))
    never = np.zeros(shape, bool)
    return (done, never) if horizon == TERMINAL else (never, done)


class BatchedGame:
    """Base class of the batched engines. Subclasses set the attributes below in ``__init__``.

    Attributes:
        name: versioned game id, e.g. ``"harvest_v0"``.
        num_envs: number of copies B.
        possible_agents: agent ids, ``["agent_0", ...]``.
        observation_space, action_space, state_space: spaces of one agent / one copy's state.
        action_names: meaning of each discrete action.
        info_keys: keys of the per-agent event counts returned in ``infos``.
        params: the resolved game parameters.
    """

    name: ClassVar[str] = ""
    info_keys: ClassVar[tuple[str, ...]] = ()

    num_envs: int
    possible_agents: list[str]
    observation_space: spaces.Space
    action_space: spaces.Discrete
    state_space: spaces.Space
    action_names: tuple[str, ...]
    params: dict[str, Any]
    max_cycles: int

    @property
    def num_agents(self) -> int:
        return len(self.possible_agents)

    def check_actions(self, actions: Any) -> np.ndarray:
        """Return ``actions`` as a ``(B, N)`` int64 array or raise :class:`ActionError`."""
        return check_joint_actions(actions, self.name, self.num_envs, self.possible_agents, self.action_space.n,
                                   self.action_names)

    @staticmethod
    def check_num_envs(name: str, num_envs: Any) -> int:
        """``num_envs`` as a positive int, or :class:`ParamError`."""
        if isinstance(num_envs, bool) or not isinstance(num_envs, (int, np.integer)) or num_envs < 1:
            raise ParamError(f"{name}: num_envs = {num_envs!r} is not allowed; expected an integer >= 1")
        return int(num_envs)

    @staticmethod
    def copy_rngs(seed: int | None, num_envs: int) -> list[np.random.Generator]:
        """One generator per copy; copy ``b`` gets ``seed + b`` (or fresh entropy when ``seed`` is None)."""
        from gymnasium.utils import seeding

        if seed is not None and (isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0):
            raise ParamError(f"reset: seed = {seed!r} is not allowed; expected a non-negative integer or None")
        return [seeding.np_random(None if seed is None else int(seed) + b)[0] for b in range(num_envs)]

    # The methods below are implemented by each game.
    def reset(self, seed: int | None = None) -> tuple[np.ndarray, dict[str, np.ndarray]]:
        raise NotImplementedError

    def step(self, actions: Any):
        raise NotImplementedError

    def state(self) -> np.ndarray:
        raise NotImplementedError

    def render_rgb(self, index: int = 0) -> np.ndarray:
        raise NotImplementedError

    def render_ansi(self, index: int = 0) -> str:
        raise NotImplementedError


def check_joint_actions(actions: Any, name: str, num_envs: int, agents: list[str] | tuple[str, ...],
                        num_actions: int, action_names: tuple[str, ...] | None = None) -> np.ndarray:
    """``actions`` as a ``(num_envs, len(agents))`` int64 array in ``[0, num_actions)``, or
    :class:`ActionError` naming the first bad entry (its agent and copy) and what is allowed."""
    a = np.asarray(actions)
    shape = (num_envs, len(agents))
    if a.shape != shape:
        raise ActionError(f"{name}: actions have shape {a.shape}; expected {shape} (copies, agents)")
    if not np.issubdtype(a.dtype, np.integer):
        if not (np.issubdtype(a.dtype, np.floating) and np.all(a == np.round(a))):
            raise ActionError(f"{name}: actions must be integers, got dtype {a.dtype}")
    a = a.astype(np.int64, copy=False)
    bad = (a < 0) | (a >= num_actions)
    if bad.any():
        b, i = np.argwhere(bad)[0]
        names = f" ({', '.join(action_names)})" if action_names else ""
        raise ActionError(f"{name}: action {a[b, i]} for {agents[i]} (copy {b}) is not allowed; expected an "
                          f"integer in [0, {num_actions - 1}]{names}")
    return a


class GameParallelEnv(ParallelEnv):
    """PettingZoo ``ParallelEnv`` over a :class:`BatchedGame` with one copy.

    Each game module subclasses this with its own ``metadata`` and engine class, so the metadata lives on
    the class as PettingZoo and gymnasium expect.
    """

    metadata: ClassVar[dict[str, Any]] = {"name": "", "render_modes": ["rgb_array", "ansi"], "render_fps": 8}
    engine_class: ClassVar[type[BatchedGame]]

    def __init__(self, render_mode: str | None = None, **params: Any):
        if render_mode is not None and render_mode not in self.metadata["render_modes"]:
            raise ParamError(f"{self.metadata['name']}: parameter 'render_mode' = {render_mode!r} is not "
                             f"allowed; expected None or one of {', '.join(self.metadata['render_modes'])}")
        self.render_mode = render_mode
        self.game = self.engine_class(num_envs=1, **params)
        self.possible_agents = list(self.game.possible_agents)
        self.agents: list[str] = []
        self.max_cycles = self.game.max_cycles
        self.observation_spaces = dict.fromkeys(self.possible_agents, self.game.observation_space)
        self.action_spaces = dict.fromkeys(self.possible_agents, self.game.action_space)
        self.state_space = self.game.state_space
        self._index = {a: i for i, a in enumerate(self.possible_agents)}

    def observation_space(self, agent: str) -> spaces.Space:
        return self.observation_spaces[agent]

    def action_space(self, agent: str) -> spaces.Space:
        return self.action_spaces[agent]

    @property
    def params(self) -> dict[str, Any]:
        return self.game.params

    def _split(self, obs: np.ndarray, infos: dict[str, np.ndarray]):
        obs_d = {a: obs[0, i] for i, a in enumerate(self.possible_agents)}
        info_d = {a: {k: int(v[0, i]) for k, v in infos.items()} for i, a in enumerate(self.possible_agents)}
        return obs_d, info_d

    def reset(self, seed: int | None = None, options: dict | None = None):
        obs, infos = self.game.reset(seed=seed)
        self.agents = list(self.possible_agents)
        return self._split(obs, infos)

    def step(self, actions: dict[str, Any]):
        if not self.agents:
            raise ActionError(f"{self.metadata['name']}: step() called after the episode ended; call reset()")
        unknown = set(actions) - set(self.possible_agents)
        if unknown:
            raise ActionError(f"{self.metadata['name']}: actions given for unknown agent(s) "
                              f"{sorted(unknown)}; agents are {self.possible_agents}")
        missing = [a for a in self.agents if a not in actions]
        if missing:
            raise ActionError(f"{self.metadata['name']}: no action given for {missing[0]}; "
                              f"every live agent needs one")
        joint = np.array([[_as_int(actions[a], a, self.metadata["name"]) for a in self.possible_agents]])
        obs, rew, term, trunc, infos = self.game.step(joint)
        obs_d, info_d = self._split(obs, infos)
        rew_d = {a: float(rew[0, i]) for i, a in enumerate(self.possible_agents)}
        term_d = {a: bool(term[0, i]) for i, a in enumerate(self.possible_agents)}
        trunc_d = {a: bool(trunc[0, i]) for i, a in enumerate(self.possible_agents)}
        self.agents = [a for a in self.agents if not (term_d[a] or trunc_d[a])]
        return obs_d, rew_d, term_d, trunc_d, info_d

    def state(self) -> np.ndarray:
        return self.game.state()[0]

    def render(self):
        if self.render_mode == "rgb_array":
            return self.game.render_rgb(0)
        if self.render_mode == "ansi":
            return self.game.render_ansi(0)
        return None

    def close(self):
        pass


def _as_int(value: Any, agent: str, game: str) -> int:
    if isinstance(value, (bool, np.bool_)) or value is None:
        raise ActionError(f"{game}: action {value!r} for {agent} is not allowed; expected an integer")
    arr = np.asarray(value)
    if arr.ndim != 0 or not (np.issubdtype(arr.dtype, np.integer) or
                            (np.issubdtype(arr.dtype, np.floating) and float(arr).is_integer())):
        raise ActionError(f"{game}: action {value!r} for {agent} is not allowed; expected an integer")
    return int(arr)
