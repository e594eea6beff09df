"""TeamEnv: the one batched interface the trainer steps, whatever env it was given.

The trainer accepts three kinds of env, named by a string (``env.name`` in a run config):

==============================  ===========================================================================
name                            what is built
==============================  ===========================================================================
``harvest_v0`` (any of          our batched engine, ``envs.make_vector(name, num_envs, **params)``: the fast
``envs.GAMES``)                 path, one numpy step for all copies (:class:`GameTeamEnv`)
``module:callable``             ``num_envs`` PettingZoo ``ParallelEnv`` instances from a factory, e.g.
                                ``mpe2.simple_spread_v3:parallel_env`` (:class:`ParallelTeamEnv`)
``gymnasium:ID``                ``num_envs`` single-agent gymnasium envs, ``gymnasium.make(ID, **params)``, as
                                a team of one agent ``agent_0`` (:class:`GymTeamEnv`)
==============================  ===========================================================================

Every :class:`TeamEnv` holds ``num_envs`` copies (B) of a team of N agents and steps them with one
``(B, N)`` array of discrete actions. A copy whose episode ends is reset inside ``step``: the returned
:class:`Step` carries the final observation of the ended episode in ``obs`` and the first observation of the
next one in ``reset_obs``, and the next ``step`` continues from ``reset_obs``. An env made with
``render=True`` also renders copy 0 after a step that ends its episode, before the reset, into
``Step.final_frame``: ``render(0)`` after that step already shows the next episode's first state.

Seeding: the first reset uses the seed given to :func:`make_team_env` (or to :meth:`TeamEnv.reset`); copy
``b`` gets ``seed + b``. Every later (automatic) reset is unseeded, so each copy's own generator continues
and a run is reproducible from its one seed.

Shape:
    actions: (B, N) int in [0, num_actions)
    obs, reset_obs: (B, N, *obs_shape) in the dtype of ``spec.obs_space``
    state, reset_state: (B, *state_shape), or None when the env has no global state
    rewards: (B, N) float32;  terminated, frozen: (B, N) bool;  end: (B,) bool
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from gymnasium import spaces

import envs
from envs.core import check_joint_actions
from envs.params import nearest
from marl_core.errors import EnvAdapterError
from marl_core.hints import command
from marl_core.spec import TeamSpec

__all__ = ["Step", "TeamEnv", "GameTeamEnv", "ParallelTeamEnv", "GymTeamEnv", "make_team_env",
           "random_actions"]

STAY_MESSAGE = "the trainer needs every agent to stay until the episode ends"
GYM_PREFIX = "gymnasium:"
GYM_AGENT = "agent_0"


@dataclass
class Step:
    """What one :meth:`TeamEnv.step` returns for all B copies.

    Attributes:
        obs: (B, N, ...) observation after the step; for copies with ``end`` the final observation of the
            episode that ended.
        state: (B, ...) global state after the step (final state where ``end``), or None.
        rewards: (B, N) float32.
        terminated: (B, N) bool, the env says the agent's episode is over (no bootstrapping past it).
        end: (B,) bool, the copy's episode ended with this step (terminated or truncated).
        frozen: (B, N) bool, the agent was tagged out during this step (our games), False elsewhere.
        infos: per-agent (B, N) event counts where the env reports them (our games), else ``{}``.
        reset_obs: (B, N, ...) first observation of the next episode for copies with ``end``; rows of copies
            that did not end hold ``obs``. None when no copy ended.
        reset_state: likewise for ``state`` (None also when the env has no state).
        final_frame: (H, W, 3) uint8 frame of copy 0 after this step, rendered before the auto-reset, when
            copy 0's episode ended and the env was made with ``render=True``; else None.
    """

    obs: np.ndarray
    state: np.ndarray | None
    rewards: np.ndarray
    terminated: np.ndarray
    end: np.ndarray
    frozen: np.ndarray
    infos: dict[str, np.ndarray] = field(default_factory=dict)
    reset_obs: np.ndarray | None = None
    reset_state: np.ndarray | None = None
    final_frame: np.ndarray | None = None

    @property
    def truncated(self) -> np.ndarray:
        """(B, N) bool: the episode ended by a time limit for this agent (``end`` and not terminated)."""
        return self.end[:, None] & ~self.terminated

    @property
    def next_obs(self) -> np.ndarray:
        """(B, N, ...) the observation the team acts on next: ``reset_obs`` if any copy ended, else ``obs``."""
        return self.obs if self.reset_obs is None else self.reset_obs

    @property
    def next_state(self) -> np.ndarray | None:
        """(B, ...) the state the next step starts from (see :attr:`next_obs`), or None."""
        return self.state if self.reset_state is None else self.reset_state


class TeamEnv:
    """Base class: B copies of an env with N agents, stepped together, each copy reset when it ends.

    Attributes:
        name: the env name it was made from (``env.name``), used in messages.
        spec: the team: agent ids, one agent's observation ``Box``, number of actions, state ``Box`` or None.
        num_envs: number of copies B.

    Subclasses implement ``_reset(seed)`` and ``_step(actions)``.
    """

    name: str
    spec: TeamSpec
    num_envs: int

    def __init__(self, name: str, spec: TeamSpec, num_envs: int, seed: int):
        self.name = name
        self.spec = spec
        self.num_envs = num_envs
        self.seed = seed
        self._started = False

    # ------------------------------------------------------------------ public API
    def reset(self, seed: int | None = None) -> tuple[np.ndarray, np.ndarray | None]:
        """Reset every copy; return ``obs (B, N, *obs_shape)`` and ``state (B, *state_shape)`` or None.

        Copy ``b`` is seeded with ``seed + b``. With ``seed=None`` the first reset uses the seed the env was
        made with, and later ones continue each copy's generator.
        """
        if seed is None:
            seed = None if self._started else self.seed
        else:
            seed = _check_seed(seed)
        self._started = True
        return self._reset(seed)

    def step(self, actions: Any) -> Step:
        """Advance every copy by one joint action ``actions (B, N)``; copies that end are reset."""
        if not self._started:
            raise RuntimeError(f"{self.name}: step() called before reset()")
        return self._step(self._check_actions(actions))

    def render(self, index: int = 0) -> np.ndarray | None:
        """An (H, W, 3) uint8 frame of copy ``index``, or None when that copy cannot render."""
        self._check_index(index)
        return None

    def close(self) -> None:
        """Release the copies' resources (windows, processes); the env cannot be used afterwards."""

    def __enter__(self) -> TeamEnv:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    def __repr__(self) -> str:
        return (f"{type(self).__name__}({self.name!r}, num_envs={self.num_envs}, "
                f"agents={self.spec.num_agents}, actions={self.spec.num_actions})")

    # ------------------------------------------------------------------ for subclasses
    def _reset(self, seed: int | None) -> tuple[np.ndarray, np.ndarray | None]:
        raise NotImplementedError

    def _step(self, actions: np.ndarray) -> Step:
        raise NotImplementedError

    def _check_actions(self, actions: Any) -> np.ndarray:
        """``actions`` as a (B, N) int64 array in [0, num_actions), or :class:`envs.ActionError`."""
        return check_joint_actions(actions, self.name, self.num_envs, self.spec.agents, self.spec.num_actions)

    def _check_index(self, index: Any) -> int:
        if isinstance(index, bool) or not isinstance(index, (int, np.integer)) \
                or not 0 <= index < self.num_envs:
            raise IndexError(f"{self.name}: render index = {index!r} is not allowed; expected an integer in "
                             f"[0, {self.num_envs - 1}]")
        return int(index)


