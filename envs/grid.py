"""The batched grid engine shared by ``harvest_v0`` and ``cleanup_v0``.

B copies of a map with N agents each are held as arrays and advanced by one ``step(actions[B, N])`` made of
whole-array numpy operations; there is no Python loop over copies or agents on the step path. The games
differ only in how resources (and, for cleanup, waste) appear, which subclasses supply in :meth:`_grow`.

Observation channels (``CHANNELS``; every observation and ``state()`` is ``uint8`` 0/1, channels first
so a torch convolution takes it as it is):

=========  ============================================================================================
channel    set where
=========  ============================================================================================
wall       a wall, or a cell outside the map
resource   a resource stands
waste      waste lies on the river (cleanup)
river      a river cell (cleanup)
orchard    a cell where resources can grow (harvest patches, cleanup orchard)
others     another agent on the map (anonymous state: ``agents``, every agent on the map)
self       the observer's own cell (anonymous state: all zero)
ahead      the cell the observer faces, where its beams start (anonymous state: the cell ahead of every
           agent)
frozen     the whole window while the observer is frozen (anonymous state: the cell each frozen agent
           left)
=========  ============================================================================================

State channels (``state_channels(num_agents, layout)``; ``state()`` is ``(C, H, W)`` uint8 0/1 over the map,
no padding, and ``state_space`` is ``Box(0, 1, (C, H, W), uint8)``). The game parameter ``state_layout``
chooses between two layouts:

* ``"per_agent"`` (the default), ``C = 5 + 3N``: the five map channels that do not depend on agents (``wall``,
  ``resource``, ``waste``, ``river``, ``orchard``, as above; the map has no outside here), then three planes
  per agent, in agent order, so a centralised critic can tell agent i from agent j:

  ======================  ==============================================================================
  channel                 set where
  ======================  ==============================================================================
  ``agent_<i>.position``  agent i's cell; all zero while agent i is frozen (off the map)
  ``agent_<i>.ahead``     the cell agent i faces (where its beams start); zero while it is frozen, and
                          zero when that cell is outside the map
  ``agent_<i>.frozen``    while agent i is frozen, the cell it left when it was tagged; zero otherwise
  ======================  ==============================================================================

  Channel ``5 + 3 i + k`` is plane ``k`` (position, ahead, frozen) of agent ``i``.
* ``"anonymous"``, ``C = 9`` (``ANONYMOUS_STATE_CHANNELS``): the observation channels over the whole map,
  with ``agents`` (every agent) in place of ``others`` and one ``ahead`` / ``frozen`` channel for all
  agents (the "anonymous state" variants in the table above); agents cannot be told apart in it. (Before
  it was named ``"anonymous"`` this layout was ``"shared"``; that spelling is refused, naming the new one.)

Step order, for every copy at once:

1. Frozen agents sit out: their actions are ignored.
2. Moves: an agent that moves turns to face the direction it chose, even if the move is blocked. It enters
   the target cell only if the cell is no wall and was empty at the start of the step; when several agents
   want the same empty cell, one chosen at random (from the env's own seeded generator) gets it. So two
   agents never share a cell, and an agent cannot follow another into the cell it is leaving this step.
3. An agent standing on a resource takes it (+1).
4. Beams fire from the new positions, the way the agent faces: ``length`` cells ahead, ``width`` lanes
   (odd; centred on the agent's line), each lane stopped by the first wall. Beams pass through agents.
   A tag beam freezes every agent it hits: that agent leaves the map and sits out the next
   ``freeze_steps`` steps; the tagger pays ``tag_cost`` per beam fired, the victim ``tagged_penalty`` once.
   The clean beam (cleanup) removes the waste it covers.
5. Frozen agents whose time is up return at distinct random free spawn points (if too few are free,
   the ones left over wait a step).
6. The game grows resources / waste (see each game).
7. After ``max_cycles`` steps the episode ends for every agent at once: truncated with ``horizon =
   "time_limit"`` (the default: the episode is cut by a time limit, learners bootstrap past it), terminated
   with ``horizon = "terminal"`` (the last step is part of the game). Nothing ends earlier. Agents do not
   observe the step count, so with ``"terminal"`` the problem is not Markov in the observation: the same
   window can be seen with many steps left or with none, and its value differs.

Randomness during a step comes from a counter-based generator: a 64-bit key drawn at reset from the copy's
own seeded ``numpy`` generator, hashed with the step number and the cell or agent index (the SplitMix64
output function, Steele, Lea & Flood 2014). A copy's draws therefore do not depend on how many copies run
beside it, which is what makes copy ``b`` of a batch equal to a single env.
"""

