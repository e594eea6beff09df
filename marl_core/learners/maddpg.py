"""MADDPG-style centralised critic with decentralised actors (after Lowe et al. 2017).

Actors map each agent's local observation to action logits (one net per agent, or one shared net with an
agent-id input). The critic sees the joint input x — every agent's observation, as in Lowe et al.
(``critic_input: observations``; grid windows are stacked as channels, ``(N * C, 2r+1, 2r+1)``), or the env's
global state (``critic_input: state``; on our grid games by default the map channels and a position, ahead and
frozen plane per agent, ``(5 + 3N, H, W)``, see ``envs.grid``) — together with every agent's one-hot action,
and returns one value per agent. ``critic: one_network`` is one network with a value head per agent;
``per_agent`` is one network per agent. Actors learn through the straight-through Gumbel-softmax; targets
are Polyak-averaged copies. At evaluation, and in any saved policy, the actors act alone from local
observations.

Sources: docs/sources.md, "MADDPG"; docs/sources.md, "Gumbel-softmax";
docs/sources.md, "Soft target updates".

Choices where the paper leaves room (stated so results can be read): the target action of each agent is
the greedy one-hot of its target actor; exploration samples from the actor's softmax mixed with uniform
random actions at rate ``explore_eps`` (a linear schedule); a small penalty on squared logits
(``actor_reg``) keeps the logits bounded.

``critic_input: auto`` (the default) is ``observations``, chosen by measurement
(``scripts/compare_critic_inputs.py --steps 100000 --seeds 3``: ``configs/harvest_maddpg.yaml`` and
``configs/cleanup_maddpg.yaml``, 3 agents, seeds 0-2, 8 evaluation episodes, one run at a time on a shared
2-core machine; final efficiency, median and range):

=======  =======================  =======================  ========================================
game     state (per_agent)        observations             wall time per run, state / observations
=======  =======================  =======================  ========================================
harvest  0.2475 (0.2310-0.2608)   0.2408 (0.2115-0.5683)   147 s / 100 s
cleanup  0.0268 (0.0225-0.0548)   0.2095 (0.1533-0.2350)   127 s / 90 s
=======  =======================  =======================  ========================================

On harvest the two tie (ranges overlap, medians 0.0068 apart); on cleanup the observations critic is far
ahead (the ranges do not overlap; the state critic stays below the random team's 0.117-0.134); and on both
games the observations runs took about 1/1.4 of the time: a grid state covers the whole map (15 x 22,
11 x 22), larger than the one 11 x 11 stack of windows the observations critic encodes. So the data do not
favour ``state`` at this budget; it stays available, and ``auto`` is ``observations`` on envs without a
state either way.
"""

from __future__ import annotations

import copy
from typing import Any

import numpy as np
import torch
from torch import nn

from marl_core.errors import ConfigError
from marl_core.nets import AgentNets, Encoder
from marl_core.policy import AgentPolicy
from marl_core.spec import TeamSpec
from marl_core.targets import (
    clip_per_network,
    gumbel_softmax_st,
    linear_schedule,
    one_hot,
    polyak_update,
    set_lr_scale,
)

__all__ = ["MADDPG", "CentralCritic", "critic_input_shape", "resolve_critic_input", "AUTO_CRITIC_INPUT",
           "CRITIC_INPUTS"]

CRITIC_INPUTS: tuple[str, ...] = ("auto", "state", "observations")
# what ``critic_input: auto`` means on an env that has a state(): chosen by scripts/compare_critic_inputs.py
# (the figures are in the module docstring)
AUTO_CRITIC_INPUT = "observations"


