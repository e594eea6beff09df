"""N-player matrix games, one-shot or repeated, on the batched engine.

==================  =====================================================================
Agents              ``num_agents`` (2 for the two-player tables; any 2..16 for public goods)
Agent ids           ``agent_0`` .. ``agent_{N-1}``
Actions             ``Discrete(A)``; A = 2 for every bundled table
Observation         ``Box(0, 1, (N * A,), uint8)``: the previous joint action, one-hot
State               ``Box(0, 1, (N * A,), uint8)``: the same vector
Episode             ``max_cycles`` rounds (1 = one-shot), then termination (``horizon``)
==================  =====================================================================

Description
    Every round each agent picks one action at the same time and receives the payoff that the game's table
    gives to it for the joint action. With ``max_cycles = 1`` this is the one-shot game; with more rounds it
    is the repeated game, in which agents see the last joint action and can answer it.

    Bundled tables (``game``); action 0 is the cooperative choice wherever the game has one (sources and
    what is from memory: docs/sources.md, "Matrix games"):

    ``prisoners_dilemma``  actions ``cooperate``, ``defect``. T, R, P, S = 5, 3, 1, 0 (Axelrod 1984,
                           "The Evolution of Cooperation"). Mutual defection is the only Nash equilibrium of
                           the one-shot game, although mutual cooperation pays both more.
    ``stag_hunt``          actions ``stag``, ``hare``. Payoff order R > T >= P > S (the stag hunt of
                           Skyrms 2004, "The Stag Hunt and the Evolution of Social Structure"; ordering from
                           memory). The numbers R, T, P, S = 4, 3, 2, 0 are our own choice in that order. Both
                           "all stag" and "all hare" are equilibria.
    ``chicken``            actions ``swerve``, ``straight``. Payoff order T > R > S > P (Rapoport & Chammah
                           1966, "The game of chicken"; ordering from memory). The numbers T, R, S, P =
                           4, 3, 1, 0 are our own choice in that order.
    ``matching_pennies``   actions ``heads``, ``tails``. Zero-sum: agent_0 gets +1 and agent_1 gets -1 when
                           the coins match, the reverse when they differ (von Neumann & Morgenstern 1944,
                           "Theory of Games and Economic Behavior"; from memory). No pure equilibrium.
    ``public_goods``       actions ``contribute``, ``keep``. The linear public goods game (the voluntary
                           contribution game surveyed by Ledyard 1995, "Public goods: a survey of experimental
                           research", Handbook of Experimental Economics; form from memory): every agent holds
                           an endowment of 1 and either puts it in a common pot or keeps it; the pot is
                           multiplied by ``multiplier`` and shared equally by all N agents, so
                           ``payoff_i = (1 - c_i) + multiplier * sum_j c_j / N`` with ``c_i = 1`` for
                           ``contribute``. With ``1 < multiplier < N`` keeping is dominant although all
                           contributing pays everyone more.
    ``custom``             the table given in ``payoffs``; actions ``action_0`` .. ``action_{A-1}``.

    Custom table layout: ``payoffs`` is a flat list of ``N * A**N`` numbers. Joint actions are listed in
    row-major order, agent_0's action varying slowest (the order of ``numpy.ravel_multi_index``), and each
    joint action is followed by the N payoffs of agent_0 .. agent_{N-1}. For two agents and two actions the
    list is ``[r0(0,0), r1(0,0), r0(0,1), r1(0,1), r0(1,0), r1(1,0), r0(1,1), r1(1,1)]``; the prisoner's
    dilemma is ``[3, 3, 0, 5, 5, 0, 1, 1]``.

Action space
    ``Discrete(A)``; the action names are in ``action_names`` (see the table above).

Observation space
    ``uint8`` vector of length ``N * A``, the same for every agent: entry ``i * A + a`` is 1 when agent i
    chose action a in the previous round. All zeros before the first round. Bounds are exactly 0 and 1.
    ``state()`` returns the same vector per copy.

Rewards
    ``float32``, the table's payoff to each agent for the joint action of this round.

Infos (``(B, N)`` integer arrays in the batched engine; ints per agent in the facade)
    ``action``  the action the agent took this round (-1 in the infos returned by ``reset``).
    ``frozen``  always 0: nobody is ever tagged out here. Reported so that the peace metric reads the same
                key on every game (the grid games report their tag-outs under ``frozen``).

Starting state
    No previous joint action (observation all zeros), round counter at 0. The game is deterministic; the
    seeding contract of ``reset(seed)`` is kept all the same.

Episode end
    After ``max_cycles`` rounds, for every agent at once, as ``horizon`` says:

    * ``"terminal"`` (default): every agent is terminated. The rounds are the game, and the last round is
      its last move: nothing is earned after it, so a learner must not bootstrap past it. With
      ``max_cycles = 1`` this is the one-shot game, whose values are the table's payoffs.
    * ``"time_limit"``: every agent is truncated. The episode is a window cut out of an endless repeated
      game by a time limit, and learners bootstrap from the final observation.

    Nothing ends the episode earlier. Agents do not observe the round number: the observation is the
    previous joint action only, all zeros in the first round. So it tells the first round from the others
    and nothing more. With ``"terminal"`` and ``max_cycles`` of 3 or more, rounds 2 .. ``max_cycles`` look
    alike although the number of rounds left (and so the value of an action) differs: the problem is not
    Markov in the observation. Only with ``max_cycles`` 1 or 2 does the observation reveal the round.
    (With ``"time_limit"`` the learner treats every round as one of an endless game, so the round number
    does not matter to its values.)

Arguments
    ==============  ======  =======================  ==================================================
    name            type    default                  meaning
    ==============  ======  =======================  ==================================================
    ``game``        str     ``"prisoners_dilemma"``  bundled table, or ``"custom"`` (the game when
                                                     ``payoffs`` is given and ``game`` is not)
    ``payoffs``     list    ``None``                 custom table, flat, ``N * A**N`` numbers (layout
                                                     above)
    ``num_agents``  int     2                        team size N; 2 for the two-player tables
    ``max_cycles``  int     10                       rounds per episode; 1 = one-shot game
    ``horizon``     str     ``"terminal"``           end at max_cycles: ``"terminal"`` (terminated) or
                                                     ``"time_limit"`` (truncated)
    ``multiplier``  float   1.6                      public goods only: factor on the common pot
    ==============  ======  =======================  ==================================================

Version history
    * v0: first version.
    * v0, later: the ``horizon`` parameter. The last round of matrix_v0 is now terminal by default (every
      agent terminated); the first version truncated it, which is ``horizon = "time_limit"``.
"""