from __future__ import annotations

from typing import Any, ClassVar

import numpy as np
from gymnasium import spaces
from numpy.lib.stride_tricks import sliding_window_view

from envs.core import TIME_LIMIT, BatchedGame, end_flags, horizon_param
from envs.errors import ParamError
from envs.layouts import Layout, layout_problem, load_layout
from envs.params import Param, resolve

__all__ = ["CHANNELS", "ANONYMOUS_STATE_CHANNELS", "MAP_CHANNELS", "AGENT_STATE_PLANES", "STATE_LAYOUTS", "MOVE_ACTIONS", "GridGame",
           "grid_params", "state_channels"]

CHANNELS: tuple[str, ...] = ("wall", "resource", "waste", "river", "orchard", "others", "self", "ahead",
                             "frozen")
MAP_CHANNELS: tuple[str, ...] = CHANNELS[:5]  # the channels that do not depend on agents
AGENT_STATE_PLANES: tuple[str, ...] = ("position", "ahead", "frozen")  # per agent, in the per_agent state
#: the anonymous state(): the observation channels over the map, every agent in ``agents``
ANONYMOUS_STATE_CHANNELS: tuple[str, ...] = (*MAP_CHANNELS, "agents", "self", "ahead", "frozen")
STATE_LAYOUTS: tuple[str, ...] = ("per_agent", "anonymous")
#: earlier spellings of state_layout values, refused with the new one
RENAMED_STATE_LAYOUTS: dict[str, str] = {"shared": "anonymous"}
MOVE_ACTIONS: tuple[str, ...] = ("stay", "up", "down", "left", "right")

# bit layout of the packed map: one uint8 per cell, one bit per map channel ("others" is the bit of every
# agent; _observe clears the observer's own cell from it)
_BIT = {"wall": 0, "resource": 1, "waste": 2, "river": 3, "orchard": 4, "others": 5}
_ZERO_BIT = 7  # never set; channels filled per observer read it and come out 0
_SHIFTS = np.array([_BIT.get(c, _ZERO_BIT) for c in CHANNELS], dtype=np.uint8)[:, None, None]  # (C, 1, 1)
_CH = {c: i for i, c in enumerate(CHANNELS)}

# (dy, dx) of up, down, left, right; a facing value indexes this table
_DIRS = np.array([[-1, 0], [1, 0], [0, -1], [0, 1]], dtype=np.int64)

# random streams of the counter-based generator
_S_MOVE, _S_RESPAWN, _S_GROW, _S_WASTE = range(4)
_N_STREAMS = 4
_GOLDEN = 0x9E3779B97F4A7C15
_MASK64 = (1 << 64) - 1
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)


def _mix(z: np.ndarray) -> np.ndarray:
    """SplitMix64 output function (Steele, Lea & Flood 2014) on a uint64 array."""
    z = (z ^ (z >> np.uint64(30))) * _M1
    z = (z ^ (z >> np.uint64(27))) * _M2
    return z ^ (z >> np.uint64(31))


def _counter(idx: np.ndarray) -> np.ndarray:
    """The index half of a draw's input, ``(idx + 1) * golden`` (uint64, wrapping): constant per index."""
    return (np.asarray(idx).astype(np.uint64) + np.uint64(1)) * np.uint64(_GOLDEN)


def _unit(z: np.ndarray) -> np.ndarray:
    """Uniform [0, 1) float64 from the top 53 bits of uint64 hashes."""
    return (z >> np.uint64(11)).astype(np.float64) * (1.0 / (1 << 53))


