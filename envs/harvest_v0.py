"""harvest_v0 — a commons that regrows only where it is not stripped bare.

=====================  ===================================================================
Agents                 ``num_agents`` (default 5), ids ``agent_0`` ...
Observation            ``Box(0, 1, (9, 2r+1, 2r+1), uint8)``, r = ``view_radius`` (default 7)
Actions                ``Discrete(6)``: stay, up, down, left, right, tag (``Discrete(5)`` untagged)
State                  ``Box(0, 1, (5 + 3N, H, W), uint8)`` (``(9, H, W)`` if anonymous)
=====================  ===================================================================

**Description.** Agents roam a map with patches of orchard cells. A resource taken leaves its cell empty; an
empty cell regrows a resource with a probability that depends on how many resources stand within
``regrow_radius`` of it. A patch stripped bare never grows back, so a team that takes everything at once
ends up with nothing: the tragedy of the commons (after Perolat et al. 2017, "A multi-agent reinforcement
learning model of common-pool resource appropriation"). Agents can tag each other out of the game for a while.

**Actions.** ``0`` stay, ``1`` up, ``2`` down, ``3`` left, ``4`` right (absolute moves; an agent faces the
way it last moved), ``5`` tag (a beam ``tag_length`` cells ahead and ``tag_width`` lanes wide; absent when
``tagging`` is false).

**Observation.** An egocentric window of uint8 0/1 channels, channels first, in the order of
``envs.grid.CHANNELS``: wall, resource, waste (always 0 here), river (always 0), orchard, others, self, ahead,
frozen (see ``envs.grid`` for each). Cells outside the map read as walls. With ``full_view`` the observation
is the whole ``(9, H, W)`` map instead.

**State.** ``state()`` is the whole map for a centralised critic, in the channels
``envs.grid.state_channels(N, state_layout)``: by default (``state_layout="per_agent"``) wall, resource,
waste, river, orchard, then for each agent i its position, the cell it faces (``ahead``) and, while it
is frozen, the cell it left (``frozen``), ``(5 + 3N, H, W)``; with ``"anonymous"`` 9 channels like the
observation's, with every agent in one ``agents`` channel, so agents cannot be told apart (see ``envs.grid``).

**Rewards.** +1 per resource taken; ``-tag_cost`` per tag beam fired; ``-tagged_penalty`` when tagged.

**Regrowth.** Each step, an empty orchard cell with no agent on it regrows with probability
``regrow_table[min(n, len(regrow_table) - 1)]``, where n is the number of resources within Euclidean
distance ``regrow_radius`` (the cell itself excluded). The defaults follow Perolat et al. 2017 (docs/sources.md, "Harvest regrowth"; from memory:
0 with no resource near, 0.01 with 1–2, 0.05 with 3–4, 0.1 with 5 or more, radius 2).

**Starting state.** Resources on every ``+`` cell of the layout; agents at distinct random spawn points,
facing a random way.

**Episode end.** After ``max_cycles`` steps, for every agent at once, as ``horizon`` says: with
``"time_limit"`` (the default) every agent is truncated, the episode being cut by a time limit (learners
bootstrap past it); with ``"terminal"`` every agent is terminated, the last step being part of the game (no
bootstrap past it). Nothing ends the episode earlier. Agents do not observe the step count, so with
``"terminal"`` the problem is not Markov in the observation: the same window is seen with many steps left
and with none, and its value differs.

**Infos** (per agent, per step): ``resources_taken``, ``tags_fired``, ``times_tagged`` (beams that hit it),
``frozen`` (1 if it sat out this step).

**Arguments**

=================  =====  ===================  =====================================================
name               type   default              meaning
=================  =====  ===================  =====================================================
layout             str    ``harvest_small``    bundled layout name or path of a layout file
num_agents         int    5                    1 up to the layout's spawn points (at most 10)
max_cycles         int    1000                 steps per episode
horizon            str    ``"time_limit"``     end at max_cycles: ``"time_limit"`` (truncated) or
                                               ``"terminal"`` (terminated)
view_radius        int    7                    window radius r, 1 .. max(H, W)
full_view          bool   False                observe the whole map instead of a window
tagging            bool   True                 agents have a tag action
tag_length         int    5                    tag beam reach in cells
tag_width          int    1                    tag beam lanes (odd)
tag_cost           float  0.0                  paid by the tagger per beam
tagged_penalty     float  0.0                  paid by the tagged agent
freeze_steps       int    25                   steps a tagged agent sits out
state_layout       str    ``"per_agent"``      what ``state()`` returns: ``"per_agent"`` (map, then
                                               planes per agent) or ``"anonymous"`` (agents not
                                               told apart)
regrow_radius      int    2                    radius of the neighbourhood counted for regrowth
regrow_table       list   0,.01,.01,.05,.05,.1 regrowth probability by neighbour count (last: and more)
regrow_scale       float  1.0                  multiplies every ``regrow_table`` entry, each product clipped
                                               to [0, 1]: one knob for scarcity (< 1) or abundance (> 1)
=================  =====  ===================  =====================================================

**Version history.** v0: first release. Later in v0: the ``horizon`` parameter (default ``"time_limit"``,
the behaviour of the first release: truncation at ``max_cycles``). Later in v0: the ``state_layout``
parameter, default ``"per_agent"``; the first release's ``state()`` is ``state_layout="anonymous"`` (first
spelled ``"shared"``, now refused naming the new word). Moves, observations, rewards and infos are unchanged
for the same seed; only ``state()`` (and ``state_space``) differ. Later in v0: the observation channel of
the other agents is named ``others`` (it was ``agents``, the word the anonymous state keeps for every
agent); the numbers are unchanged.
Later in v0: new bundled maps, with patches of many sizes and shapes; episodes on them differ from the first
release's for the same seed. The rules are unchanged. Later in v0: ``regrow_scale`` (default 1.0, the
table as given: episodes unchanged for the same seed).
"""

