"""cleanup_v0 — a public good: a river that must be kept clean for the orchard to grow.

=====================  ===================================================================
Agents                 ``num_agents`` (default 5), ids ``agent_0`` ...
Observation            ``Box(0, 1, (9, 2r+1, 2r+1), uint8)``, r = ``view_radius`` (default 7)
Actions                ``Discrete(7)``: stay, up, down, left, right, tag, clean (``Discrete(6)`` untagged)
State                  ``Box(0, 1, (5 + 3N, H, W), uint8)`` (``(9, H, W)`` if anonymous)
=====================  ===================================================================

**Description.** Waste builds up on a river; the orchard, away from the river, grows resources only while
the river is clean enough. Cleaning pays nothing directly and takes an agent away from the orchard, so each
agent would rather the others clean: a public-goods dilemma (after Hughes et al. 2018, "Inequity aversion
improves cooperation in intertemporal social dilemmas"). Agents can also tag each other out for a while.

**Actions.** ``0`` stay, ``1`` up, ``2`` down, ``3`` left, ``4`` right (absolute moves; an agent faces the
way it last moved), ``5`` tag (absent when ``tagging`` is false; then clean is ``5``), ``6`` clean: a beam
``clean_length`` cells ahead and ``clean_width`` lanes wide that removes the waste it covers.

**Observation.** An egocentric window of uint8 0/1 channels, channels first, in the order of
``envs.grid.CHANNELS``: wall, resource, waste, river, orchard, others, self, ahead, frozen (see
``envs.grid``). With ``full_view`` it is the whole ``(9, H, W)`` map.

**State.** As in ``harvest_v0``: ``(5 + 3N, H, W)`` by default (the five map channels, then each
agent's position, ahead and frozen planes), ``(9, H, W)`` with ``state_layout="anonymous"``; the names are
``envs.grid.state_channels(N, state_layout)``.

**Rewards.** +1 per resource taken; cleaning earns nothing; ``-tag_cost`` per tag beam fired;
``-tagged_penalty`` when tagged.

**Dynamics** (each step, after moves and beams, in this order):

1. every clean river cell becomes polluted with probability ``pollution_rate``;
2. with w the polluted fraction of the river, every empty orchard cell with no agent on it grows a resource
   with probability ``growth_rate * max(0, 1 - w / pollution_cap)``: the full rate on a clean river, falling
   linearly to zero as the pollution reaches ``pollution_cap``, and nothing at all above the cap.

The idea of a river whose pollution starves an orchard is Hughes et al. 2018's public-goods game (docs/sources.md, "Cleanup"); this growth
rule, its three parameters and their defaults are our own. The defaults were chosen by play, not taken from
a source: an unattended river passes the cap after about 170 steps (1 - 0.996^173 = 0.50), a sixth of a
default episode; an emptied cell on a clean river regrows after 25 steps on average (1 / 0.04); and on the
small map with 3 agents and 500-step episodes, one scripted cleaner lifts the team's efficiency to about
2.6 times that of a team where nobody cleans (0.79 against 0.30, ``marl_core.baselines``).

**Starting state.** Resources on the ``+`` cells, waste on the ``w`` cells of the layout; agents at distinct
random spawn points, facing a random way.

**Episode end.** After ``max_cycles`` steps, for every agent at once, as ``horizon`` says: with
``"time_limit"`` (the default) every agent is truncated, the episode being cut by a time limit (learners
bootstrap past it); with ``"terminal"`` every agent is terminated, the last step being part of the game (no
bootstrap past it). Nothing ends the episode earlier. Agents do not observe the step count, so with
``"terminal"`` the problem is not Markov in the observation: the same window is seen with many steps left
and with none, and its value differs.

**Infos** (per agent, per step): ``resources_taken``, ``tags_fired``, ``times_tagged``, ``frozen``,
``waste_removed`` (waste cells its clean beam covered).

**Arguments** — the grid arguments of ``harvest_v0`` (layout default ``cleanup_small``), and:

=====================  =====  =======  ==========================================================
name                   type   default  meaning
=====================  =====  =======  ==========================================================
clean_length           int    5        clean beam reach in cells
clean_width            int    3        clean beam lanes (odd)
pollution_rate         float  0.004    chance per step that a clean river cell becomes polluted
growth_rate            float  0.04     orchard growth chance per empty cell while the river is clean
pollution_cap          float  0.5      polluted river fraction at and above which nothing grows (> 0)
=====================  =====  =======  ==========================================================

**Version history.** v0: first release. Later in v0: the ``horizon`` parameter (default ``"time_limit"``,
the behaviour of the first release: truncation at ``max_cycles``). Later in v0: the ``state_layout``
parameter, default ``"per_agent"``; the first release's ``state()`` is ``state_layout="anonymous"`` (first
spelled ``"shared"``, now refused naming the new word). Moves, observations, rewards and infos are unchanged
for the same seed; only ``state()`` (and ``state_space``) differ. Later in v0: the observation channel of
the other agents is named ``others`` (it was ``agents``, the word the anonymous state keeps for every
agent); the numbers are unchanged.
Later in v0: new bundled maps (a river winding between two orchards), and the growth rule above with its
parameters ``pollution_rate``, ``growth_rate`` and ``pollution_cap``, which replace the first release's
growth parameters (an old name is refused as unknown, with a note that parameters were renamed).
Episodes on the bundled maps differ from the first release's for the same seed.
"""

