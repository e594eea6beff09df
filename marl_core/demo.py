"""The quick-start demo: scripted teams play harvest and cleanup, GIFs are written, metrics returned.

It shows each dilemma with two fixed-rule teams (``envs.scripted``): on harvest a greedy team against a
restrained one that leaves the last resource of each patch; on cleanup a team where nobody cleans against
one where one agent cleans the river. Nothing here learns; the trainer comes in a later release.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import envs
from envs.episode import play_episode
from envs.render import write_gif
from envs.scripted import cleanup_team, greedy_team, restrained_team

__all__ = ["TEAMS", "run_demo"]

# (game, team label, policy factory)
TEAMS: tuple[tuple[str, str, Any], ...] = (
    ("harvest_v0", "greedy", greedy_team),
    ("harvest_v0", "restrained", restrained_team),
    ("cleanup_v0", "nobody_cleans", lambda env: cleanup_team(env, cleaners=0)),
    ("cleanup_v0", "one_cleaner", lambda env: cleanup_team(env, cleaners=1)),
)


def run_demo(out: str | Path, seed: int = 0, num_agents: int = 5, max_cycles: int = 1000,
             gifs: bool = True) -> list[dict[str, Any]]:
    """Play every team in ``TEAMS`` once; write ``out/<game>_<team>.gif``; return one row per team with
    the game, the team, per-agent returns, the four social outcome metrics and the GIF path."""
    out = Path(out)
    rows = []
    for game, team, factory in TEAMS:
        env = envs.make(game, render_mode="rgb_array" if gifs else None, num_agents=num_agents,
                        max_cycles=max_cycles)
        ep = play_episode(env, factory(env), seed=seed, render=gifs)
        gif = write_gif(ep.frames, out / f"{game}_{team}.gif", env.metadata["render_fps"]) if gifs else None
        rows.append({"game": game, "team": team, "returns": ep.returns, **ep.outcomes(),
                     "resources_left": int(env.game.interior(env.game.resource)[0].sum()),
                     "gif": str(gif) if gif else None})
    return rows