# ---------------------------------------------------------------------------------------------- our games
class GameTeamEnv(TeamEnv):
    """Our batched engine (:class:`envs.core.BatchedGame`) as a TeamEnv: one numpy step for all copies.

    Our games run in lockstep and end after ``max_cycles`` steps for every copy at once (terminated or
    truncated, as the game's ``horizon`` says), so the whole batch is reset together when it ends. ``frozen`` comes from ``infos["frozen"]``, the state from ``game.state()``.
    """

    def __init__(self, game: Any, seed: int, name: str | None = None, with_state: bool = True,
                 render: bool = False):
        spec = TeamSpec(agents=tuple(game.possible_agents), obs_space=game.observation_space,
                        num_actions=int(game.action_space.n), state_space=game.state_space)
        super().__init__(name or game.name, spec, game.num_envs, seed)
        self.game = game
        self.with_state = with_state  # False: skip state() on every step when no learner needs it
        self._render = bool(render)  # True: Step.final_frame at the end of an episode

    def _state(self) -> np.ndarray | None:
        return self.game.state() if self.with_state else None

    def _check_actions(self, actions: Any) -> np.ndarray:
        return actions  # the game checks them (BatchedGame.check_actions) without a second pass here

    def _reset(self, seed: int | None) -> tuple[np.ndarray, np.ndarray | None]:
        obs, _ = self.game.reset(seed=seed)
        return obs, self._state()

    def _step(self, actions: np.ndarray) -> Step:
        obs, rewards, terminated, truncated, infos = self.game.step(actions)
        state = self._state()
        done = terminated | truncated
        end = done.all(axis=1)
        if (done.any(axis=1) & ~end).any():
            raise EnvAdapterError(f"{self.name}: some agents finished before the others; {STAY_MESSAGE}")
        frozen = (infos["frozen"] > 0) if "frozen" in infos else np.zeros(done.shape, bool)
        reset_obs = reset_state = final_frame = None
        if end.any():
            if not end.all():
                raise EnvAdapterError(f"{self.name}: copies {np.flatnonzero(end).tolist()} ended but not all "
                                      f"{self.num_envs}; a batched game must run its copies in lockstep")
            if self._render:  # the last state of the episode, before the reset replaces it
                final_frame = self.game.render_rgb(0)
            reset_obs, _ = self.game.reset(seed=None)  # unseeded: each copy's generator continues
            reset_state = self._state()
        return Step(obs=obs, state=state, rewards=rewards.astype(np.float32, copy=False),
                    terminated=terminated, end=end, frozen=frozen, infos=infos,
                    reset_obs=reset_obs, reset_state=reset_state, final_frame=final_frame)

    def render(self, index: int = 0) -> np.ndarray | None:
        return self.game.render_rgb(self._check_index(index))