from __future__ import annotations

from typing import Any, ClassVar

import numpy as np
from pettingzoo.utils.conversions import parallel_to_aec

from envs.core import GameParallelEnv
from envs.errors import LayoutError
from envs.grid import _S_GROW, _S_WASTE, GridGame, _odd, grid_params
from envs.layouts import Layout
from envs.metrics import METRIC_NAMES
from envs.params import Param

__all__ = ["NAME", "PARAMS", "RENAMED_NOTE", "CleanupGame", "CleanupParallelEnv", "parallel_env", "env", "vector_env"]

NAME = "cleanup_v0"
#: the social outcome metrics that mean something here (envs.declared_metrics)
METRICS: tuple[str, ...] = METRIC_NAMES

PARAMS: list[Param] = grid_params("cleanup_small", [
    Param("clean_length", int, 5, "clean beam reach in cells", low=1, high=50),
    Param("clean_width", int, 3, "clean beam width in lanes (odd)", low=1, high=9, check=_odd),
    Param("pollution_rate", float, 0.004, "chance per step that a clean river cell becomes polluted",
          low=0.0, high=1.0),
    Param("growth_rate", float, 0.04, "orchard growth chance per empty cell while the river is clean",
          low=0.0, high=1.0),
    Param("pollution_cap", float, 0.5, "polluted river fraction at and above which nothing grows",
          low=0.0, high=1.0, check=lambda v: "a number in (0.0, 1.0]" if v <= 0 else None),
])

#: said beside an unknown parameter: the first release's growth parameters were renamed during v0
RENAMED_NOTE = "some cleanup_v0 parameters were renamed during v0; `marl-core envs` lists the current ones"


class CleanupGame(GridGame):
    """The batched cleanup engine (see the module docstring)."""

    name: ClassVar[str] = NAME
    PARAMS: ClassVar[list[Param]] = PARAMS
    RENAMED_NOTE: ClassVar[str | None] = RENAMED_NOTE
    has_clean_beam: ClassVar[bool] = True
    info_keys: ClassVar[tuple[str, ...]] = GridGame.info_keys + ("waste_removed",)

    def __init__(self, num_envs: int = 1, **params: Any):
        super().__init__(num_envs, **params)
        self.river = self.layout.river
        self.river_cells = int(self.river.sum())
        self._river_f, self._river_ctr = self._cells(self.river)

    def _check_layout(self, layout: Layout) -> None:
        for layer, what in ((layout.orchard, "orchard cells ('+' or '-')"), (layout.river, "river cells "
                                                                                           "('~' or 'w')")):
            if not layer.any():
                raise LayoutError(f"layout {layout.name}: cleanup needs {what}; found none")

    def waste_fraction(self) -> np.ndarray:
        """(B,) polluted fraction of the river in each copy."""
        return self.interior(self.waste).sum(axis=(1, 2)) / self.river_cells

    def growth_prob(self, fraction: np.ndarray) -> np.ndarray:
        """Orchard growth probability for a polluted river ``fraction`` (see the module docstring)."""
        p = self.params
        left = 1.0 - np.asarray(fraction, np.float64) / p["pollution_cap"]
        return p["growth_rate"] * np.clip(left, 0.0, 1.0)

    def _grow(self) -> None:
        B = self.num_envs
        waste_f = self.waste.reshape(B, -1)
        b, cell, u = self._draw(_S_WASTE, ~waste_f[:, self._river_f], self._river_f, self._river_ctr)
        keep = u < self.params["pollution_rate"]
        waste_f[b[keep], cell[keep]] = True
        prob = self.growth_prob(self.waste_fraction())
        b, cell, u = self._draw(_S_GROW, self._free_orchard() & (prob > 0)[:, None], self._orchard_f,
                                self._orchard_ctr)
        keep = u < prob[b]
        self.resource.reshape(B, -1)[b[keep], cell[keep]] = True


class CleanupParallelEnv(GameParallelEnv):
    """PettingZoo ``ParallelEnv`` of cleanup (one copy of :class:`CleanupGame`)."""

    metadata: ClassVar[dict[str, Any]] = {"name": NAME, "render_modes": ["rgb_array", "ansi"], "render_fps": 8}
    engine_class = CleanupGame


def parallel_env(render_mode: str | None = None, **params: Any) -> CleanupParallelEnv:
    """Cleanup as a PettingZoo ``ParallelEnv``."""
    return CleanupParallelEnv(render_mode=render_mode, **params)


def env(render_mode: str | None = None, **params: Any):
    """Cleanup as a PettingZoo AEC env (``parallel_to_aec`` of :func:`parallel_env`)."""
    return parallel_to_aec(parallel_env(render_mode=render_mode, **params))


def vector_env(num_envs: int, **params: Any) -> CleanupGame:
    """``num_envs`` copies of cleanup stepped together (see ``envs.core``)."""
    return CleanupGame(num_envs=num_envs, **params)