from __future__ import annotations

from typing import Any, ClassVar

import numpy as np
from gymnasium import spaces

from envs.core import TERMINAL, BatchedGame, GameParallelEnv, end_flags, horizon_param
from envs.errors import ActionError, ParamError
from envs.params import Param, resolve

__all__ = ["NAME", "PARAMS", "TABLES", "MatrixGame", "MatrixParallelEnv", "parallel_env", "env",
           "vector_env", "build_table", "resolve_params"]

NAME = "matrix_v0"
#: efficiency only: no resource to sustain, no tagging, returns that may be negative
METRICS: tuple[str, ...] = ("efficiency",)

MAX_AGENTS = 16


def _symmetric(r: float, s: float, t: float, p: float) -> list[list[list[float]]]:
    """Two-player symmetric table; action 0 is the cooperative one. [a0][a1] -> (payoff 0, payoff 1)."""
    return [[[r, r], [s, t]],
            [[t, s], [p, p]]]


# Two-player tables: (action names, [a0][a1] -> [payoff of agent_0, payoff of agent_1]).
TABLES: dict[str, tuple[tuple[str, ...], list]] = {
    # T, R, P, S = 5, 3, 1, 0: Axelrod 1984, "The Evolution of Cooperation".
    "prisoners_dilemma": (("cooperate", "defect"), _symmetric(r=3, s=0, t=5, p=1)),
    # Order R > T >= P > S: Skyrms 2004 (from memory); the numbers 4, 3, 2, 0 are our own choice.
    "stag_hunt": (("stag", "hare"), _symmetric(r=4, s=0, t=3, p=2)),
    # Order T > R > S > P: Rapoport & Chammah 1966 (from memory); the numbers 4, 3, 1, 0 are our own choice.
    "chicken": (("swerve", "straight"), _symmetric(r=3, s=1, t=4, p=0)),
    # Zero-sum +-1, agent_0 wins on a match: von Neumann & Morgenstern 1944 (from memory).
    "matching_pennies": (("heads", "tails"), [[[1, -1], [-1, 1]],
                                              [[-1, 1], [1, -1]]]),
}
PUBLIC_GOODS = "public_goods"
CUSTOM = "custom"
GAME_CHOICES: tuple[str, ...] = (*TABLES, PUBLIC_GOODS, CUSTOM)