# ---------------------------------------------------------------------------------------------- adapters
class _CopyLoopTeamEnv(TeamEnv):
    """Adapters that hold one env object per copy (``self.envs``) and loop over them in Python. Only the
    first copy renders, when made with ``render=True``.

    Subclasses implement ``_reset_copy(b, seed) -> (obs (N, ...), state or None)`` and
    ``_step_copy(b, actions (N,)) -> (obs, state, rewards (N,), terminated (N,), end)``.
    """

    envs: list[Any]
    _render: bool

    def _empty(self, space: spaces.Box | None) -> np.ndarray | None:
        return None if space is None else np.empty((self.num_envs, *space.shape), space.dtype)

    def _obs_array(self) -> np.ndarray:
        return np.empty((self.num_envs, self.spec.num_agents, *self.spec.obs_shape), self.spec.obs_dtype)

    def _reset(self, seed: int | None) -> tuple[np.ndarray, np.ndarray | None]:
        obs, state = self._obs_array(), self._empty(self.spec.state_space)
        for b in range(self.num_envs):
            obs[b], s = self._reset_copy(b, None if seed is None else seed + b)
            if state is not None:
                state[b] = s
        return obs, state

    def _step(self, actions: np.ndarray) -> Step:
        B, N = actions.shape
        obs, state = self._obs_array(), self._empty(self.spec.state_space)
        rewards = np.empty((B, N), np.float32)
        terminated = np.empty((B, N), bool)
        end = np.empty(B, bool)
        for b in range(B):
            obs[b], s, rewards[b], terminated[b], end[b] = self._step_copy(b, actions[b])
            if state is not None:
                state[b] = s
        reset_obs = reset_state = final_frame = None
        if end.any():
            if end[0] and self._render:  # the last state of copy 0's episode, before its reset
                frame = self.envs[0].render()
                final_frame = None if frame is None else np.asarray(frame)
            reset_obs = obs.copy()
            reset_state = None if state is None else state.copy()
            for b in np.flatnonzero(end):
                reset_obs[b], s = self._reset_copy(int(b), None)  # unseeded: the copy's generator continues
                if reset_state is not None:
                    reset_state[b] = s
        return Step(obs=obs, state=state, rewards=rewards, terminated=terminated, end=end,
                    frozen=np.zeros((B, N), bool), infos={}, reset_obs=reset_obs, reset_state=reset_state,
                    final_frame=final_frame)

    def _reset_copy(self, b: int, seed: int | None) -> tuple[np.ndarray, np.ndarray | None]:
        raise NotImplementedError

    def _step_copy(self, b: int, actions: np.ndarray) -> tuple:
        raise NotImplementedError

    def render(self, index: int = 0) -> np.ndarray | None:
        if self._check_index(index) != 0 or not self._render:
            return None
        frame = self.envs[0].render()
        return None if frame is None else np.asarray(frame)

    def _close_all(self) -> None:
        for env in self.envs:
            env.close()
        self.envs = []

    def close(self) -> None:
        self._close_all()  # safe to call twice


