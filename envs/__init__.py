"""The games: social-dilemma grid worlds and matrix games on one batched numpy engine.

Every game is a versioned module with PettingZoo-style factories::

    import envs
    par = envs.harvest_v0.parallel_env(num_agents=3)     # PettingZoo ParallelEnv
    aec = envs.harvest_v0.env(num_agents=3)              # AEC, through parallel_to_aec
    vec = envs.harvest_v0.vector_env(64, num_agents=3)   # 64 copies stepped together

or through the registry: ``envs.make(name, **params)``, ``envs.make_vector(name, num_envs, **params)`` and
``envs.list_envs()`` (each game's parameters with type, default and meaning). This package never imports
torch or ``marl_core``.
"""

from __future__ import annotations

import importlib
from types import ModuleType
from typing import Any

from envs.errors import ActionError, EnvError, LayoutError, ParamError
from envs.params import nearest

__all__ = ["GAMES", "make", "make_vector", "list_envs", "game_module", "declared_metrics",
           "EnvError", "ParamError", "LayoutError", "ActionError"]

GAMES: tuple[str, ...] = ("harvest_v0", "cleanup_v0", "matrix_v0")


def game_module(name: str) -> ModuleType:
    """The module of a registered game, or :class:`ParamError` naming the registered ones."""
    if name not in GAMES:
        close = nearest(name, GAMES)
        hint = f"; did you mean {', '.join(repr(c) for c in close)}?" if close else ""
        raise ParamError(f"unknown game '{name}'{hint} (registered: {', '.join(GAMES)})")
    return importlib.import_module(f"envs.{name}")


def declared_metrics(name: str) -> tuple[str, ...]:
    """The social outcome metrics (``envs.metrics.METRIC_NAMES``) that mean something in the game ``name``,
    as its module declares them in ``METRICS``: all four in the grid games, efficiency alone in the matrix
    games (no resource, no tagging, returns that may be negative). A game we did not write (``module:
    callable``, ``gymnasium:ID``) declares none: it is reported by its returns only."""
    if name not in GAMES:
        return ()
    return tuple(getattr(game_module(name), "METRICS", ()))


def make(name: str, **params: Any):
    """A PettingZoo ``ParallelEnv`` of the game ``name``."""
    return game_module(name).parallel_env(**params)


def make_vector(name: str, num_envs: int, **params: Any):
    """A batched engine with ``num_envs`` copies of the game ``name``."""
    return game_module(name).vector_env(num_envs, **params)


def list_envs() -> dict[str, list[dict[str, Any]]]:
    """Every registered game and its parameters: name, type, default, allowed values and meaning."""
    out = {}
    for name in GAMES:
        table = game_module(name).PARAMS
        out[name] = [{"name": p.name, "type": p.kind.__name__, "default": p.default,
                      "allowed": p.allowed(), "doc": p.doc} for p in table]
    return out


def __getattr__(attr: str) -> ModuleType:
    # envs.harvest_v0 etc. without importing every game at package import time
    if attr in GAMES:
        return importlib.import_module(f"envs.{attr}")
    raise AttributeError(f"module 'envs' has no attribute '{attr}'")
