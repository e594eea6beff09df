"""Build a learner from a TeamSpec and a validated learner config.

Every learner exposes ``act(obs, explore, env_steps) -> actions``, ``update(batch) -> dict of scalars``,
``state_dict()`` / ``load_state_dict()``, ``agent_policy(i)`` (agent i's policy alone) and ``priorities``
(|TD error| per transition of the last update, for prioritized replay). Learners know nothing of the
training loop, the CLI or the ablation harness.
"""

from __future__ import annotations

from typing import Any

from marl_core.errors import ConfigError
from marl_core.spec import TeamSpec

__all__ = ["build_learner", "LEARNERS"]

LEARNERS = ("idqn", "maddpg")


def build_learner(spec: TeamSpec, cfg: Any, seed: int = 0):
    """The learner named by ``cfg.kind``."""
    if cfg.kind == "idqn":
        from marl_core.idqn import IDQN

        return IDQN(spec, cfg, seed)
    if cfg.kind == "maddpg":
        from marl_core.maddpg import MADDPG

        return MADDPG(spec, cfg, seed)
    raise ConfigError(f"learner.kind = {cfg.kind!r} is not allowed; expected one of {', '.join(LEARNERS)}")