def state_channels(num_agents: int, layout: str = "per_agent") -> tuple[str, ...]:
    """Names of the ``state()`` channels, in order, for ``num_agents`` agents and a ``state_layout``
    (module docstring): ``("wall", ..., "orchard", "agent_0.position", "agent_0.ahead", "agent_0.frozen",
    "agent_1.position", ...)`` for ``"per_agent"``, ``ANONYMOUS_STATE_CHANNELS`` for ``"anonymous"``."""
    if layout == "anonymous":
        return ANONYMOUS_STATE_CHANNELS
    if layout != "per_agent":
        raise ParamError(f"state_channels: parameter 'state_layout' = {layout!r} is not allowed; expected one "
                         f"of {', '.join(repr(v) for v in STATE_LAYOUTS)}")
    return MAP_CHANNELS + tuple(f"agent_{i}.{k}" for i in range(num_agents) for k in AGENT_STATE_PLANES)


def _odd(v: int) -> str | None:
    return None if v % 2 == 1 else "an odd integer (lanes centred on the agent's line)"


def grid_params(layout: str, extra: list[Param]) -> list[Param]:
    """Parameters shared by the grid games, then the game's own ``extra`` ones."""
    return [
        Param("layout", str, layout, "bundled layout name or path of a layout file", check=layout_problem),
        Param("num_agents", int, 5, "number of agents (1 up to the layout's spawn points)", low=1, high=10),
        Param("max_cycles", int, 1000, "steps per episode; then the episode ends for every agent (horizon)",
              low=1),
        horizon_param(TIME_LIMIT),
        Param("view_radius", int, 7, "observation window is (2r+1) x (2r+1) around the agent", low=1),
        Param("full_view", bool, False, "observe the whole map (H x W, not egocentric) instead of a window"),
        Param("tagging", bool, True, "agents have a tag action"),
        Param("tag_length", int, 5, "tag beam reach in cells", low=1, high=50),
        Param("tag_width", int, 1, "tag beam width in lanes (odd)", low=1, high=9, check=_odd),
        Param("tag_cost", float, 0.0, "reward paid by the tagger per tag beam fired", low=0.0),
        Param("tagged_penalty", float, 0.0, "reward lost by an agent when it is tagged", low=0.0),
        Param("freeze_steps", int, 25, "steps a tagged agent sits out, off the map", low=0),
        Param("state_layout", str, "per_agent", "what state() returns: 'per_agent' (the map, then position, "
              "ahead and frozen planes for each agent) or 'anonymous' (the observation channels, agents not told "
              "apart)", choices=STATE_LAYOUTS, renamed=RENAMED_STATE_LAYOUTS),
        *extra,
    ]