PARAMS: list[Param] = [
    Param("game", str, "prisoners_dilemma", "bundled payoff table, or 'custom' to use 'payoffs'",
          choices=GAME_CHOICES),
    Param("payoffs", list, None, "custom table: flat list of N * A**N payoffs, joint actions in row-major "
          "order (agent_0 slowest), each followed by the N agents' payoffs"),
    Param("num_agents", int, 2, "team size N (2 for the two-player tables)", low=2, high=MAX_AGENTS),
    Param("max_cycles", int, 10, "rounds per episode; 1 = one-shot game", low=1, high=1_000_000),
    horizon_param(TERMINAL),
    Param("multiplier", float, 1.6, "public_goods only: factor on the common pot (a dilemma when "
          "1 < multiplier < num_agents)", low=0.0),
]
_GAME = PARAMS[0]


def resolve_params(given: dict[str, Any]) -> dict[str, Any]:
    """Every parameter's value (defaults filled in), with the one rule between two of them: when ``payoffs``
    is given (not None) and ``game`` is not, the game is ``"custom"``.

    Raises:
        ParamError: for an unknown name or a bad value, and for a bundled ``game`` given together with
            ``payoffs``.
    """
    given = dict(given)
    if given.get("payoffs", 0) is None:
        del given["payoffs"]            # None means "use `game`", the default
    if "payoffs" in given:
        game = given.get("game", CUSTOM)
        if game != CUSTOM:
            _GAME.validate(game, NAME)  # a name that is no game at all gets the usual message first
            raise ParamError(f"{NAME}: parameter 'game' = {game!r} is not allowed together with 'payoffs'; "
                             f"expected 'custom' or leave 'game' out")
        given["game"] = CUSTOM
    return resolve(NAME, PARAMS, given)


def build_table(params: dict[str, Any]) -> tuple[tuple[str, ...], np.ndarray]:
    """Action names and the payoff table ``(A,) * N + (N,)`` (float32) of resolved parameters.

    ``table[a_0, ..., a_{N-1}, i]`` is agent i's payoff for the joint action ``(a_0, ..., a_{N-1})``.

    Raises:
        ParamError: when ``num_agents`` does not fit the game or ``payoffs`` has the wrong length.
    """
    game, n = params["game"], params["num_agents"]
    if game == CUSTOM:
        flat = params["payoffs"]
        if flat is None:
            raise ParamError(f"{NAME}: parameter 'payoffs' is missing; game = 'custom' needs a flat list of "
                             f"N * A**N payoffs")
        a = _num_actions(len(flat), n)
        if a is None:
            raise ParamError(f"{NAME}: parameter 'payoffs' has {len(flat)} numbers; expected N * A**N "
                             f"numbers for num_agents = N = {n} and A >= 2 actions each (for example "
                             f"{n * 2 ** n} for A = 2, {n * 3 ** n} for A = 3)")
        names = tuple(f"action_{k}" for k in range(a))
        table = np.asarray(flat, dtype=np.float64).reshape((a,) * n + (n,))
    elif game == PUBLIC_GOODS:
        names = ("contribute", "keep")
        # c[..., i] = 1 when agent i contributes (action 0); joint actions on the first N axes
        c = 1.0 - np.stack(np.indices((2,) * n), axis=-1)
        pot = params["multiplier"] * c.sum(axis=-1, keepdims=True) / n
        table = (1.0 - c) + pot
    else:
        if n != 2:
            raise ParamError(f"{NAME}: parameter 'num_agents' = {n!r} is not allowed; expected 2 for game "
                             f"{game!r} (only '{PUBLIC_GOODS}' and '{CUSTOM}' take other team sizes)")
        names, rows = TABLES[game]
        table = np.asarray(rows, dtype=np.float64)
    table = table.astype(np.float32)
    if not np.all(np.isfinite(table)):
        field = "payoffs" if game == CUSTOM else "multiplier"
        raise ParamError(f"{NAME}: parameter '{field}' = {params[field]!r} is not allowed; expected "
                         f"payoffs that are finite float32 numbers")
    table.setflags(write=False)
    return names, table


