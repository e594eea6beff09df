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

__all__ = ["AgentPolicy", "MemoryOnePolicy", "POLICY_FORMAT", "atomic_torch_save", "safe_torch_load",
           "load_policy", "state_index"]

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
    """A single agent's policy from local observations: greedy (the most likely action, or the largest Q
    value), or, for an actor saved with ``sample``, a draw from the softmax of its logits (its own
    generator, seeded with ``seed``).

    Shape:
        act: obs (K, *obs_shape) -> actions (K,) int64
    """

    def __init__(self, net: AgentNet, description: dict[str, Any], kind: str, agent: str,
                 agent_index: int | None, obs_space: dict[str, Any], sample: bool = False, seed: int = 0):
        self.net, self.description, self.kind, self.agent = net, description, kind, agent
        self.agent_index, self.obs_space = agent_index, obs_space
        self.sample = sample  # an actor that acts by drawing from its softmax (ppo's eval_policy: sample)
        self._rng = np.random.default_rng(seed)

    @torch.no_grad()
    def scores(self, obs: np.ndarray | torch.Tensor) -> torch.Tensor:
        """Q values or logits, (K, A)."""
        x = torch.as_tensor(obs)
        ids = None
        if self.description["id_dim"]:
            ids = torch.zeros(x.shape[0], self.description["id_dim"])
            ids[:, self.agent_index] = 1.0
        return self.net(x, ids)

    @property
    def num_actions(self) -> int:
        return int(self.description["num_actions"])

    def for_seat(self, seat: int) -> AgentPolicy:
        """The policy to play in another seat: the same (our observations are each agent's own view)."""
        return self

    def act(self, obs: np.ndarray) -> np.ndarray:
        expect = tuple(self.obs_space["shape"])
        if tuple(obs.shape[1:]) != expect:
            raise ValueError(f"policy of {self.agent}: observations have shape {tuple(obs.shape[1:])}; "
                             f"expected {expect}")
        scores = self.scores(obs)
        if self.sample:  # the Gumbel-max trick: one draw from softmax(scores) per row
            return (scores.numpy().astype(np.float64) + self._rng.gumbel(size=scores.shape)).argmax(axis=1)
        return scores.argmax(dim=1).numpy()

    def save(self, path: str | Path) -> Path:
        return atomic_torch_save({
            "format": POLICY_FORMAT, "kind": self.kind, "agent": self.agent, "agent_index": self.agent_index,
            "net": self.description, "obs_space": self.obs_space, "sample": self.sample,
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
        return cls(net, data["net"], data["kind"], data["agent"], data["agent_index"], data["obs_space"],
                   sample=bool(data.get("sample", False)))  # absent from files saved before it: greedy


MEMORY_ONE = "memory_one"


def state_index(obs: np.ndarray) -> np.ndarray:
    """``matrix_v0`` observations ``(..., 4)`` of a two-player, two-action game (the previous joint action,
    one-hot per agent, agent_0's first) -> a memory-one policy's state ``(...,)``: 0 in the first round
    (all zeros), else ``1 + 2 * a0 + a1``."""
    obs = np.asarray(obs)
    first = obs.sum(axis=-1) == 0
    return np.where(first, 0, 1 + 2 * obs[..., 1].astype(np.int64) + obs[..., 3].astype(np.int64))


class MemoryOnePolicy:
    """One player's memory-one policy on a two-player, two-action ``matrix_v0`` game (``learner.kind:
    lola``): five logits, the probability of action 0 in the first round and after each previous joint
    action (agent_0's action first). It samples, so it has its own generator.

    Shape:
        act: obs (K, 4) -> actions (K,) int64
    """

    num_actions = 2

    def __init__(self, logits: np.ndarray, agent: str, agent_index: int, seed: int = 0, seat: int | None = None):
        self.logits = np.asarray(logits, np.float64)
        self.agent, self.agent_index = agent, agent_index
        self.kind = MEMORY_ONE
        self.obs_space = {"shape": [4], "dtype": "uint8"}
        self.seat = agent_index if seat is None else seat
        self._rng = np.random.default_rng(seed)

    @property
    def probs(self) -> np.ndarray:
        """``(5,)`` probability of action 0: first round, then after (0,0), (0,1), (1,0), (1,1)."""
        return 1.0 / (1.0 + np.exp(-self.logits))

    def for_seat(self, seat: int, seed: int = 0) -> MemoryOnePolicy:
        """The policy playing in ``seat``: the observation lists agent_0's action first, so a player
        trained in the other seat reads it with the two blocks swapped (its own action, then the other's,
        as it learned them)."""
        return MemoryOnePolicy(self.logits, self.agent, self.agent_index, seed=seed, seat=seat)

    def act(self, obs: np.ndarray) -> np.ndarray:
        obs = np.asarray(obs)
        if tuple(obs.shape[1:]) != (4,):
            raise ValueError(f"policy of {self.agent}: observations have shape {tuple(obs.shape[1:])}; "
                             f"expected (4,) (two players, two actions)")
        if self.seat != self.agent_index:
            obs = obs[:, [2, 3, 0, 1]]
        return (self._rng.random(len(obs)) >= self.probs[state_index(obs)]).astype(np.int64)

    def save(self, path: str | Path) -> Path:
        return atomic_torch_save({"format": POLICY_FORMAT, "kind": MEMORY_ONE, "agent": self.agent,
                                  "agent_index": self.agent_index, "obs_space": self.obs_space,
                                  "logits": torch.as_tensor(self.logits, dtype=torch.float64)}, path)

    @classmethod
    def load(cls, path: str | Path) -> MemoryOnePolicy:
        data = safe_torch_load(path, "policy")
        if data.get("kind") != MEMORY_ONE or "logits" not in data:
            raise CheckpointError(f"policy '{path}' is not a memory-one policy file")
        if data["format"] != POLICY_FORMAT:
            raise CheckpointError(f"policy '{path}' has format {data['format']}; this version reads "
                                  f"format {POLICY_FORMAT}")
        logits = data["logits"]
        if not isinstance(logits, torch.Tensor) or tuple(logits.shape) != (5,):
            raise CheckpointError(f"policy '{path}' is not a memory-one policy file (logits of shape "
                                  f"{tuple(getattr(logits, 'shape', ()))}; expected (5,))")
        return cls(logits.numpy(), str(data["agent"]), int(data["agent_index"]))


def load_policy(path: str | Path) -> AgentPolicy | MemoryOnePolicy:
    """Any agent policy file of ours (a network's or a memory-one policy)."""
    data = safe_torch_load(path, "policy")
    return (MemoryOnePolicy if data.get("kind") == MEMORY_ONE else AgentPolicy).load(path)