class GridGame(BatchedGame):
    """Batched grid world; ``harvest_v0`` and ``cleanup_v0`` subclass it.

    Shape:
        actions: (B, N) int in [0, A)
        obs: (B, N, C, 2r+1, 2r+1) uint8 (``full_view``: (B, N, C, H, W)), C = len(CHANNELS)
        rewards: (B, N) float32;  terminated, truncated: (B, N) bool
        infos: dict of (B, N) int64 event counts of the step (``info_keys``)
        state(): (B, S, H, W) uint8, S = len(self.state_channels): 5 + 3N (``state_layout="per_agent"``) or
            len(CHANNELS) (``"anonymous"``)
    """

    PARAMS: ClassVar[list[Param]] = []
    # said beside an unknown parameter when a game renamed some of its parameters (None: nothing)
    RENAMED_NOTE: ClassVar[str | None] = None
    has_clean_beam: ClassVar[bool] = False
    info_keys: ClassVar[tuple[str, ...]] = ("resources_taken", "tags_fired", "times_tagged", "frozen")

    def __init__(self, num_envs: int = 1, **params: Any):
        self.num_envs = B = self.check_num_envs(self.name, num_envs)
        try:
            p = self.params = resolve(self.name, self.PARAMS, params)
        except ParamError as err:
            if self.RENAMED_NOTE and "unknown parameter" in str(err):
                raise ParamError(f"{err}; {self.RENAMED_NOTE}") from None
            raise
        self.layout: Layout = load_layout(p["layout"])
        self._check_layout(self.layout)
        H, W = self.layout.shape
        S = len(self.layout.spawn)
        N = p["num_agents"]
        if N > S:
            raise ParamError(f"{self.name}: parameter 'num_agents' = {N} is not allowed; layout "
                             f"'{p['layout']}' has {S} spawn points, so expected 1..{S}")
        r = p["view_radius"]
        if not p["full_view"] and r > max(H, W):
            raise ParamError(f"{self.name}: parameter 'view_radius' = {r} is not allowed; expected 1.."
                             f"{max(H, W)} (the larger side of layout '{p['layout']}'), or full_view")
        self.possible_agents = [f"agent_{i}" for i in range(N)]
        self.max_cycles = p["max_cycles"]
        names = list(MOVE_ACTIONS)
        self.tag_action = len(names) if p["tagging"] else -1
        if p["tagging"]:
            names.append("tag")
        self.clean_action = len(names) if self.has_clean_beam else -1
        if self.has_clean_beam:
            names.append("clean")
        self.action_names = tuple(names)
        self.action_space = spaces.Discrete(len(names))

        # geometry: every map layer is padded by P wall cells so windows and beams never leave the array
        beams = [(p["tag_length"], p["tag_width"])]
        if self.has_clean_beam:
            beams.append((p["clean_length"], p["clean_width"]))
        reach = [0 if p["full_view"] else r, self._reach(p)] + [max(n, w // 2) for n, w in beams]
        self.P = P = max(reach) + 1
        self.H, self.W, self.Hp, self.Wp = H, W, H + 2 * P, W + 2 * P
        self.k = (H, W) if p["full_view"] else (2 * r + 1, 2 * r + 1)
        C = len(CHANNELS)
        self.observation_space = spaces.Box(0, 1, (C, *self.k), np.uint8)
        self.state_channels = state_channels(N, p["state_layout"])
        self.state_space = spaces.Box(0, 1, (len(self.state_channels), H, W), np.uint8)

        def pad(a: np.ndarray, fill: bool = False) -> np.ndarray:
            return np.pad(a, P, constant_values=fill)

        self.wall_f = pad(self.layout.wall, True).ravel()
        self.orchard = self.layout.orchard
        static = (pad(self.layout.wall, True).astype(np.uint8) << _BIT["wall"]
                  | pad(self.layout.river).astype(np.uint8) << _BIT["river"]
                  | pad(self.layout.orchard).astype(np.uint8) << _BIT["orchard"])
        self._static_bits = static
        self.spawn_f = (self.layout.spawn[:, 0] + P) * self.Wp + self.layout.spawn[:, 1] + P  # (S,)
        self._dir_f = _DIRS[:, 0] * self.Wp + _DIRS[:, 1]  # flat step of each direction
        self._beam_tag = self._beam_offsets(*beams[0])
        self._beam_clean = self._beam_offsets(*beams[1]) if self.has_clean_beam else None
        # (channel, bit) of the map channels some cell can show; the others are zero in every observation
        can = {_BIT["resource"], _BIT["others"]} | ({_BIT["waste"]} if self.has_clean_beam else set())
        can |= {i for i in range(8) if (static >> i & 1).any()}
        self._obs_bits = [(c, int(s)) for c, s in enumerate(_SHIFTS.ravel()) if s in can]

        # dynamic state, all padded and flat-indexable: cell = (y + P) * Wp + (x + P)
        self._bi = np.arange(B)[:, None]
        self.cell = np.zeros((B, N), np.int64)
        self.facing = np.zeros((B, N), np.int64)
        self.out = np.zeros((B, N), bool)
        self.frozen_left = np.zeros((B, N), np.int64)
        self.resource = np.zeros((B, self.Hp, self.Wp), bool)
        self.waste = np.zeros((B, self.Hp, self.Wp), bool)
        self.key = np.zeros(B, np.uint64)
        self.t = 0
        self._occ = np.zeros((B, self.Hp * self.Wp), np.int8)  # agent index + 1, 0 = empty
        self._bits = np.zeros((B, self.Hp, self.Wp), np.uint8)
        self._windows = sliding_window_view(self._bits, self.k, axis=(1, 2))
        self._orchard_f, self._orchard_ctr = self._cells(self.orchard)  # (K,), (K,)
        self._bits_tmp = np.zeros_like(self._bits)
        self._cell_base = np.arange(B)[:, None] * (self.Hp * self.Wp)  # (B, 1) flat start of each copy
        self._agent_ids = np.broadcast_to(np.arange(1, N + 1, dtype=np.int8), (B, N))
        self._rngs: list[np.random.Generator] | None = None
        self._keys_t: tuple[int, np.ndarray] | None = None  # (step, _stream_keys()) cache
        self._ctr_move = _counter(np.arange(N))  # (N,) draw counters of the agents
        self._ctr_respawn = _counter(np.arange(N + S))  # (N + S,) agents, then spawn points
        self.last_beams: list[tuple[str, np.ndarray, np.ndarray, np.ndarray]] = []  # kind, copy, cells, reach

    # ------------------------------------------------------------------ set-up helpers
    def _check_layout(self, layout: Layout) -> None:
        """Games reject layouts that lack what they need."""

    def _reach(self, params: dict[str, Any]) -> int:
        """How far (in cells) the game's own rules look around a cell; the padding covers it."""
        return 0

    def _beam_offsets(self, length: int, width: int) -> np.ndarray:
        """(4, length, width) flat offsets of the beam cells for each facing."""
        out = np.zeros((4, length, width), np.int64)
        for f, (dy, dx) in enumerate(_DIRS):
            sy, sx = dx, -dy  # a perpendicular
            for i in range(length):
                for j in range(width):
                    s = j - width // 2
                    out[f, i, j] = ((i + 1) * dy + s * sy) * self.Wp + (i + 1) * dx + s * sx
        return out

    # ------------------------------------------------------------------ randomness
    def _stream_keys(self) -> np.ndarray:
        """(B, streams) uint64 key of every copy and stream for this step; made once per step (reset clears
        the cache, as the keys change there)."""
        if self._keys_t is None or self._keys_t[0] != self.t:
            salt = [((self.t * _N_STREAMS + s + 1) * _GOLDEN) & _MASK64 for s in range(_N_STREAMS)]
            self._keys_t = (self.t, _mix(self.key[:, None] + np.array(salt, np.uint64)))
        return self._keys_t[1]

    def _uniform(self, stream: int, b: np.ndarray, idx: np.ndarray) -> np.ndarray:
        """Uniform [0, 1) draws for copies ``b`` at indices ``idx`` (same shape), this step, this stream."""
        return self._uniform_ctr(stream, b, _counter(idx))

    def _uniform_ctr(self, stream: int, b: np.ndarray | None, ctr: np.ndarray) -> np.ndarray:
        """:meth:`_uniform` with the index half given as ``ctr = _counter(idx)``. ``b=None`` draws for every
        copy: the result is ``(B, *ctr.shape)``."""
        keys = self._stream_keys()[:, stream]
        base = keys.reshape((-1,) + (1,) * ctr.ndim) if b is None else keys[b]
        return _unit(_mix(base + ctr))

    # ------------------------------------------------------------------ reset
    def reset(self, seed: int | None = None):
        if seed is not None or self._rngs is None:
            self._rngs = self.copy_rngs(seed, self.num_envs)
        N, S = self.num_agents, len(self.layout.spawn)
        for b, g in enumerate(self._rngs):  # reset only; the step path has no loop over copies
            self.key[b] = g.integers(0, 2**64 - 1, dtype=np.uint64, endpoint=True)
            self.cell[b] = self.spawn_f[g.permutation(S)[:N]]
            self.facing[b] = g.integers(0, 4, N)
        P, H, W = self.P, self.H, self.W
        self.resource[:] = False
        self.resource[:, P:P + H, P:P + W] = self.layout.resource
        self.waste[:] = False
        self.waste[:, P:P + H, P:P + W] = self.layout.waste
        self.out[:] = False
        self.frozen_left[:] = 0
        self.t = 0
        self._keys_t = None  # the keys changed
        self.last_beams = []
        self._place_agents()
        zeros = np.zeros((self.num_envs, N), np.int64)
        return self._observe(), {k: zeros for k in self.info_keys}

    # ------------------------------------------------------------------ step
    def step(self, actions: Any):
        a = self.check_actions(actions)
        B, N = a.shape
        bi = self._bi
        was_out = self.out.copy()
        active = ~was_out
        rewards = np.zeros((B, N), np.float32)

        # 2. moves
        moving = active & (a >= 1) & (a <= 4)
        d = np.where(moving, a - 1, 0)
        self.facing = np.where(moving, d, self.facing)
        target = self.cell + np.where(moving, self._dir_f[d], 0)
        free = ~self.wall_f[target] & (self._occ[bi, target] == 0)
        want = moving & free
        if want.any():
            # draw priorities only if two agents want one cell: draws are counter-based, so a draw not
            # made changes no other draw
            same = (target[:, :, None] == target[:, None, :]) & want[:, None, :] & want[:, :, None]
            won = want
            if np.count_nonzero(same) > np.count_nonzero(want):  # more than the diagonal
                prio = self._uniform_ctr(_S_MOVE, None, self._ctr_move)
                won = want & ~(same & (prio[:, None, :] > prio[:, :, None])).any(axis=2)
            self.cell = np.where(won, target, self.cell)
            self._place_agents()

        # 3. resources taken
        res_f = self.resource.reshape(B, -1)
        took = active & res_f[bi, self.cell]
        tb, tn = np.nonzero(took)
        res_f[tb, self.cell[tb, tn]] = False
        rewards += took

        # 4. beams
        self.last_beams = []
        tags_fired = np.zeros((B, N), np.int64)
        times_tagged = np.zeros((B, N), np.int64)
        if self.tag_action >= 0:
            fire = active & (a == self.tag_action)
            if fire.any():
                fb, fn, cells, reach = self._beam(fire, self._beam_tag)
                victims = self._occ[fb[:, None, None], cells] * reach  # agent index + 1, 0 = none
                hits = np.bincount((fb[:, None, None] * (N + 1) + victims).ravel(), minlength=B * (N + 1))
                times_tagged = hits.reshape(B, N + 1)[:, 1:].astype(np.int64)
                tagged = times_tagged > 0
                tags_fired = fire.astype(np.int64)
                rewards -= np.float32(self.params["tag_cost"]) * fire
                rewards -= np.float32(self.params["tagged_penalty"]) * tagged
                self.out |= tagged
                self.frozen_left = np.where(tagged, self.params["freeze_steps"], self.frozen_left)
                self.last_beams.append(("tag", fb, cells, reach))
        waste_removed = None
        if self.clean_action >= 0:
            waste_removed = np.zeros((B, N), np.int64)
            fire = active & (a == self.clean_action)
            if fire.any():
                fb, fn, cells, reach = self._beam(fire, self._beam_clean)
                wf = self.waste.reshape(B, -1)
                hit = wf[fb[:, None, None], cells] & reach
                waste_removed[fb, fn] = hit.sum(axis=(1, 2))
                k, i, j = np.nonzero(hit)
                wf[fb[k], cells[k, i, j]] = False
                self.last_beams.append(("clean", fb, cells, reach))

        # 5. frozen agents count down and return
        self.frozen_left -= was_out & (self.frozen_left > 0)
        if self.out.any():
            self._place_agents()
            self._respawn(self.out & (self.frozen_left == 0))

        # 6. growth
        self._grow()

        # 7. time
        self.t += 1
        term, trunc = end_flags(self.params["horizon"], self.t >= self.max_cycles, (B, N))
        infos = {"resources_taken": took.astype(np.int64), "tags_fired": tags_fired,
                 "times_tagged": times_tagged, "frozen": was_out.astype(np.int64)}
        if waste_removed is not None:
            infos["waste_removed"] = waste_removed
        return self._observe(), rewards, term, trunc, infos

    def _beam(self, fire: np.ndarray, offsets: np.ndarray):
        """Cells ``(K, L, w)`` and wall-stopped reach of the beams fired by the ``K`` agents in ``fire``."""
        fb, fn = np.nonzero(fire)
        cells = self.cell[fb, fn][:, None, None] + offsets[self.facing[fb, fn]]
        reach = np.logical_and.accumulate(~self.wall_f[cells], axis=1)
        return fb, fn, cells, reach

    def _place_agents(self) -> None:
        """Rebuild the occupancy map from the agents on the map."""
        self._occ.fill(0)
        live = ~self.out
        self._occ.reshape(-1)[(self._cell_base + self.cell)[live]] = self._agent_ids[live]

    def _respawn(self, waiting: np.ndarray) -> None:
        """Put ``waiting`` agents back at distinct random free spawn points; if too few are free, the agents
        left over wait a step. The waiting agents are put in a random order and the free spawn points in
        another; the k-th agent takes the k-th point."""
        if not waiting.any():
            return
        B, N = waiting.shape
        S = len(self.spawn_f)
        bi = self._bi
        u = self._uniform_ctr(_S_RESPAWN, None, self._ctr_respawn)  # (B, N + S)
        u_agent, u_spawn = u[:, :N], u[:, N:]
        taken = self._occ[:, self.spawn_f] != 0  # (B, S)
        rank = np.argsort(np.argsort(np.where(waiting, u_agent, 2.0), axis=1), axis=1)  # waiting agents first
        free_first = np.argsort(np.where(taken, 2.0, u_spawn), axis=1)
        ok = waiting & (rank < (~taken).sum(axis=1, keepdims=True))
        chosen = free_first[bi, np.minimum(rank, S - 1)]
        self.cell = np.where(ok, self.spawn_f[chosen], self.cell)
        self.out &= ~ok
        self._place_agents()

    def _grow(self) -> None:
        """Resources (and waste) appear; each game implements its rule."""
        raise NotImplementedError

    def _cells(self, layer: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Padded flat index and draw counter of the True cells of an (H, W) layer, in row-major order."""
        y, x = np.nonzero(layer)
        return (y + self.P) * self.Wp + x + self.P, _counter(y * self.W + x)

    def _free_orchard(self) -> np.ndarray:
        """(B, K) whether each orchard cell (``self._orchard_f``) has no resource and no agent on it."""
        cells = self._orchard_f
        return ~self.resource.reshape(self.num_envs, -1)[:, cells] & (self._occ[:, cells] == 0)

    def _draw(self, stream: int, cand: np.ndarray, cells: np.ndarray,
              ctr: np.ndarray) -> tuple[np.ndarray, ...]:
        """Copy, padded flat cell and a uniform draw for every True entry of ``cand`` (B, K), a mask over the
        K listed ``cells`` with draw counters ``ctr`` (see :meth:`_cells`). Listing the few cells where a
        rule can act, rather than scanning the map, is what keeps growth cheap."""
        b, j = np.nonzero(cand)
        return b, cells[j], self._uniform_ctr(stream, b, ctr[j])

    # ------------------------------------------------------------------ observation
    def _pack(self) -> np.ndarray:
        """Refresh the packed map (one bit per map channel) of every copy and return it."""
        bits = self._bits
        # x * 2**k rather than x << k: the same bits, but numpy vectorises uint8 products, not left shifts
        np.multiply(self.resource.view(np.uint8), np.uint8(1 << _BIT["resource"]), out=bits)
        bits |= self._static_bits
        if self.has_clean_beam:
            bits |= np.multiply(self.waste.view(np.uint8), np.uint8(1 << _BIT["waste"]), out=self._bits_tmp)
        bits.reshape(-1)[(self._cell_base + self.cell)[~self.out]] |= np.uint8(1 << _BIT["others"])
        return bits

    def _observe(self) -> np.ndarray:
        bits = self._pack()
        B, N = self.cell.shape
        P, bi = self.P, self._bi
        y, x = np.divmod(self.cell, self.Wp)
        full = self.params["full_view"]
        if full:
            win = np.broadcast_to(bits[:, None, P:P + self.H, P:P + self.W], (B, N, self.H, self.W))
        else:
            r = self.params["view_radius"]
            win = self._windows[bi, y - r, x - r]
        # one channel at a time (broadcasting the shift over a channel axis is several times slower);
        # channels that no cell can show stay zero
        C, (kh, kw) = len(CHANNELS), self.k
        obs = np.zeros((B, N, C, kh, kw), np.uint8)
        for c, s in self._obs_bits:
            np.bitwise_and(win >> np.uint8(s), np.uint8(1), out=obs[:, :, c])
        # the observer's own channels, written through flat indices: row = b * N + n of each agent on the map
        live = ~self.out
        rows = np.flatnonzero(live)
        if full:
            cy, cx = y.reshape(-1)[rows] - P, x.reshape(-1)[rows] - P
        else:
            cy = cx = r
        f = self.facing.reshape(-1)[rows]
        ay, ax = cy + _DIRS[f, 0], cx + _DIRS[f, 1]
        flat, K = obs.reshape(-1), kh * kw
        at = rows * (C * K) + cy * kw + cx
        flat[at + _CH["others"] * K] = 0
        flat[at + _CH["self"] * K] = 1
        ahead = rows * (C * K) + _CH["ahead"] * K + ay * kw + ax
        if full:  # a window always holds the cell ahead; the bare map may not
            ahead = ahead[(ay >= 0) & (ay < self.H) & (ax >= 0) & (ax < self.W)]
        flat[ahead] = 1
        if not live.all():
            obs.reshape(B * N, C, K)[np.flatnonzero(self.out), _CH["frozen"]] = 1
        return obs

    def state(self) -> np.ndarray:
        """(B, S, H, W) uint8: the whole map in ``self.state_channels`` (``state_layout``, module docstring)."""
        if self.params["state_layout"] == "anonymous":
            return self._anonymous_state()
        P, H, W = self.P, self.H, self.W
        B, N = self.cell.shape
        M = len(MAP_CHANNELS)
        out = np.zeros((B, M + 3 * N, H, W), np.uint8)
        bits = self._pack()[:, P:P + H, P:P + W]
        for c in range(M):  # one channel at a time, as in _observe
            np.bitwise_and(bits >> _SHIFTS[c, 0, 0], np.uint8(1), out=out[:, c])
        y, x = np.divmod(self.cell, self.Wp)
        y, x = y - P, x - P
        ab, an = np.nonzero(~self.out)
        out[ab, M + 3 * an, y[ab, an], x[ab, an]] = 1
        f = self.facing[ab, an]
        ay, ax = y[ab, an] + _DIRS[f, 0], x[ab, an] + _DIRS[f, 1]
        inside = (ay >= 0) & (ay < H) & (ax >= 0) & (ax < W)
        out[ab[inside], M + 3 * an[inside] + 1, ay[inside], ax[inside]] = 1
        fb, fn = np.nonzero(self.out)
        out[fb, M + 3 * fn + 2, y[fb, fn], x[fb, fn]] = 1
        return out

    def _anonymous_state(self) -> np.ndarray:
        """(B, C, H, W) uint8: the whole map in ``ANONYMOUS_STATE_CHANNELS`` (``state_layout="anonymous"``)."""
        P, H, W = self.P, self.H, self.W
        out = (self._pack()[:, None, P:P + H, P:P + W] >> _SHIFTS) & np.uint8(1)
        y, x = np.divmod(self.cell, self.Wp)
        ab, an = np.nonzero(~self.out)
        f = self.facing[ab, an]
        ay, ax = y[ab, an] + _DIRS[f, 0] - P, x[ab, an] + _DIRS[f, 1] - P
        inside = (ay >= 0) & (ay < H) & (ax >= 0) & (ax < W)
        out[ab[inside], _CH["ahead"], ay[inside], ax[inside]] = 1
        fb, fn = np.nonzero(self.out)
        out[fb, _CH["frozen"], y[fb, fn] - P, x[fb, fn] - P] = 1
        return out

    # ------------------------------------------------------------------ rendering
    def render_rgb(self, index: int = 0) -> np.ndarray:
        from envs.render import grid_frame

        return grid_frame(self, index)

    def render_ansi(self, index: int = 0) -> str:
        from envs.render import grid_text

        return grid_text(self, index)

    def agent_positions(self, index: int = 0) -> np.ndarray:
        """(N, 2) row/column of each agent in copy ``index`` (frozen agents: where they left the map)."""
        y, x = np.divmod(self.cell[index], self.Wp)
        return np.stack([y - self.P, x - self.P], axis=1)

    def interior(self, layer: np.ndarray) -> np.ndarray:
        """The (B, H, W) unpadded part of a padded (B, Hp, Wp) layer."""
        P = self.P
        return layer[:, P:P + self.H, P:P + self.W]