class ParallelTeamEnv(_CopyLoopTeamEnv):
    """``num_envs`` PettingZoo ``ParallelEnv`` instances from one factory, stepped in a Python loop.

    The env must give every agent the same ``Discrete`` action space and a ``Box`` observation space of one
    shape and dtype (``Discrete`` and ``MultiDiscrete`` observations are one-hot encoded into a uint8 ``Box``), and keep every agent until the episode ends (all agents terminated or truncated, or
    ``env.agents`` empty). The state comes from ``env.state()`` when the env has a ``state_space`` Box and
    ``state()`` works; otherwise it is None. Only the first instance renders (``render_mode="rgb_array"``).
    """

    def __init__(self, name: str, factory: Callable[..., Any], params: Mapping[str, Any], num_envs: int,
                 seed: int, render: bool = False):
        _no_render_mode(name, params)
        self._render = bool(render)
        self.envs: list[Any] = []
        self.envs.append(self._build(name, factory, params, self._render))
        try:
            spec, self._start, self._encode = _parallel_spec(name, self.envs[0], params)
            for _ in range(1, num_envs):
                self.envs.append(self._build(name, factory, params, False))
        except BaseException:
            self._close_all()
            raise
        super().__init__(name, spec, num_envs, seed)
        self._t = [0] * num_envs

    @staticmethod
    def _build(name: str, factory: Callable[..., Any], params: Mapping[str, Any], render: bool) -> Any:
        kwargs = dict(params, render_mode="rgb_array") if render else dict(params)
        try:
            return factory(**kwargs)
        except (TypeError, ValueError) as exc:
            raise EnvAdapterError(f"{name}: cannot build the env with parameters {dict(params)}: {exc}") from exc

    def _observe(self, b: int, obs: Mapping[str, Any]) -> np.ndarray:
        agents = self.spec.agents
        missing = [a for a in agents if a not in obs]
        if missing:
            raise EnvAdapterError(f"{self.name}: no observation for {missing[0]} (copy {b}); {STAY_MESSAGE}")
        encode = self._encode or np.asarray
        out = np.stack([encode(obs[a]) for a in agents]).astype(self.spec.obs_dtype, copy=False)
        if out.shape[1:] != self.spec.obs_shape:
            raise EnvAdapterError(f"{self.name}: observation of shape {out.shape[1:]} (copy {b}) does not fit the "
                                  f"observation space of shape {self.spec.obs_shape}")
        return out

    def _state(self, b: int) -> np.ndarray | None:
        if self.spec.state_space is None:
            return None
        return np.asarray(self.envs[b].state(), self.spec.state_space.dtype)

    def _reset_copy(self, b: int, seed: int | None) -> tuple[np.ndarray, np.ndarray | None]:
        env = self.envs[b]
        obs, _ = env.reset(seed=seed)
        if set(env.agents) != set(self.spec.agents):
            raise EnvAdapterError(f"{self.name}: after reset the agents are {list(env.agents)}, not every agent "
                                  f"of {list(self.spec.agents)}; {STAY_MESSAGE}")
        self._t[b] = 0
        return self._observe(b, obs), self._state(b)

    def _step_copy(self, b: int, actions: np.ndarray) -> tuple:
        env, agents = self.envs[b], self.spec.agents
        obs, rew, term, trunc, _ = env.step({a: int(actions[i]) + self._start for i, a in enumerate(agents)})
        self._t[b] += 1
        terminated = np.array([bool(term.get(a, False)) for a in agents])
        done = terminated | np.array([bool(trunc.get(a, False)) for a in agents])
        live = list(env.agents)
        end = bool(done.all()) or not live
        if not end and (done.any() or len(live) != len(agents)):
            gone = [a for a, d in zip(agents, done) if d or a not in live]
            raise EnvAdapterError(f"{self.name}: {', '.join(gone)} left the episode at step {self._t[b]} "
                                  f"(copy {b}) before the others; {STAY_MESSAGE}")
        rewards = np.array([rew.get(a, 0.0) for a in agents], np.float32)
        return self._observe(b, obs), self._state(b), rewards, terminated, end