def _num_actions(length: int, n: int) -> int | None:
    """A with ``n * A**n == length`` and A >= 2, or None."""
    if length % n:
        return None
    cells = length // n
    guess = round(cells ** (1.0 / n))
    for a in (guess - 1, guess, guess + 1):
        if a >= 2 and a ** n == cells:
            return a
    return None


class MatrixGame(BatchedGame):
    """B copies of an N-player matrix game, stepped together.

    Args:
        num_envs: number of copies B.
        **params: game parameters (``PARAMS``; see the module docstring).

    Attributes:
        payoff_table: read-only ``(A,) * N + (N,)`` float32 table.

    Shape:
        ``reset() -> obs (B, N, N*A) uint8``;
        ``step(actions (B, N) int) -> obs (B, N, N*A) uint8, rewards (B, N) float32,
        terminated (B, N) bool, truncated (B, N) bool, infos {key: (B, N) int64}``;
        ``state() -> (B, N*A) uint8``.
    """

    name: ClassVar[str] = NAME
    info_keys: ClassVar[tuple[str, ...]] = ("action", "frozen")

    def __init__(self, num_envs: int = 1, **params: Any):
        self.num_envs = self.check_num_envs(NAME, num_envs)
        self.params = resolve_params(params)
        self.action_names, self.payoff_table = build_table(self.params)
        n = self.params["num_agents"]
        a = len(self.action_names)
        self.max_cycles = self.params["max_cycles"]
        self.possible_agents = [f"agent_{i}" for i in range(n)]
        self.action_space = spaces.Discrete(a)
        self.observation_space = spaces.Box(0, 1, (n * a,), np.uint8)
        self.state_space = spaces.Box(0, 1, (n * a,), np.uint8)
        self._flat = self.payoff_table.reshape(-1, n)           # (A**N, N), row = joint action
        self._offset = np.arange(n) * a                         # agent i's block in the one-hot vector
        self._low = float(self.payoff_table.min())
        self._high = float(self.payoff_table.max())
        self._rngs: list[np.random.Generator] = []
        self._round: int | None = None                         # None until reset
        self._last = np.full((self.num_envs, n), -1, np.int64)  # previous joint action, -1 = none
        self._rewards = np.zeros((self.num_envs, n), np.float32)

    # --- engine ------------------------------------------------------------------------------------------

    def reset(self, seed: int | None = None) -> tuple[np.ndarray, dict[str, np.ndarray]]:
        self._rngs = self.copy_rngs(seed, self.num_envs)   # unused: the game is deterministic
        self._round = 0
        self._last.fill(-1)
        self._rewards.fill(0.0)
        infos = {"action": self._last.copy(), "frozen": np.zeros_like(self._last)}
        return self._observe(), infos

    def step(self, actions: Any):
        a = self.check_actions(actions)
        if self._round is None:
            raise ActionError(f"{NAME}: step() called before reset()")
        if self._round >= self.max_cycles:
            raise ActionError(f"{NAME}: step() called after the episode ended (max_cycles = "
                              f"{self.max_cycles}); call reset()")
        n = self.num_agents
        cell = np.ravel_multi_index(a.T, (self.action_space.n,) * n)   # (B,) joint-action row
        rewards = self._flat[cell]                                      # (B, N) float32, a copy
        self._last = a.copy()
        self._rewards = rewards.copy()
        self._round += 1
        terminated, truncated = end_flags(self.params["horizon"], self._round >= self.max_cycles,
                                          (self.num_envs, n))
        infos = {"action": a.copy(), "frozen": np.zeros_like(a)}
        return self._observe(), rewards, terminated, truncated, infos

    def state(self) -> np.ndarray:
        return self._joint_one_hot()

    def _joint_one_hot(self) -> np.ndarray:
        """(B, N*A) uint8, 1 at agent i's previous action; zeros where there is none."""
        b, n = self._last.shape
        out = np.zeros((b, n * self.action_space.n), np.uint8)
        rows, cols = np.nonzero(self._last >= 0)
        out[rows, self._offset[cols] + self._last[rows, cols]] = 1
        return out

    def _observe(self) -> np.ndarray:
        return np.repeat(self._joint_one_hot()[:, None, :], self.num_agents, axis=1)

    # --- rendering ---------------------------------------------------------------------------------------

    def _check_index(self, index: int) -> int:
        integral = isinstance(index, (int, np.integer)) and not isinstance(index, bool)
        if not integral or not 0 <= index < self.num_envs:
            raise ParamError(f"{NAME}: render index = {index!r} is not allowed; expected an integer in "
                             f"[0, {self.num_envs - 1}]")
        return int(index)

    def render_rgb(self, index: int = 0) -> np.ndarray:
        """A board: one row per agent, one square per action (the chosen one lit), then a reward bar."""
        b = self._check_index(index)
        n, a = self.num_agents, self.action_space.n
        cell, gap, bar = 16, 4, 64
        height = gap + n * (cell + gap)
        width = gap + a * (cell + gap) + bar + gap
        img = np.empty((height, width, 3), np.uint8)
        img[:] = _BACKGROUND
        span = self._high - self._low
        for i in range(n):
            y = gap + i * (cell + gap)
            for k in range(a):
                x = gap + k * (cell + gap)
                lit = _ACTION_COLOURS[k % len(_ACTION_COLOURS)]
                colour = lit if self._last[b, i] == k else (0.3 * lit + 0.7 * _BACKGROUND)
                img[y:y + cell, x:x + cell] = colour.astype(np.uint8)
            x0 = gap + a * (cell + gap)
            img[y + 4:y + cell - 4, x0:x0 + bar] = _BAR_TRACK
            if self._last[b, i] >= 0:
                frac = 1.0 if span == 0 else (float(self._rewards[b, i]) - self._low) / span
                img[y + 4:y + cell - 4, x0:x0 + max(1, round(frac * bar))] = _BAR
        return img

    def render_ansi(self, index: int = 0) -> str:
        b = self._check_index(index)
        played = 0 if self._round is None else self._round
        lines = [f"{NAME} {self.params['game']}: round {played} of {self.max_cycles}"]
        width = max(len(s) for s in self.action_names)
        for i, agent in enumerate(self.possible_agents):
            k = int(self._last[b, i])
            if k < 0:
                lines.append(f"  {agent}: no action yet")
            else:
                lines.append(f"  {agent}: {self.action_names[k]:<{width}}  reward {self._rewards[b, i]:g}")
        if self.num_agents == 2:
            lines.append("  payoffs (agent_0, agent_1), * = last joint action:")
            texts = [[f"({p0:g}, {p1:g})" for p0, p1 in row] for row in self.payoff_table.tolist()]
            col = 2 + max(width, *(len(t) + 1 for row in texts for t in row))
            lines.append(" " * (width + 4) + "".join(f"{s:>{col}}" for s in self.action_names))
            for r, row_name in enumerate(self.action_names):
                cells = ["*" * ((int(self._last[b, 0]), int(self._last[b, 1])) == (r, c)) + t
                         for c, t in enumerate(texts[r])]
                lines.append(f"    {row_name:<{width}}" + "".join(f"{t:>{col}}" for t in cells))
        return "\n".join(lines)