from __future__ import annotations

from typing import Any, ClassVar

import numpy as np
from pettingzoo.utils.conversions import parallel_to_aec

from envs.core import GameParallelEnv
from envs.errors import LayoutError
from envs.grid import _S_GROW, GridGame, grid_params
from envs.layouts import Layout
from envs.metrics import METRIC_NAMES
from envs.params import Param

__all__ = ["NAME", "PARAMS", "HarvestGame", "HarvestParallelEnv", "parallel_env", "env", "vector_env"]

NAME = "harvest_v0"
#: the social outcome metrics that mean something here (envs.declared_metrics)
METRICS: tuple[str, ...] = METRIC_NAMES

PARAMS: list[Param] = grid_params("harvest_small", [
    Param("regrow_radius", int, 2, "radius (Euclidean) of the neighbourhood counted for regrowth",
          low=1, high=10),
    Param("regrow_table", list, [0.0, 0.01, 0.01, 0.05, 0.05, 0.1],
          "regrowth probability indexed by resources within the radius (the last entry: that many or more)",
          low=0.0, high=1.0),
    Param("regrow_scale", float, 1.0, "multiplies every regrow_table entry (each product clipped to [0, 1]): "
          "the scarcity knob, below 1 scarcer, above 1 more abundant", low=0.0, high=1000.0),
])


class HarvestGame(GridGame):
    """The batched harvest engine (see the module docstring)."""

    name: ClassVar[str] = NAME
    PARAMS: ClassVar[list[Param]] = PARAMS

    def __init__(self, num_envs: int = 1, **params: Any):
        super().__init__(num_envs, **params)
        R = self.params["regrow_radius"]
        offs = [(dy, dx) for dy in range(-R, R + 1) for dx in range(-R, R + 1)
                if 0 < dy * dy + dx * dx <= R * R]
        self._near_f = np.array([dy * self.Wp + dx for dy, dx in offs], np.int64)
        table = np.array(self.params["regrow_table"], np.float64) * self.params["regrow_scale"]
        self._table = np.clip(table, 0.0, 1.0)

    def _check_layout(self, layout: Layout) -> None:
        if not layout.orchard.any():
            raise LayoutError(f"layout {layout.name}: harvest needs orchard cells ('+' or '-'); found none")
        if layout.river.any():
            y, x = np.argwhere(layout.river)[0]
            raise LayoutError(f"layout {layout.name}: harvest has no river, but the layout has river cells "
                              f"('~' or 'w'), the first at row {y + 1}, column {x + 1}; use '.' instead")

    def _reach(self, params: dict[str, Any]) -> int:
        return params["regrow_radius"]

    def _grow(self) -> None:
        b, cell, u = self._draw(_S_GROW, self._free_orchard(), self._orchard_f, self._orchard_ctr)
        if b.size == 0:
            return
        res_f = self.resource.reshape(self.num_envs, -1)
        # laid out (offsets, cells) so the count runs down the first axis: 3x faster than (cells, offsets)
        near = res_f.reshape(-1)[self._near_f[:, None] + (b * res_f.shape[1] + cell)].sum(axis=0)
        grow = u < self._table[np.minimum(near, len(self._table) - 1)]
        res_f[b[grow], cell[grow]] = True


class HarvestParallelEnv(GameParallelEnv):
    """PettingZoo ``ParallelEnv`` of harvest (one copy of :class:`HarvestGame`)."""

    metadata: ClassVar[dict[str, Any]] = {"name": NAME, "render_modes": ["rgb_array", "ansi"], "render_fps": 8}
    engine_class = HarvestGame


def parallel_env(render_mode: str | None = None, **params: Any) -> HarvestParallelEnv:
    """Harvest as a PettingZoo ``ParallelEnv``."""
    return HarvestParallelEnv(render_mode=render_mode, **params)


def env(render_mode: str | None = None, **params: Any):
    """Harvest as a PettingZoo AEC env (``parallel_to_aec`` of :func:`parallel_env`)."""
    return parallel_to_aec(parallel_env(render_mode=render_mode, **params))


def vector_env(num_envs: int, **params: Any) -> HarvestGame:
    """``num_envs`` copies of harvest stepped together (see ``envs.core``)."""
    return HarvestGame(num_envs=num_envs, **params)