class GymTeamEnv(_CopyLoopTeamEnv):
    """``num_envs`` single-agent gymnasium envs as a team of one agent ``agent_0``, stepped in a Python loop.

    Needs a ``Discrete`` action space and a ``Box`` observation space; observations are cast to float32.
    ``terminated`` and the end of an episode come from gymnasium's terminated / truncated. No state.
    """

    def __init__(self, name: str, env_id: str, params: Mapping[str, Any], num_envs: int, seed: int,
                 render: bool = False):
        _no_render_mode(name, params)
        self._render = bool(render)
        self.envs: list[Any] = [self._build(name, env_id, params, self._render)]
        try:
            spec, self._start = _gym_spec(name, self.envs[0])
            for _ in range(1, num_envs):
                self.envs.append(self._build(name, env_id, params, False))
        except BaseException:
            self._close_all()
            raise
        super().__init__(name, spec, num_envs, seed)

    @staticmethod
    def _build(name: str, env_id: str, params: Mapping[str, Any], render: bool) -> Any:
        import gymnasium

        kwargs = dict(params, render_mode="rgb_array") if render else dict(params)
        try:
            return gymnasium.make(env_id, **kwargs)
        except (gymnasium.error.Error, TypeError, ValueError) as exc:
            raise EnvAdapterError(f"env.name = {name!r}: cannot make gymnasium env {env_id!r}: {exc}") from exc

    def _observe(self, obs: Any) -> np.ndarray:
        out = np.asarray(obs, np.float32)
        if out.shape != self.spec.obs_shape:
            raise EnvAdapterError(f"{self.name}: observation of shape {out.shape} does not fit the observation "
                                  f"space of shape {self.spec.obs_shape}")
        return out[None]

    def _reset_copy(self, b: int, seed: int | None) -> tuple[np.ndarray, None]:
        obs, _ = self.envs[b].reset(seed=seed)
        return self._observe(obs), None

    def _step_copy(self, b: int, actions: np.ndarray) -> tuple:
        obs, reward, terminated, truncated, _ = self.envs[b].step(int(actions[0]) + self._start)
        return self._observe(obs), None, reward, bool(terminated), bool(terminated or truncated)