# Colours of our own: a dark slate background, one lit colour per action, a pale reward bar.
_BACKGROUND = np.array([28, 30, 38], np.float64)
_ACTION_COLOURS = [np.array(c, np.float64) for c in
                   ((72, 190, 130), (232, 112, 64), (96, 146, 232), (214, 184, 64), (176, 104, 204))]
_BAR_TRACK = np.array([50, 54, 64], np.uint8)
_BAR = np.array([236, 236, 242], np.uint8)


class MatrixParallelEnv(GameParallelEnv):
    """PettingZoo ``ParallelEnv`` of a matrix game (one copy of :class:`MatrixGame`)."""

    metadata: ClassVar[dict[str, Any]] = {"name": NAME, "render_modes": ["rgb_array", "ansi"],
                                          "render_fps": 2}
    engine_class = MatrixGame


def parallel_env(render_mode: str | None = None, **params: Any) -> MatrixParallelEnv:
    """A PettingZoo ``ParallelEnv`` of the matrix game; ``params`` as in ``PARAMS``."""
    return MatrixParallelEnv(render_mode=render_mode, **params)


def env(render_mode: str | None = None, **params: Any):
    """The AEC version of :func:`parallel_env`, through PettingZoo's ``parallel_to_aec``."""
    from pettingzoo.utils.conversions import parallel_to_aec

    return parallel_to_aec(parallel_env(render_mode=render_mode, **params))


def vector_env(num_envs: int, **params: Any) -> MatrixGame:
    """A batched engine with ``num_envs`` copies stepped together."""
    return MatrixGame(num_envs=num_envs, **params)