def resolve_critic_input(critic_input: str, has_state: bool) -> str:
    """The critic's source (``"state"`` or ``"observations"``) for the config value ``critic_input``:
    ``auto`` is :data:`AUTO_CRITIC_INPUT` on an env with a ``state()`` and ``observations`` on one without."""
    if critic_input not in CRITIC_INPUTS:
        raise ConfigError(f"learner.critic_input = {critic_input!r} is not allowed; expected one of "
                          f"{', '.join(repr(c) for c in CRITIC_INPUTS)}")
    if critic_input == "auto":
        return AUTO_CRITIC_INPUT if has_state else "observations"
    return critic_input


def critic_input_shape(spec: TeamSpec, source: str) -> tuple[int, ...]:
    """Shape of the critic's joint input x for ``source`` (``observations`` or ``state``)."""
    if source == "state":
        return tuple(spec.state_space.shape)
    N, shape = spec.num_agents, spec.obs_shape
    if len(shape) == 3:  # grid windows: the agents' windows stacked as channels
        return (N * shape[0], shape[1], shape[2])
    size = int(np.prod(shape))
    return (N * size,)


class CentralCritic(nn.Module):
    """Q_i(x, a_1..a_N) for every agent i.

    Shape:
        x: (K, *input_shape), joint: (K, N * A) one-hot actions -> (K, N)
    """

    def __init__(self, input_shape: tuple[int, ...], num_agents: int, num_actions: int, hidden: int,
                 conv_channels: tuple[int, ...], shared: bool, conv_strides: tuple[int, ...] | None = None):
        super().__init__()
        self.num_agents, self.shared = num_agents, shared
        outs = [num_agents] if shared else [1] * num_agents

        def net(out: int) -> nn.Module:
            enc = Encoder(input_shape, hidden, conv_channels, conv_strides)
            return nn.ModuleDict({"enc": enc, "mlp": nn.Sequential(
                nn.Linear(enc.out_dim + num_agents * num_actions, hidden), nn.ReLU(),
                nn.Linear(hidden, hidden), nn.ReLU(), nn.Linear(hidden, out))})

        self.nets = nn.ModuleList(net(o) for o in outs)

    @staticmethod
    def _head(net: nn.Module, h: torch.Tensor, joint: torch.Tensor) -> torch.Tensor:
        return net["mlp"](torch.cat([h, joint], dim=1))

    @classmethod
    def _run(cls, net: nn.Module, x: torch.Tensor, joint: torch.Tensor) -> torch.Tensor:
        return cls._head(net, net["enc"](x), joint)

    def forward(self, x: torch.Tensor, joint: torch.Tensor) -> torch.Tensor:
        if self.shared:
            return self._run(self.nets[0], x, joint)
        return torch.cat([self._run(n, x, joint) for n in self.nets], dim=1)

    def own_values(self, x: torch.Tensor, joints: torch.Tensor) -> torch.Tensor:
        """Agent i's value under its own joint action ``joints[i]``: (N, K, N*A) -> (K, N).

        For the actor step: the encoder of ``x`` runs without gradients, since the actors' gradient flows
        only through the actions; gradients reach ``joints`` through the MLP alone.
        """
        N, K = joints.shape[:2]
        if self.shared:  # encode x once; only the actions differ between the N blocks
            net = self.nets[0]
            with torch.no_grad():
                h = net["enc"](x)
            hs = h.unsqueeze(0).expand(N, *h.shape).reshape(N * K, -1)
            q = self._head(net, hs, joints.reshape(N * K, -1)).reshape(N, K, N)
            return q.diagonal(dim1=0, dim2=2)  # (K, N): block i, output i
        with torch.no_grad():
            hs = [n["enc"](x) for n in self.nets]
        return torch.cat([self._head(n, h, joints[i]) for i, (n, h) in enumerate(zip(self.nets, hs))], dim=1)

    def extra_repr(self) -> str:
        return f"num_agents={self.num_agents}, shared={self.shared}"