# ---------------------------------------------------------------------------------------------- spec checks
def _no_render_mode(name: str, params: Mapping[str, Any]) -> None:
    if "render_mode" in params:
        raise EnvAdapterError(f"{name}: parameter 'render_mode' is set by the trainer (render=True makes the "
                              f"first copy render); leave it out")


def _discrete_size(name: str, space_of: Mapping[str, Any], params: Mapping[str, Any]) -> tuple[int, int]:
    """(n, start) of the one ``Discrete`` action space every agent shares, or :class:`EnvAdapterError`."""
    first = None
    for agent, space in space_of.items():
        if not isinstance(space, spaces.Discrete):
            hint = " (drop continuous_actions=True)" if params.get("continuous_actions") else ""
            raise EnvAdapterError(f"{name}: {agent} has action space {space}; the trainer needs a Discrete "
                                  f"action space{hint}")
        if first is None:
            first = (agent, space)
        elif (space.n, space.start) != (first[1].n, first[1].start):
            raise EnvAdapterError(f"{name}: action spaces differ: {first[0]} has {first[1]}, {agent} has {space}; "
                                  f"the trainer needs the same Discrete space for every agent")
    return int(first[1].n), int(first[1].start)


def _one_hot_encoder(name: str, space_of: Mapping[str, Any]) -> tuple[spaces.Box, Callable[[Any], np.ndarray]] | None:
    """For ``Discrete`` or ``MultiDiscrete`` observations (the same space for every agent): the one-hot
    ``Box(0, 1, (size,), uint8)`` they become and the function that encodes one observation (a
    MultiDiscrete one is the concatenation of one one-hot block per entry). None for any other space."""
    spaces_ = list(space_of.values())
    first = spaces_[0]
    if isinstance(first, spaces.Discrete):
        if any(not isinstance(s, spaces.Discrete) or (s.n, s.start) != (first.n, first.start) for s in spaces_):
            raise EnvAdapterError(f"{name}: the agents' Discrete observation spaces differ; the trainer needs one "
                                  "space for every agent")
        n, start = int(first.n), int(first.start)

        def encode(obs: Any) -> np.ndarray:
            out = np.zeros(n, np.uint8)
            out[int(np.asarray(obs)) - start] = 1
            return out
        return spaces.Box(0, 1, (n,), np.uint8), encode
    if isinstance(first, spaces.MultiDiscrete):
        nvec = np.asarray(first.nvec).ravel()
        if any(not isinstance(s, spaces.MultiDiscrete) or not np.array_equal(np.asarray(s.nvec).ravel(), nvec)
               for s in spaces_):
            raise EnvAdapterError(f"{name}: the agents' MultiDiscrete observation spaces differ; the trainer needs "
                                  "one space for every agent")
        offsets = np.concatenate([[0], np.cumsum(nvec)[:-1]]).astype(np.int64)
        lows = np.asarray(getattr(first, "start", np.zeros_like(nvec))).ravel().astype(np.int64)
        size = int(nvec.sum())

        def encode(obs: Any) -> np.ndarray:
            out = np.zeros(size, np.uint8)
            out[offsets + np.asarray(obs).ravel().astype(np.int64) - lows] = 1
            return out
        return spaces.Box(0, 1, (size,), np.uint8), encode
    return None


def _shared_box(name: str, space_of: Mapping[str, Any]) -> spaces.Box:
    """The one observation ``Box`` shape and dtype every agent shares (bounds: the union), or an error."""
    first = None
    for agent, space in space_of.items():
        if not isinstance(space, spaces.Box):
            raise EnvAdapterError(f"{name}: {agent} has observation space {space}; the trainer needs a Box")
        if first is None:
            first = (agent, space)
        elif space.shape != first[1].shape or space.dtype != first[1].dtype:
            raise EnvAdapterError(f"{name}: observation spaces differ: {first[0]} has shape {first[1].shape} "
                                  f"{first[1].dtype}, {agent} has shape {space.shape} {space.dtype}; the trainer "
                                  f"needs one shape and dtype for every agent")
    box = first[1]
    lows = [s.low for s in space_of.values()]
    highs = [s.high for s in space_of.values()]
    if all(np.array_equal(lo, box.low) for lo in lows) and all(np.array_equal(h, box.high) for h in highs):
        return box
    return spaces.Box(np.minimum.reduce(lows), np.maximum.reduce(highs), box.shape, box.dtype)


