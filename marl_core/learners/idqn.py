"""Independent DQN: every agent learns its own Q-function from its own observations and rewards.

Per agent: a Q-network (or one shared network with an agent-id input), a target network copied every
``target_update_every`` updates, epsilon-greedy exploration on a linear schedule, the Huber loss and gradient
clipping (Mnih et al. 2015). Switches, each on or off independently: ``double`` (van Hasselt et al. 2016),
``dueling`` (Wang et al. 2016), ``n_step`` returns (computed by the replay) and ``prioritized`` replay
(Schaul et al. 2016; the replay keeps the priorities, this learner reports |TD error| per transition).
The arithmetic lives in :mod:`marl_core.targets`. Sources: docs/sources.md, "DQN";
docs/sources.md, "Double DQN"; docs/sources.md, "Dueling networks"; docs/sources.md, "Prioritized replay".
"""

from __future__ import annotations

import copy
from typing import Any

import numpy as np
import torch

from marl_core.nets import AgentNets
from marl_core.policy import AgentPolicy
from marl_core.spec import TeamSpec
from marl_core.targets import dqn_target, huber, linear_schedule, set_lr_scale, td_priorities

__all__ = ["IDQN"]


class IDQN:
    """Independent DQN learner.

    Shape:
        act: obs (B, N, *obs_shape) -> actions (B, N) int64
        update: a replay batch (``marl_core.replay``) -> dict of float statistics
    """

    kind = "idqn"

    def __init__(self, spec: TeamSpec, cfg: Any, seed: int = 0):
        self.spec, self.cfg = spec, cfg
        with torch.random.fork_rng(devices=[]):  # seeded initial weights, global RNG left as it was
            torch.manual_seed(seed)
            self.q = AgentNets(spec.num_agents, cfg.share_parameters, obs_shape=spec.obs_shape,
                               num_actions=spec.num_actions, hidden=cfg.hidden, conv_channels=cfg.conv_channels,
                               dueling=cfg.dueling, conv_strides=cfg.conv_strides)
        self.target = copy.deepcopy(self.q).requires_grad_(False)
        self.opt = torch.optim.Adam(self.q.parameters(), lr=cfg.lr)
        self.rng = np.random.default_rng(seed)
        self.updates = 0
        self.priorities: np.ndarray | None = None  # |TD| per transition of the last update

    def schedule(self, env_steps: int) -> None:
        """Move the learning rate along its schedule (``lr`` -> ``lr_end`` over ``lr_decay_steps``)."""
        c = self.cfg
        if c.lr_end is not None:
            set_lr_scale(self.opt, c.lr, linear_schedule(env_steps, 1.0, c.lr_end / c.lr, c.lr_decay_steps))

    # ------------------------------------------------------------------ acting
    def epsilon(self, env_steps: int) -> float:
        c = self.cfg
        return linear_schedule(env_steps, c.eps_start, c.eps_end, c.eps_decay_steps)

    @torch.no_grad()
    def act(self, obs: np.ndarray, explore: bool, env_steps: int = 0) -> np.ndarray:
        greedy = self.q(torch.as_tensor(obs)).argmax(dim=-1).numpy()
        eps = self.epsilon(env_steps) if explore else self.cfg.eval_eps
        if eps <= 0:
            return greedy
        rand = self.rng.random(greedy.shape) < eps
        return np.where(rand, self.rng.integers(self.spec.num_actions, size=greedy.shape), greedy)

    # ------------------------------------------------------------------ learning
    def update(self, batch: dict[str, np.ndarray]) -> dict[str, float]:
        obs = torch.as_tensor(batch["obs"])
        next_obs = torch.as_tensor(batch["next_obs"])
        actions = torch.as_tensor(batch["actions"]).long()
        returns = torch.as_tensor(batch["returns"])
        discounts = torch.as_tensor(batch["discounts"])
        weights = torch.as_tensor(batch["weights"])
        with torch.no_grad():
            next_target = self.target(next_obs)
            next_online = self.q(next_obs) if self.cfg.double else None
            y = dqn_target(returns, discounts, next_target, next_online)
        q = self.q(obs).gather(-1, actions.unsqueeze(-1)).squeeze(-1)  # (K, N)
        td = q - y
        loss = (huber(td).mean(dim=1) * weights).mean()
        self.opt.zero_grad(set_to_none=True)
        loss.backward()
        if self.cfg.grad_clip:
            for group in self.q.groups():  # per agent: independent learners are clipped independently
                torch.nn.utils.clip_grad_norm_(group.parameters(), self.cfg.grad_clip)
        self.opt.step()
        self.updates += 1
        if self.updates % self.cfg.target_update_every == 0:
            self.target.load_state_dict(self.q.state_dict())
        self.priorities = td_priorities(td.detach()).numpy()
        return {"loss": float(loss.detach()), "q_mean": float(q.detach().mean()), "td_abs": float(td.detach().abs().mean())}

    # ------------------------------------------------------------------ state
    def state_dict(self) -> dict[str, Any]:
        return {"q": self.q.state_dict(), "target": self.target.state_dict(), "opt": self.opt.state_dict(),
                "updates": self.updates, "rng": self.rng.bit_generator.state}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.q.load_state_dict(state["q"])
        self.target.load_state_dict(state["target"])
        self.opt.load_state_dict(state["opt"])
        self.updates = int(state["updates"])
        self.rng.bit_generator.state = state["rng"]

    def agent_policy(self, i: int) -> AgentPolicy:
        net, desc, index = self.q.agent_net(i)
        return AgentPolicy(copy.deepcopy(net).eval(), desc, "q", self.spec.agents[i], index,
                           self.spec.describe()["obs_space"])
