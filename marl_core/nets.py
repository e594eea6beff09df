"""Networks: a small conv encoder for grid windows, an MLP for vectors, and parameter sharing done once.

:class:`AgentNet` maps one agent's observation (and, under parameter sharing, a one-hot agent id) to one
output per action: Q values (optionally with a dueling head) or policy logits. :class:`AgentNets` holds the
team's nets: one shared net with an agent-id input (``share_parameters: true``) or one net per agent, and
maps ``(K, N, *obs)`` to ``(K, N, A)`` either way, so the learners never branch on sharing.

Every net is described by a plain dict (:func:`net_description`) from which :func:`build_net` rebuilds it,
so a saved agent policy carries what it needs to be loaded alone.
"""

from __future__ import annotations

from typing import Any

import torch
from torch import nn

from marl_core.targets import dueling_combine

__all__ = ["Encoder", "AgentNet", "AgentNets", "net_description", "build_net", "to_float", "default_strides"]


def default_strides(layers: int) -> tuple[int, ...]:
    """The strides of an encoder whose description names none (policies saved before ``conv_strides``)."""
    return tuple(1 if i == 0 else 2 for i in range(layers))


def to_float(obs: torch.Tensor) -> torch.Tensor:
    """Observations as float32 (grid observations are uint8 0/1 and are used as they are)."""
    return obs if obs.dtype == torch.float32 else obs.float()


class Encoder(nn.Module):
    """Observation encoder.

    Shape:
        image: (K, C, H, W) -> (K, out_dim), one 3x3 convolution (padding 1) and ReLU per entry of
            ``conv_channels``, with the strides ``conv_strides`` (None: 1 for the first, 2 for the others)
        vector: (K, *shape) -> (K, out_dim), flatten then one hidden layer with ReLU
    """

    def __init__(self, obs_shape: tuple[int, ...], hidden: int, conv_channels: tuple[int, ...],
                 conv_strides: tuple[int, ...] | None = None):
        super().__init__()
        self.obs_shape = tuple(obs_shape)
        strides = default_strides(len(conv_channels)) if conv_strides is None else tuple(conv_strides)
        if len(strides) != len(conv_channels):
            raise ValueError(f"conv_strides {list(strides)} needs one stride per conv layer "
                             f"({len(conv_channels)})")
        self.conv_strides = strides
        if len(self.obs_shape) == 3:
            layers: list[nn.Module] = []
            c_in = self.obs_shape[0]
            for c, stride in zip(conv_channels, strides):
                layers += [nn.Conv2d(c_in, c, 3, stride=stride, padding=1), nn.ReLU()]
                c_in = c
            layers.append(nn.Flatten())
            self.body = nn.Sequential(*layers)
            with torch.no_grad():
                self.out_dim = int(self.body(torch.zeros(1, *self.obs_shape)).shape[1])
        else:
            size = 1
            for s in self.obs_shape:
                size *= s
            self.body = nn.Sequential(nn.Flatten(), nn.Linear(size, hidden), nn.ReLU())
            self.out_dim = hidden

    def forward(self, obs: torch.Tensor) -> torch.Tensor:
        return self.body(to_float(obs))

    def extra_repr(self) -> str:
        return f"obs_shape={self.obs_shape}, out_dim={self.out_dim}"


class AgentNet(nn.Module):
    """One agent's net: encoder, optional agent-id input, a hidden layer, then A outputs.

    Shape:
        obs: (K, *obs_shape), agent_id: (K, id_dim) or None -> (K, num_actions)
    """

    def __init__(self, obs_shape: tuple[int, ...], num_actions: int, hidden: int = 128,
                 conv_channels: tuple[int, ...] = (16, 32), id_dim: int = 0, dueling: bool = False,
                 conv_strides: tuple[int, ...] | None = None):
        super().__init__()
        self.num_actions, self.id_dim, self.dueling = num_actions, id_dim, dueling
        self.encoder = Encoder(obs_shape, hidden, tuple(conv_channels), conv_strides)
        self.trunk = nn.Sequential(nn.Linear(self.encoder.out_dim + id_dim, hidden), nn.ReLU())
        self.head = nn.Linear(hidden, num_actions)
        self.value = nn.Linear(hidden, 1) if dueling else None

    def forward(self, obs: torch.Tensor, agent_id: torch.Tensor | None = None) -> torch.Tensor:
        h = self.encoder(obs)
        if self.id_dim:
            h = torch.cat([h, agent_id], dim=1)
        h = self.trunk(h)
        out = self.head(h)
        return dueling_combine(self.value(h), out) if self.value is not None else out

    def extra_repr(self) -> str:
        return f"num_actions={self.num_actions}, id_dim={self.id_dim}, dueling={self.dueling}"


def net_description(obs_shape: tuple[int, ...], num_actions: int, hidden: int, conv_channels, id_dim: int,
                    dueling: bool, conv_strides=None) -> dict[str, Any]:
    """Everything :func:`build_net` needs, as plain JSON-ready values."""
    strides = default_strides(len(conv_channels)) if conv_strides is None else conv_strides
    return {"obs_shape": list(obs_shape), "num_actions": int(num_actions), "hidden": int(hidden),
            "conv_channels": [int(c) for c in conv_channels], "conv_strides": [int(s) for s in strides],
            "id_dim": int(id_dim), "dueling": bool(dueling)}


def build_net(desc: dict[str, Any]) -> AgentNet:
    """An :class:`AgentNet` from a :func:`net_description` dict."""
    strides = desc.get("conv_strides")  # absent from policies saved before it existed: the old rule
    return AgentNet(tuple(desc["obs_shape"]), desc["num_actions"], desc["hidden"], tuple(desc["conv_channels"]),
                    desc["id_dim"], desc["dueling"], None if strides is None else tuple(strides))


class AgentNets(nn.Module):
    """The team's nets, shared or one per agent (parameter sharing implemented once, here).

    Shape:
        obs: (K, N, *obs_shape) -> (K, N, num_actions)
    """

    def __init__(self, num_agents: int, share: bool, **net_kwargs: Any):
        super().__init__()
        self.num_agents, self.share = num_agents, share
        id_dim = num_agents if share else 0
        self.descriptions = [net_description(id_dim=id_dim, **net_kwargs)] * (1 if share else num_agents)
        self.nets = nn.ModuleList(build_net(d) for d in self.descriptions)
        self.register_buffer("ids", torch.eye(num_agents), persistent=False)

    def forward(self, obs: torch.Tensor) -> torch.Tensor:
        K, N = obs.shape[:2]
        if self.share:
            ids = self.ids.expand(K, N, N).reshape(K * N, N)
            return self.nets[0](obs.reshape(K * N, *obs.shape[2:]), ids).reshape(K, N, -1)
        return torch.stack([net(obs[:, i]) for i, net in enumerate(self.nets)], dim=1)

    def agent_net(self, i: int) -> tuple[AgentNet, dict[str, Any], int | None]:
        """Agent ``i``'s net, its description and (under sharing) the agent index to feed as its id."""
        if self.share:
            return self.nets[0], self.descriptions[0], i
        return self.nets[i], self.descriptions[i], None

    def groups(self) -> list[nn.Module]:
        """Parameter groups that are clipped separately (one per independent agent, or the shared net)."""
        return list(self.nets)

    def extra_repr(self) -> str:
        return f"num_agents={self.num_agents}, share={self.share}"