def _parallel_spec(name: str, env: Any, params: Mapping[str, Any]
                   ) -> tuple[TeamSpec, int, Callable[[Any], np.ndarray] | None]:
    from pettingzoo import AECEnv

    if isinstance(env, AECEnv):
        module = importlib.import_module(name.partition(":")[0]) if ":" in name else None
        if module is not None and hasattr(module, "parallel_env"):
            raise EnvAdapterError(f"{name}: the factory returned an AEC env; this game also has a ParallelEnv "
                                  f"factory: use '{name.partition(':')[0]}:parallel_env'")
        raise EnvAdapterError(f"{name}: a turn-based (AEC) game with no ParallelEnv factory; the trainer steps "
                              "every agent at once and supports PettingZoo ParallelEnv games only (e.g. "
                              "'mpe2.simple_spread_v3:parallel_env', 'pettingzoo.classic.rps_v2:parallel_env')")
    for attr in ("possible_agents", "reset", "step", "action_space", "observation_space"):
        if not hasattr(env, attr):
            raise EnvAdapterError(f"{name}: the factory returned {type(env).__name__}, which has no "
                                  f"'{attr}'; expected a PettingZoo ParallelEnv")
    agents = tuple(env.possible_agents)
    if not agents:
        raise EnvAdapterError(f"{name}: the env has no agents")
    num_actions, start = _discrete_size(name, {a: env.action_space(a) for a in agents}, params)
    observed = {a: env.observation_space(a) for a in agents}
    one_hot = _one_hot_encoder(name, observed)
    obs_space, encode = one_hot if one_hot is not None else (_shared_box(name, observed), None)
    state_space = None
    candidate = getattr(env, "state_space", None)
    if isinstance(candidate, spaces.Box):
        env.reset(seed=0)  # state() needs a reset world; the first real reset re-seeds every copy
        try:
            state = np.asarray(env.state())
        except (NotImplementedError, AttributeError):
            state = None
        if state is not None and state.shape == candidate.shape:
            state_space = candidate
    spec = TeamSpec(agents=agents, obs_space=obs_space, num_actions=num_actions, state_space=state_space)
    return spec, start, encode


def _gym_spec(name: str, env: Any) -> tuple[TeamSpec, int]:
    act, obs = env.action_space, env.observation_space
    if not isinstance(act, spaces.Discrete):
        raise EnvAdapterError(f"{name}: action space {act} is not supported; the trainer needs a Discrete "
                              f"action space")
    if not isinstance(obs, spaces.Box):
        raise EnvAdapterError(f"{name}: observation space {obs} is not supported; the trainer needs a Box")
    with np.errstate(over="ignore"):  # float64 bounds beyond float32 become +-inf, i.e. unbounded
        box = spaces.Box(obs.low.astype(np.float32), obs.high.astype(np.float32), obs.shape, np.float32)
    return TeamSpec(agents=(GYM_AGENT,), obs_space=box, num_actions=int(act.n)), int(act.start)


# ---------------------------------------------------------------------------------------------- factory
def _check_seed(seed: Any) -> int:
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise EnvAdapterError(f"seed = {seed!r} is not allowed; expected a non-negative integer")
    return int(seed)


