"""Scripted teams for the grid games: fixed rules, no learning, for demos, tests and baselines.

Each team is a rule that picks every agent's action in one copy ``b`` of a batched game
(:class:`envs.grid.GridGame`) from the whole map (they are scripted, not learners) and never tags:

* ``greedy`` (:func:`greedy_team`) — every agent walks to the nearest resource and takes it.
* ``restrained`` (:func:`restrained_team`) — the same, except that nobody takes the last resource of an
  orchard patch.
* ``nobody_cleans`` / ``one_cleaner`` (:func:`cleanup_team`) — ``cleaners`` agents keep the river clean,
  the others pick resources greedily.

Two ways to use a team: on a PettingZoo ``ParallelEnv`` of a grid game (``greedy_team(env)`` returns
``policy(obs_dict) -> actions_dict``), or on a batched game of B copies (:func:`batched_team` returns
``policy() -> actions (B, N)``, one Python pass per copy; the trainer's baselines use this).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

__all__ = ["distance_to", "greedy_team", "restrained_team", "cleanup_team", "batched_team", "TEAMS"]

_MOVES = ((1, -1, 0), (2, 1, 0), (3, 0, -1), (4, 0, 1))  # action, dy, dx
_FAR = np.iinfo(np.int32).max // 2


def distance_to(targets: np.ndarray, passable: np.ndarray) -> np.ndarray:
    """Steps from every cell to the nearest ``targets`` cell through ``passable`` cells (4-neighbour
    breadth-first search done as repeated whole-array relaxation); unreachable cells get a large value."""
    dist = np.where(targets, 0, _FAR).astype(np.int32)
    while True:
        pad = np.pad(dist, 1, constant_values=_FAR)
        near = np.minimum.reduce([pad[:-2, 1:-1], pad[2:, 1:-1], pad[1:-1, :-2], pad[1:-1, 2:]]) + 1
        new = np.where(passable, np.minimum(dist, near), dist)
        if np.array_equal(new, dist):
            return dist
        dist = new


def _step_toward(dist: np.ndarray, y: int, x: int, blocked: set) -> tuple[int, int, int]:
    """The move (action, y, x) to the neighbour closest to a target; stay if none is closer."""
    best = (0, y, x)
    best_d = dist[y, x]
    for action, dy, dx in _MOVES:
        ny, nx = y + dy, x + dx
        if 0 <= ny < dist.shape[0] and 0 <= nx < dist.shape[1] and (ny, nx) not in blocked \
                and dist[ny, nx] < best_d:
            best, best_d = (action, ny, nx), dist[ny, nx]
    return best


def _picker(game: Any, restrained: bool, skip: set[int]) -> Callable[[int], dict[int, int]]:
    """``pick(b)``: the actions of the agents not in ``skip`` in copy ``b`` (agent index -> action)."""
    passable = ~game.layout.wall
    patches = game.layout.patches()

    def pick(b: int) -> dict[int, int]:
        res = game.interior(game.resource)[b]
        pos = game.agent_positions(b)
        if restrained:
            left = np.bincount(patches[res], minlength=patches.max() + 1)
            targets = res & (left[np.maximum(patches, 0)] >= 2)
        else:
            targets = res
        dist = distance_to(targets, passable)
        taken: set = set()
        actions = {}
        for i, (y, x) in enumerate(pos):
            if i in skip or game.out[b, i]:
                continue
            action, ny, nx = _step_toward(dist, int(y), int(x), taken)
            if restrained and res[ny, nx]:
                p = patches[ny, nx]
                if left[p] < 2:  # another agent already takes this patch's second-to-last resource
                    action, ny, nx = 0, y, x
                else:
                    left[p] -= 1
            taken.add((ny, nx))
            actions[i] = action
        return actions

    return pick


def _as_policy(env: Any, pick: Callable[[int], dict[int, int]]) -> Callable[[dict], dict]:
    def policy(obs: dict) -> dict:
        chosen = pick(0)
        return {a: chosen.get(i, 0) for i, a in enumerate(env.possible_agents) if a in obs}

    return policy


def _cleaner_picker(game: Any, cleaners: int) -> Callable[[int], dict[int, int]]:
    if game.clean_action < 0:
        raise ValueError("cleanup_team needs a game with a clean beam (cleanup_v0)")
    passable = ~game.layout.wall
    roles = set(range(min(cleaners, game.num_agents)))
    harvest = _picker(game, restrained=False, skip=roles)
    P, Wp = game.P, game.Wp
    offsets = game._beam_clean  # (4, length, width) flat offsets per facing

    def covers_waste(b: int, cell: int, facing: int) -> bool:
        cells = cell + offsets[facing]
        reach = np.logical_and.accumulate(~game.wall_f[cells], axis=0)
        return bool((game.waste[b].reshape(-1)[cells] & reach).any())

    def pick(b: int) -> dict[int, int]:
        actions = harvest(b)
        waste = game.interior(game.waste)[b]
        dist = distance_to(waste, passable) if waste.any() else None
        for i in roles:
            if game.out[b, i]:
                continue
            cell, facing = int(game.cell[b, i]), int(game.facing[b, i])
            if dist is None:
                actions[i] = 0
            elif covers_waste(b, cell, facing):
                actions[i] = game.clean_action
            else:
                turn = [a for a, f in ((1, 0), (2, 1), (3, 2), (4, 3)) if covers_waste(b, cell, f)]
                if turn:
                    actions[i] = turn[0]  # face the waste (a blocked move still turns)
                else:
                    y, x = divmod(cell, Wp)
                    actions[i] = _step_toward(dist, y - P, x - P, set())[0]
        return actions

    return pick


# team name -> (games it plays, picker factory over a batched game)
TEAMS: dict[str, tuple[tuple[str, ...], Callable[[Any], Callable[[int], dict[int, int]]]]] = {
    "greedy": (("harvest_v0",), lambda game: _picker(game, restrained=False, skip=set())),
    "restrained": (("harvest_v0",), lambda game: _picker(game, restrained=True, skip=set())),
    "nobody_cleans": (("cleanup_v0",), lambda game: _cleaner_picker(game, cleaners=0)),
    "one_cleaner": (("cleanup_v0",), lambda game: _cleaner_picker(game, cleaners=1)),
}


def greedy_team(env: Any) -> Callable[[dict], dict]:
    """Every agent walks to the nearest resource and takes it."""
    return _as_policy(env, _picker(env.game, restrained=False, skip=set()))


def restrained_team(env: Any) -> Callable[[dict], dict]:
    """Like :func:`greedy_team`, but no agent takes the last resource standing in an orchard patch."""
    return _as_policy(env, _picker(env.game, restrained=True, skip=set()))


def cleanup_team(env: Any, cleaners: int = 1) -> Callable[[dict], dict]:
    """Agents ``0 .. cleaners-1`` clean the river; the others take resources greedily."""
    return _as_policy(env, _cleaner_picker(env.game, cleaners))


def batched_team(game: Any, name: str) -> Callable[[], np.ndarray]:
    """The scripted team ``name`` (a key of :data:`TEAMS`) on every copy of the batched ``game``:
    ``policy() -> actions (B, N)`` for the game's current state (agents not moved by the rule stay)."""
    if name not in TEAMS:
        raise ValueError(f"scripted team = {name!r} is not allowed; expected one of {', '.join(TEAMS)}")
    pick = TEAMS[name][1](game)

    def policy() -> np.ndarray:
        actions = np.zeros((game.num_envs, game.num_agents), np.int64)
        for b in range(game.num_envs):
            for i, a in pick(b).items():
                actions[b, i] = a
        return actions

    return policy