class MADDPG:
    """Centralised-critic learner.

    Shape:
        act: obs (B, N, *obs_shape) -> actions (B, N) int64 (actors only, local observations)
        update: a replay batch -> dict of float statistics
    """

    kind = "maddpg"

    def __init__(self, spec: TeamSpec, cfg: Any, seed: int = 0):
        self.spec, self.cfg = spec, cfg
        source = resolve_critic_input(cfg.critic_input, spec.state_space is not None)
        if source == "state" and spec.state_space is None:
            raise ConfigError("learner.critic_input = 'state' is not allowed: this env has no state(); "
                              "expected 'observations' or 'auto'")
        self.critic_source = source
        N, A = spec.num_agents, spec.num_actions
        with torch.random.fork_rng(devices=[]):  # seeded initial weights, global RNG left as it was
            torch.manual_seed(seed)
            self.actors = AgentNets(N, cfg.share_parameters, obs_shape=spec.obs_shape, num_actions=A,
                                    hidden=cfg.hidden, conv_channels=cfg.conv_channels, dueling=False,
                                    conv_strides=cfg.conv_strides)
            self.critic = CentralCritic(critic_input_shape(spec, source), N, A, cfg.hidden,
                                        tuple(cfg.conv_channels), cfg.critic == "one_network",
                                        cfg.conv_strides)
        self.target_actors = copy.deepcopy(self.actors).requires_grad_(False)
        self.target_critic = copy.deepcopy(self.critic).requires_grad_(False)
        self.actor_opt = torch.optim.Adam(self.actors.parameters(), lr=cfg.actor_lr)
        self.critic_opt = torch.optim.Adam(self.critic.parameters(), lr=cfg.lr)
        self.rng = np.random.default_rng(seed)
        self.gen = torch.Generator().manual_seed(seed)
        self.updates = 0
        self.priorities: np.ndarray | None = None

    @property
    def uses_state(self) -> bool:
        return self.critic_source == "state"

    def schedule(self, env_steps: int) -> None:
        """Move the learning rates along their schedule: critic ``lr`` and ``actor_lr`` both scaled by the
        same factor, from 1 to ``lr_end / lr`` over ``lr_decay_steps``."""
        c = self.cfg
        if c.lr_end is not None:
            scale = linear_schedule(env_steps, 1.0, c.lr_end / c.lr, c.lr_decay_steps)
            set_lr_scale(self.critic_opt, c.lr, scale)
            set_lr_scale(self.actor_opt, c.actor_lr, scale)

    # ------------------------------------------------------------------ acting
    def epsilon(self, env_steps: int) -> float:
        c = self.cfg
        return linear_schedule(env_steps, c.explore_eps_start, c.explore_eps_end, c.explore_eps_decay_steps)

    @torch.no_grad()
    def act(self, obs: np.ndarray, explore: bool, env_steps: int = 0) -> np.ndarray:
        logits = self.actors(torch.as_tensor(obs)).numpy().astype(np.float64)
        if not explore:
            return logits.argmax(axis=-1)
        sampled = (logits + self.rng.gumbel(size=logits.shape)).argmax(axis=-1)  # a draw from softmax(logits)
        rand = self.rng.random(sampled.shape) < self.epsilon(env_steps)
        return np.where(rand, self.rng.integers(self.spec.num_actions, size=sampled.shape), sampled)

    # ------------------------------------------------------------------ learning
    def _x(self, batch: dict[str, np.ndarray], key: str) -> torch.Tensor:
        if self.critic_source == "state":
            return torch.as_tensor(batch["state" if key == "obs" else "next_state"])
        obs = torch.as_tensor(batch[key])
        return obs.reshape(obs.shape[0], *critic_input_shape(self.spec, "observations"))

    def update(self, batch: dict[str, np.ndarray]) -> dict[str, float]:
        cfg, A = self.cfg, self.spec.num_actions
        obs = torch.as_tensor(batch["obs"])
        next_obs = torch.as_tensor(batch["next_obs"])
        actions = one_hot(torch.as_tensor(batch["actions"]), A)  # (K, N, A)
        returns = torch.as_tensor(batch["returns"])
        discounts = torch.as_tensor(batch["discounts"])
        weights = torch.as_tensor(batch["weights"])
        K, N = returns.shape
        x, next_x = self._x(batch, "obs"), self._x(batch, "next_obs")

        # critic: y_i = G_i + d_i Q'_i(x', a'_1..a'_N), a'_j greedy under the target actors
        with torch.no_grad():
            next_a = one_hot(self.target_actors(next_obs).argmax(dim=-1), A)
            y = returns + discounts * self.target_critic(next_x, next_a.reshape(K, N * A))
        q = self.critic(x, actions.reshape(K, N * A))
        td = q - y
        critic_loss = ((td ** 2).mean(dim=1) * weights).mean()
        self.critic_opt.zero_grad(set_to_none=True)
        critic_loss.backward()
        clip_per_network(self.critic.nets, self.cfg.grad_clip)
        self.critic_opt.step()

        polyak_update(self.target_critic, self.critic, cfg.tau)
        self.updates += 1
        self.priorities = td.detach().abs().mean(dim=1).numpy()
        stats = {"critic_loss": float(critic_loss.detach()), "q_mean": float(q.detach().mean())}
        if (self.updates - 1) % cfg.actor_every == 0:  # updates 1, 1 + k, 1 + 2k, ...: the first one acts
            stats["actor_loss"] = self._actor_step(obs, x, actions)
        return stats

    def _actor_step(self, obs: torch.Tensor, x: torch.Tensor, actions: torch.Tensor) -> float:
        """Maximise Q_i(x, a_1.., a_i ~ pi_i(o_i), .., a_N) with the others' replayed actions; then move
        the target actors. Returns the actor loss."""
        cfg = self.cfg
        K, N, A = actions.shape
        logits = self.actors(obs)  # (K, N, A)
        sample = gumbel_softmax_st(logits, cfg.gumbel_temperature, self.gen)
        eye = torch.eye(N).view(N, 1, N, 1)  # block i replaces agent i's action
        joints = (eye * sample.unsqueeze(0) + (1 - eye) * actions.unsqueeze(0)).reshape(N, K, N * A)
        self.critic.requires_grad_(False)  # frozen: the actor step computes no gradient for the critic
        try:
            own_q = self.critic.own_values(x, joints)
            actor_loss = -own_q.mean() + cfg.actor_reg * (logits ** 2).mean()
            self.actor_opt.zero_grad(set_to_none=True)
            actor_loss.backward()
        finally:
            self.critic.requires_grad_(True)
        self.critic_opt.zero_grad(set_to_none=True)  # no gradient stays on the critic for a later step
        clip_per_network(self.actors.groups(), self.cfg.grad_clip)
        self.actor_opt.step()
        polyak_update(self.target_actors, self.actors, cfg.tau)
        return float(actor_loss.detach())

    # ------------------------------------------------------------------ state
    def state_dict(self) -> dict[str, Any]:
        return {"actors": self.actors.state_dict(), "critic": self.critic.state_dict(),
                "target_actors": self.target_actors.state_dict(), "target_critic": self.target_critic.state_dict(),
                "actor_opt": self.actor_opt.state_dict(), "critic_opt": self.critic_opt.state_dict(),
                "updates": self.updates, "rng": self.rng.bit_generator.state, "gen": self.gen.get_state()}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        for name in ("actors", "critic", "target_actors", "target_critic", "actor_opt", "critic_opt"):
            getattr(self, name).load_state_dict(state[name])
        self.updates = int(state["updates"])
        self.rng.bit_generator.state = state["rng"]
        self.gen.set_state(state["gen"])

    def agent_policy(self, i: int) -> AgentPolicy:
        net, desc, index = self.actors.agent_net(i)
        return AgentPolicy(copy.deepcopy(net).eval(), desc, "actor", self.spec.agents[i], index,
                           self.spec.describe()["obs_space"])