def _import_factory(name: str) -> Callable[..., Any]:
    module_name, _, attr = name.partition(":")
    if not module_name or not attr:
        raise EnvAdapterError(f"env.name = {name!r} is not allowed; expected 'module:callable'")
    try:
        module = importlib.import_module(module_name)
    except ImportError as exc:
        if module_name.split(".")[0] == "mpe2":
            pip = command("pip")
            hint = f'; install it with {pip} install "marl-core[dev]" or {pip} install mpe2'
        else:
            hint = "; is its package installed?"
        raise EnvAdapterError(f"env.name = {name!r}: cannot import module {module_name!r} ({exc}){hint}") \
            from exc
    obj: Any = module
    for part in attr.split("."):
        if not hasattr(obj, part):
            raise EnvAdapterError(f"env.name = {name!r}: module {module_name!r} has no attribute {attr!r}; "
                                  f"expected a PettingZoo ParallelEnv factory such as 'parallel_env'")
        obj = getattr(obj, part)
    if not callable(obj):
        raise EnvAdapterError(f"env.name = {name!r}: {module_name}.{attr} is not callable; expected a "
                              f"PettingZoo ParallelEnv factory")
    return obj


def make_team_env(name: str, params: Mapping[str, Any] | None, num_envs: int, seed: int,
                  render: bool = False, with_state: bool = True) -> TeamEnv:
    """Build the :class:`TeamEnv` for the env ``name`` (see the module docstring for the three kinds).

    Args:
        name: one of ``envs.GAMES``, ``"module:callable"`` (a PettingZoo ParallelEnv factory) or
            ``"gymnasium:ID"``.
        params: keyword arguments of the game / factory / ``gymnasium.make``.
        num_envs: number of copies B (>= 1).
        seed: seed of the first reset; copy ``b`` gets ``seed + b``.
        render: adapters make their first copy with ``render_mode="rgb_array"`` (our games always render);
            with it, a step that ends copy 0's episode carries that copy's last frame (``Step.final_frame``).
        with_state: our games compute ``state()`` every step only when this is True (adapters always do).

    Raises:
        EnvAdapterError: the env cannot be built or does not fit the trainer.
        envs.ParamError: a bad parameter of one of our games.
    """
    if not isinstance(name, str) or not name:
        raise EnvAdapterError(f"env.name = {name!r} is not allowed; expected a game name, 'module:callable' "
                              f"or 'gymnasium:ID'")
    if params is None:
        params = {}
    if not isinstance(params, Mapping):
        raise EnvAdapterError(f"{name}: params = {params!r} is not allowed; expected a mapping of keyword "
                              f"arguments")
    if isinstance(num_envs, bool) or not isinstance(num_envs, (int, np.integer)) or num_envs < 1:
        raise EnvAdapterError(f"{name}: num_envs = {num_envs!r} is not allowed; expected an integer >= 1")
    num_envs, seed = int(num_envs), _check_seed(seed)

    if name in envs.GAMES:
        return GameTeamEnv(envs.make_vector(name, num_envs, **params), seed, name=name, with_state=with_state,
                           render=render)
    if name.startswith(GYM_PREFIX):
        env_id = name[len(GYM_PREFIX):]
        if not env_id:
            raise EnvAdapterError(f"env.name = {name!r} is not allowed; expected 'gymnasium:ID', e.g. "
                                  f"'gymnasium:CartPole-v1'")
        return GymTeamEnv(name, env_id, params, num_envs, seed, render)
    if ":" in name:
        return ParallelTeamEnv(name, _import_factory(name), params, num_envs, seed, render)
    close = nearest(name, envs.GAMES)
    hint = f"; did you mean {', '.join(repr(c) for c in close)}?" if close else ""
    raise EnvAdapterError(f"env.name = {name!r} is not known{hint} (expected one of {', '.join(envs.GAMES)}, "
                          f"'module:callable' for a PettingZoo ParallelEnv factory, or 'gymnasium:ID')")


def random_actions(spec: TeamSpec, num_envs: int, rng: np.random.Generator) -> np.ndarray:
    """(B, N) int64 actions drawn uniformly from ``[0, spec.num_actions)`` with ``rng``."""
    return rng.integers(0, spec.num_actions, size=(num_envs, spec.num_agents), dtype=np.int64)
