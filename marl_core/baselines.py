"""Non-learning teams measured beside every learned one: random, no-op and each game's scripted teams.

A learned team's figures mean little on their own: a team that does nothing, or a ten-line rule, may
already score as well. So every run (``train``) and every ``evaluate`` plays these teams through the same
rollout path as the learned team, on the same env copies and the same episode seeds, and reports them under
``baselines`` in ``summary.json`` (team name -> the same keys as the learned team's result).

==================  =====================================  ==============================================
team                plays on                               rule
==================  =====================================  ==============================================
``random``          every env                              each agent picks a uniformly random action
``stay``            our grid games, mpe2 envs              every agent always plays action 0, which is
                                                           *stay* in our grid games and *no action* in
                                                           mpe2 (not offered where action 0 does something)
``greedy``          ``harvest_v0``                         walk to the nearest resource and take it
``restrained``      ``harvest_v0``                         the same, but leave each patch's last resource
``nobody_cleans``   ``cleanup_v0``                         everybody picks resources, nobody cleans
``one_cleaner``     ``cleanup_v0``                         agent_0 cleans the river, the others pick
``landmark_walk``   ``mpe2.simple_spread_v3``              agent i walks to landmark i (from its own
                                                           observation; no coordination)
==================  =====================================  ==============================================

:func:`team_names` says which teams apply to an env; :func:`measure` plays them. The scripted grid teams
read the whole map (``envs.scripted``); they are rules, not learners, and never tag. The ``stay`` team was
first named ``noop``; that name is refused wherever a team is named, with the new one (:data:`RENAMED_TEAMS`).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from envs import GAMES
from envs.scripted import TEAMS as SCRIPTED
from envs.scripted import batched_team
from marl_core.errors import ConfigError
from marl_core.rollout import evaluate, random_policy
from marl_core.team_env import GameTeamEnv, TeamEnv

__all__ = ["ALWAYS", "KNOWN", "RENAMED_TEAMS", "renamed_team", "team_names", "measured_teams", "make_team", "measure", "landmark_walk", "strongest"]

ALWAYS = ("random",)
_SPREAD = "mpe2.simple_spread_v3:"
KNOWN: tuple[str, ...] = (*ALWAYS, "stay", *SCRIPTED, "landmark_walk")
"""Every baseline team name (``train.baselines`` accepts these)."""
RENAMED_TEAMS: dict[str, str] = {"noop": "stay"}
"""Earlier team names -> today's: refused where a team is named, naming the new one."""


def renamed_team(field: str, name: object) -> str | None:
    """``"FIELD = 'noop' was renamed: use 'stay'"`` for an earlier team name, else None."""
    if isinstance(name, str) and name in RENAMED_TEAMS:
        return f"{field} = {name!r} was renamed: use {RENAMED_TEAMS[name]!r}"
    return None


def _stay_applies(env_name: str) -> bool:
    """Action 0 does nothing in our grid games (stay) and in mpe2's discrete actions (no action)."""
    return (env_name in GAMES and env_name != "matrix_v0") or env_name.startswith("mpe2.")


def team_names(env_name: str) -> tuple[str, ...]:
    """Every baseline team that applies to ``env_name`` (an ``env.name`` of a run config), in order."""
    names = list(ALWAYS)
    if _stay_applies(env_name):
        names.append("stay")
    names += [t for t, (games, _) in SCRIPTED.items() if env_name in games]
    if env_name.startswith(_SPREAD):
        names.append("landmark_walk")
    return tuple(names)


def measured_teams(cfg: Any) -> tuple[str, ...]:
    """The non-learning teams a run of ``cfg`` (a RunConfig) measures: ``train.baselines: auto`` gives
    every team that applies to the env, a list gives random and the teams listed."""
    wanted = cfg.train.baselines
    return team_names(cfg.env.name) if wanted == "auto" else tuple(dict.fromkeys(["random", *wanted]))


def landmark_walk(num_agents: int, lead: float = 0.3, close: float = 0.05) -> Callable[[np.ndarray], np.ndarray]:
    """Agent i walks to landmark i in mpe2's simple_spread, from its own observation.

    The observation is ``[own velocity (2), own position (2), landmark j - own position (2 each), ...]``
    (``mpe2.simple_spread_v3``'s ``observation``); discrete actions 1/2 push -x/+x and 3/4 push -y/+y
    (``mpe2._mpe_utils.simple_env``). The agent pushes along the axis where ``offset - lead * velocity`` is
    larger, and does nothing once that is within ``close`` on both axes (``lead`` damps overshoot; both
    values are ours, no source).

    Shape: obs (B, N, D) -> actions (B, N)
    """
    idx = np.arange(num_agents)

    def policy(obs: np.ndarray) -> np.ndarray:
        vel = obs[..., 0:2]
        off = np.stack([obs[:, idx, 4 + 2 * idx], obs[:, idx, 5 + 2 * idx]], axis=-1) - lead * vel
        ax = np.abs(off).argmax(axis=-1)  # 0: x, 1: y
        sign = np.take_along_axis(off, ax[..., None], axis=-1)[..., 0] > 0
        action = 1 + 2 * ax + sign  # x: 1 (-) / 2 (+); y: 3 (-) / 4 (+)
        return np.where(np.abs(off).max(axis=-1) < close, 0, action)

    return policy


def make_team(name: str, env: TeamEnv, seed: int) -> Callable[[np.ndarray], np.ndarray]:
    """The policy ``obs (B, N, ...) -> actions (B, N)`` of baseline team ``name`` on ``env``."""
    if name not in team_names(env.name):
        raise ConfigError(f"baseline team = {name!r} is not allowed for env {env.name!r}; expected one of "
                          f"{', '.join(team_names(env.name))}")
    if name == "random":
        return random_policy(env.spec.num_actions, seed)
    if name == "stay":
        return lambda obs: np.zeros(obs.shape[:2], np.int64)
    if name == "landmark_walk":
        return landmark_walk(env.spec.num_agents)
    if not isinstance(env, GameTeamEnv):  # pragma: no cover - team_names offers scripted teams only on games
        raise ConfigError(f"baseline team {name!r} needs one of our batched games, not {env.name!r}")
    team = batched_team(env.game, name)
    return lambda obs: team()


def measure(env: TeamEnv, names: Sequence[str], episodes: int, seed: int,
            result: Callable[[dict[str, Any]], dict[str, Any]]) -> dict[str, dict[str, Any]]:
    """Play each team in ``names`` for ``episodes`` episodes on ``env`` reset with ``seed`` (the learned
    team's evaluation seed); ``result`` turns an evaluation into the JSON-ready figures."""
    return {n: result(evaluate(env, make_team(n, env, seed), episodes, seed)) for n in names}


def strongest(baselines: dict[str, dict[str, Any]], metric: str) -> tuple[str, float] | None:
    """The baseline team with the highest finite ``metric``, and its value (None if none is finite)."""
    finite = [(float(v[metric]), n) for n, v in baselines.items()
              if isinstance(v.get(metric), (int, float)) and np.isfinite(v[metric])]
    if not finite:
        return None
    value, name = max(finite)
    return name, value
