"""One agent's policy on its own: its Q-network or actor, the spaces it expects, saved and loaded alone.

A learner hands out :class:`AgentPolicy` objects (``learner.agent_policy(i)``). Each acts from the agent's
local observation only — decentralised execution — and can be written to a file and read back without the
learner, the run or its config, so that agents trained in different runs (even by different learners) can be
seated in one team. Files are written atomically and read with ``torch.load(..., weights_only=True)``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import torch

from marl_core.errors import CheckpointError
from marl_core.files import atomic_write
from marl_core.nets import AgentNet, build_net

__all__ = ["AgentPolicy", "POLICY_FORMAT", "atomic_torch_save", "safe_torch_load"]

POLICY_FORMAT = 1


def atomic_torch_save(obj: Any, path: str | Path) -> Path:
    """``torch.save`` to a temp file in the same directory, then rename: a crash never leaves half a file."""
    return atomic_write(path, lambda f: torch.save(obj, f), binary=True)


def safe_torch_load(path: str | Path, what: str) -> dict[str, Any]:
    """Load a file of ours with ``weights_only=True`` (never unpickles arbitrary objects)."""
    path = Path(path)
    if not path.is_file():
        raise CheckpointError(f"{what} '{path}' not found")
    try:
        data = torch.load(path, map_location="cpu", weights_only=True)
    except Exception as err:  # a foreign pickle, a truncated file, a non-torch file
        first = str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__
        raise CheckpointError(f"{what} '{path}' is not a marl-core file ({first[:120]})") from None
    if not isinstance(data, dict) or "format" not in data:
        raise CheckpointError(f"{what} '{path}' is not a marl-core file (no format version)")
    return data


class AgentPolicy:
    """A single agent's greedy policy from local observations.

    Shape:
        act: obs (K, *obs_shape) -> actions (K,) int64
    """

    def __init__(self, net: AgentNet, description: dict[str, Any], kind: str, agent: str,
                 agent_index: int | None, obs_space: dict[str, Any]):
        self.net, self.description, self.kind, self.agent = net, description, kind, agent
        self.agent_index, self.obs_space = agent_index, obs_space

    @torch.no_grad()
    def scores(self, obs: np.ndarray | torch.Tensor) -> torch.Tensor:
        """Q values or logits, (K, A)."""
        x = torch.as_tensor(obs)
        ids = None
        if self.description["id_dim"]:
            ids = torch.zeros(x.shape[0], self.description["id_dim"])
            ids[:, self.agent_index] = 1.0
        return self.net(x, ids)

    def act(self, obs: np.ndarray) -> np.ndarray:
        expect = tuple(self.obs_space["shape"])
        if tuple(obs.shape[1:]) != expect:
            raise ValueError(f"policy of {self.agent}: observations have shape {tuple(obs.shape[1:])}; "
                             f"expected {expect}")
        return self.scores(obs).argmax(dim=1).numpy()

    def save(self, path: str | Path) -> Path:
        return atomic_torch_save({
            "format": POLICY_FORMAT, "kind": self.kind, "agent": self.agent, "agent_index": self.agent_index,
            "net": self.description, "obs_space": self.obs_space,
            "weights": {k: v.detach().clone() for k, v in self.net.state_dict().items()},
        }, path)

    @classmethod
    def load(cls, path: str | Path) -> AgentPolicy:
        data = safe_torch_load(path, "policy")
        if data.get("kind") not in ("q", "actor") or "net" not in data or "weights" not in data:
            raise CheckpointError(f"policy '{path}' is not an agent policy file (a training checkpoint? "
                                  f"policies are in RUN_DIR/policies/<agent>.pt)")
        if data["format"] != POLICY_FORMAT:
            raise CheckpointError(f"policy '{path}' has format {data['format']}; this version reads "
                                  f"format {POLICY_FORMAT}")
        net = build_net(data["net"])
        net.load_state_dict(data["weights"])
        net.eval()
        return cls(net, data["net"], data["kind"], data["agent"], data["agent_index"], data["obs_space"])
