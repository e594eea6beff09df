"""The learners, one file each, and the one registry that builds them.

Every learner is built from a :class:`marl_core.spec.TeamSpec`, its own validated config section and a
seed, and exposes ``act(obs, explore, env_steps) -> actions``, ``update(data) -> dict of scalars``,
``schedule(env_steps)``, ``state_dict()`` / ``load_state_dict()`` and ``agent_policy(i)`` (agent i's
policy alone). Off-policy learners (idqn, maddpg) update from replay batches and report ``priorities``
(|TD error| per transition of the last update, for prioritized replay); on-policy learners (ppo, with
``on_policy = True``) update from a full :class:`marl_core.buffer.RolloutBuffer`. LOLA trains two
memory-one players from a matrix game's table and is built by its own run (``marl_core.train``).
Learners know nothing of the training loop, the CLI or the ablation harness.

Adding a learner: its file here, its config class in :mod:`marl_core.config` (``LEARNERS``), its test,
and one line in :data:`REGISTRY`.
"""

from __future__ import annotations

import importlib
from typing import Any

from marl_core.errors import ConfigError
from marl_core.spec import TeamSpec

__all__ = ["build_learner", "LEARNERS", "REGISTRY"]

# learner kind -> (module, class); imported when first built
REGISTRY: dict[str, tuple[str, str]] = {
    "idqn": ("marl_core.learners.idqn", "IDQN"),
    "maddpg": ("marl_core.learners.maddpg", "MADDPG"),
    "ppo": ("marl_core.learners.ppo", "PPO"),
}
LEARNERS = tuple(REGISTRY)


def build_learner(spec: TeamSpec, cfg: Any, seed: int = 0):
    """The learner named by ``cfg.kind``."""
    if cfg.kind not in REGISTRY:
        raise ConfigError(f"learner.kind = {cfg.kind!r} is not allowed here; expected one of "
                          f"{', '.join(LEARNERS)}")
    module, name = REGISTRY[cfg.kind]
    return getattr(importlib.import_module(module), name)(spec, cfg, seed)
