"""On-policy actor-critic: PPO's clipped objective with GAE, and a local, central or joint-action critic.

Actors map each agent's own observation to action logits (one net per agent, or one shared net with an
agent-id input); they act alone, in training, at evaluation and in every saved policy. The critic is used
in training only (centralised training, decentralised execution), and ``learner.critic`` says what it sees:

``local``
    Each agent's value from its own observation, a value net beside each actor (shared under parameter
    sharing): independent learners (de Witt et al. 2020).
``central``
    One network for the team over the joint input x (every agent's observation stacked as channels, or
    the env's state: ``critic_input``, as for maddpg), with a value head per agent (Yu et al. 2022).
``joint_action``
    The central network also sees the other agents' actions and gives agent i one value per own action,
    ``Q_i(x, (u_-i, a))``, in one pass. The actor's advantage is counterfactual (Foerster et al. 2018):
    ``Q_i(x, u) - sum_a pi_i(a | o_i) Q_i(x, (u_-i, a))``.

One update, top to bottom (:meth:`PPO.update`):

1. Over the whole rollout, without gradients: the old log-probabilities of the actions taken and the
   critic's values (for ``joint_action``, V is the counterfactual baseline, the expected Q of the agent's
   own policy with the others' actions as taken; where those are unknown, after the rollout's last step
   and at an episode's final observation, they are drawn from the current policies).
2. GAE (:func:`marl_core.targets.gae`) on the learned rewards: a time-limit end bootstraps from the final
   observation's value, a termination does not. The critic's target is the lambda-return.
3. ``epochs`` passes over ``minibatches`` shuffled minibatches of joint steps: the clipped surrogate
   with an entropy bonus for the actors, the squared error to the lambda-return for the critic; advantages
   normalised per minibatch; each actor (or the shared one) and each critic network clipped to
   ``grad_clip`` on its own; separate Adam optimisers with one learning-rate schedule.

Statistics returned (TensorBoard ``train/*``): ``policy_loss``, ``value_loss``, ``entropy``,
``approx_kl``, ``clip_fraction``, ``explained_variance`` (of the values before the update against the
lambda-returns), ``advantage_std`` and ``lr``.

Choices where the papers leave room (stated so results can be read): the actor's output layer starts
at 1/100 of its default scale, so every policy starts near uniform (common practice, no source); the
critic's value is the plain squared error (no value clipping); Adam's epsilon is 1e-5 (common practice,
no source). Sources: docs/sources.md, "PPO", "GAE", "COMA", "Centralised value functions".
"""

from __future__ import annotations

import copy
from typing import Any

import numpy as np
import torch
from torch import nn

from marl_core.errors import ConfigError
from marl_core.learners.maddpg import critic_input_shape, resolve_critic_input
from marl_core.nets import AgentNets, Encoder
from marl_core.policy import AgentPolicy
from marl_core.spec import TeamSpec
from marl_core.targets import (
    clip_per_network,
    clipped_surrogate,
    counterfactual_baseline,
    explained_variance,
    gae,
    linear_schedule,
    normalise,
    one_hot,
    set_lr_scale,
)

__all__ = ["PPO", "CentralValue", "JointActionCritic", "CRITICS"]

CRITICS: tuple[str, ...] = ("local", "central", "joint_action")
VALUE_CHUNK = 4096  # joint steps per no-gradient pass over the rollout


class CentralValue(nn.Module):
    """One team network: V_i(x) for every agent i from the joint input x.

    Shape:
        x: (K, *input_shape) -> (K, N)
    """

    def __init__(self, input_shape: tuple[int, ...], num_agents: int, hidden: int, conv_channels, conv_strides):
        super().__init__()
        self.num_agents = num_agents
        self.encoder = Encoder(input_shape, hidden, tuple(conv_channels), conv_strides)
        self.mlp = nn.Sequential(nn.Linear(self.encoder.out_dim, hidden), nn.ReLU(), nn.Linear(hidden, num_agents))

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        return self.mlp(self.encoder(x))

    def extra_repr(self) -> str:
        return f"num_agents={self.num_agents}"


class JointActionCritic(nn.Module):
    """One team network: Q_i(x, (u_-i, a)) for every agent i and own action a, in one pass.

    The joint input x is encoded once; agent i's row adds the other agents' one-hot actions (its own block
    zeroed) and its one-hot id, and an MLP gives one value per own action.

    Shape:
        x: (K, *input_shape), actions: (K, N) int -> (K, N, A)
    """

    def __init__(self, input_shape: tuple[int, ...], num_agents: int, num_actions: int, hidden: int,
                 conv_channels, conv_strides):
        super().__init__()
        N, A = num_agents, num_actions
        self.num_agents, self.num_actions = N, A
        self.encoder = Encoder(input_shape, hidden, tuple(conv_channels), conv_strides)
        self.mlp = nn.Sequential(nn.Linear(self.encoder.out_dim + N * A + N, hidden), nn.ReLU(),
                                 nn.Linear(hidden, A))
        others = 1.0 - torch.eye(N)  # row i keeps every agent's action block but its own
        self.register_buffer("others", others.repeat_interleave(A, dim=1), persistent=False)  # (N, N*A)
        self.register_buffer("ids", torch.eye(N), persistent=False)

    def forward(self, x: torch.Tensor, actions: torch.Tensor) -> torch.Tensor:
        K, N = actions.shape
        h = self.encoder(x)  # (K, F)
        joint = one_hot(actions, self.num_actions).reshape(K, 1, N * self.num_actions)
        rows = torch.cat([h.unsqueeze(1).expand(K, N, h.shape[1]), joint * self.others,
                          self.ids.expand(K, N, N)], dim=2)
        return self.mlp(rows)

    def extra_repr(self) -> str:
        return f"num_agents={self.num_agents}, num_actions={self.num_actions}"


class PPO:
    """On-policy actor-critic learner (see the module docstring).

    Shape:
        act: obs (B, N, *obs_shape) -> actions (B, N) int64 (actors only, local observations)
        update: a full :class:`marl_core.buffer.RolloutBuffer` -> dict of float statistics
    """

    kind = "ppo"
    on_policy = True
    priorities = None

    def __init__(self, spec: TeamSpec, cfg: Any, seed: int = 0):
        self.spec, self.cfg = spec, cfg
        N, A = spec.num_agents, spec.num_actions
        self.critic_kind = cfg.critic
        self.critic_source = None
        if cfg.critic != "local":
            source = resolve_critic_input(cfg.critic_input, spec.state_space is not None)
            if source == "state" and spec.state_space is None:
                raise ConfigError("learner.critic_input = 'state' is not allowed: this env has no state(); "
                                  "expected 'observations' or 'auto'")
            self.critic_source = source
        net = dict(hidden=cfg.hidden, conv_channels=cfg.conv_channels, conv_strides=cfg.conv_strides)
        with torch.random.fork_rng(devices=[]):  # seeded initial weights, global RNG left as it was
            torch.manual_seed(seed)
            self.actors = AgentNets(N, cfg.share_parameters, obs_shape=spec.obs_shape, num_actions=A,
                                    dueling=False, **net)
            with torch.no_grad():
                for n in self.actors.nets:
                    n.head.weight.mul_(0.01)
                    n.head.bias.zero_()
            if cfg.critic == "local":
                self.critic: nn.Module = AgentNets(N, cfg.share_parameters, obs_shape=spec.obs_shape,
                                                   num_actions=1, dueling=False, **net)
            else:
                shape = critic_input_shape(spec, self.critic_source)
                self.critic = (CentralValue(shape, N, **net) if cfg.critic == "central"
                               else JointActionCritic(shape, N, A, **net))
        self.actor_opt = torch.optim.Adam(self.actors.parameters(), lr=cfg.lr, eps=1e-5)
        self.critic_opt = torch.optim.Adam(self.critic.parameters(), lr=cfg.critic_lr, eps=1e-5)
        self.gen = torch.Generator().manual_seed(seed)  # exploration, minibatches, drawn actions
        self.eval_gen = torch.Generator().manual_seed(seed + 1)  # evaluation's draws, apart from training's
        self.updates = 0
        self.lr_scale = 1.0

    @property
    def uses_state(self) -> bool:
        return self.critic_source == "state"

    def schedule(self, env_steps: int) -> None:
        """Scale both learning rates from 1 to ``lr_end / lr`` over ``lr_decay_steps`` env steps."""
        c = self.cfg
        if c.lr_end is not None:
            self.lr_scale = linear_schedule(env_steps, 1.0, c.lr_end / c.lr, c.lr_decay_steps)
            set_lr_scale(self.actor_opt, c.lr, self.lr_scale)
            set_lr_scale(self.critic_opt, c.critic_lr, self.lr_scale)

    def epsilon(self, env_steps: int) -> float:
        """No epsilon: exploration is the policy's own randomness (kept for the loop's logging)."""
        return 0.0

    # ------------------------------------------------------------------ acting
    @staticmethod
    def _draw(logits: torch.Tensor, gen: torch.Generator) -> torch.Tensor:
        """One draw from softmax(logits) per row (the Gumbel-max trick)."""
        u = torch.rand(logits.shape, generator=gen).clamp_(1e-12, 1.0)
        return (logits - (-u.log()).log()).argmax(dim=-1)

    @torch.no_grad()
    def act(self, obs: np.ndarray, explore: bool, env_steps: int = 0) -> np.ndarray:
        logits = self.actors(torch.as_tensor(obs))
        if explore:
            return self._draw(logits, self.gen).numpy()
        if self.cfg.eval_policy == "greedy":
            return logits.argmax(dim=-1).numpy()
        return self._draw(logits, self.eval_gen).numpy()

    # ------------------------------------------------------------------ the critic
    def _x(self, obs: torch.Tensor, state: np.ndarray | None) -> torch.Tensor:
        """The central critic's joint input: the state, or every agent's observation stacked."""
        if self.critic_source == "state":
            return torch.as_tensor(state)
        return obs.reshape(obs.shape[0], *critic_input_shape(self.spec, "observations"))

    def _critic(self, obs: torch.Tensor, state: np.ndarray | None, actions: torch.Tensor) -> torch.Tensor:
        """Local: (K, N) values; central: (K, N) values; joint_action: (K, N, A) Q values."""
        if self.critic_kind == "local":
            return self.critic(obs).squeeze(-1)
        x = self._x(obs, state)
        return self.critic(x) if self.critic_kind == "central" else self.critic(x, actions)

    @torch.no_grad()
    def _values(self, obs: np.ndarray, state: np.ndarray | None,
                actions: np.ndarray | None) -> dict[str, torch.Tensor]:
        """Old log-probs and values of K joint steps (actions None: drawn from the current policies, for
        observations after which no action was recorded). Returns ``logp`` (K, N) (when actions are given),
        ``value`` (K, N) (V, or the counterfactual baseline) and, for joint_action, ``q_taken`` (K, N)."""
        o = torch.as_tensor(obs)
        logits = self.actors(o)
        logp_all = logits.log_softmax(dim=-1)
        given = actions is not None
        a = torch.as_tensor(actions) if given else self._draw(logits, self.gen)
        out: dict[str, torch.Tensor] = {}
        if given:
            out["logp"] = logp_all.gather(-1, a.unsqueeze(-1)).squeeze(-1)
        c = self._critic(o, state, a)
        if self.critic_kind == "joint_action":
            out["value"] = counterfactual_baseline(c, logp_all.exp())
            out["q_taken"] = c.gather(-1, a.unsqueeze(-1)).squeeze(-1)
        else:
            out["value"] = c
        return out

    # ------------------------------------------------------------------ learning
    def update(self, rollout: Any) -> dict[str, float]:
        cfg = self.cfg
        T, B = rollout.t, rollout.num_envs
        M = T * B
        # 1. old log-probs and values over the rollout, in chunks, without gradients
        parts: dict[str, list[torch.Tensor]] = {}
        for lo in range(0, M, VALUE_CHUNK):
            d = rollout.get(np.arange(lo, min(lo + VALUE_CHUNK, M)))
            for k, v in self._values(d["obs"], d["state"], d["actions"]).items():
                parts.setdefault(k, []).append(v)
        old = {k: torch.cat(v).reshape(T, B, -1) for k, v in parts.items()}
        last_obs, last_state = rollout.bootstrap()
        bootstrap = self._values(last_obs, last_state, None)["value"].numpy()
        finals = {t: (c, self._values(o, s, None)["value"].numpy()) for t, c, o, s in rollout.finals()}
        values = old["value"].numpy()
        next_values = rollout.next_values_from(values, bootstrap, finals)

        # 2. GAE and lambda-returns on the learned rewards
        col = rollout.columns()
        adv, returns = gae(torch.as_tensor(col["rewards"]), old["value"], torch.as_tensor(next_values),
                           torch.as_tensor(col["terminated"]), torch.as_tensor(col["end"])[..., None],
                           cfg.gamma, cfg.gae_lambda)
        if self.critic_kind == "joint_action":  # counterfactual advantage; the critic learns Q(x, u)
            predicted, adv = old["q_taken"], old["q_taken"] - old["value"]
        else:
            predicted = old["value"]
        stats = {"explained_variance": explained_variance(predicted.reshape(-1), returns.reshape(-1)),
                 "advantage_std": float(adv.std())}
        adv, returns, old_logp = adv.reshape(M, -1), returns.reshape(M, -1), old["logp"].reshape(M, -1)

        # 3. epochs of minibatches
        size = max(1, M // cfg.minibatches)
        sums = {k: 0.0 for k in ("policy_loss", "value_loss", "entropy", "approx_kl", "clip_fraction")}
        steps = 0
        for _ in range(cfg.epochs):
            order = torch.randperm(M, generator=self.gen).numpy()
            for lo in range(0, M - size + 1, size):
                idx = order[lo:lo + size]
                d = rollout.get(idx)
                for k, v in self._step(d, old_logp[idx], adv[idx], returns[idx]).items():
                    sums[k] += v
                steps += 1
        self.updates += 1
        return {**{k: v / max(steps, 1) for k, v in sums.items()}, **stats,
                "lr": cfg.lr * self.lr_scale}

    def _step(self, d: dict[str, Any], old_logp: torch.Tensor, adv: torch.Tensor,
              returns: torch.Tensor) -> dict[str, float]:
        """One minibatch: an actor step and a critic step."""
        cfg = self.cfg
        obs = torch.as_tensor(d["obs"])
        actions = torch.as_tensor(d["actions"])
        if cfg.normalize_advantages:
            adv = normalise(adv)
        logits = self.actors(obs)
        logp_all = logits.log_softmax(dim=-1)
        logp = logp_all.gather(-1, actions.unsqueeze(-1)).squeeze(-1)
        entropy = -(logp_all.exp() * logp_all).sum(dim=-1).mean()
        surrogate, kl, clipped = clipped_surrogate(logp, old_logp, adv, cfg.clip)
        actor_loss = surrogate - cfg.entropy_coef * entropy
        self.actor_opt.zero_grad(set_to_none=True)
        actor_loss.backward()
        clip_per_network(self.actors.groups(), self.cfg.grad_clip)
        self.actor_opt.step()

        c = self._critic(obs, d["state"], actions)
        if self.critic_kind == "joint_action":
            c = c.gather(-1, actions.unsqueeze(-1)).squeeze(-1)
        value_loss = 0.5 * ((c - returns) ** 2).mean()
        self.critic_opt.zero_grad(set_to_none=True)
        value_loss.backward()
        clip_per_network(self.critic.groups() if self.critic_kind == "local" else [self.critic],
                         self.cfg.grad_clip)
        self.critic_opt.step()
        return {"policy_loss": float(surrogate.detach()), "value_loss": float(value_loss.detach()),
                "entropy": float(entropy.detach()), "approx_kl": float(kl), "clip_fraction": float(clipped)}

    # ------------------------------------------------------------------ state
    def state_dict(self) -> dict[str, Any]:
        return {"actors": self.actors.state_dict(), "critic": self.critic.state_dict(),
                "actor_opt": self.actor_opt.state_dict(), "critic_opt": self.critic_opt.state_dict(),
                "updates": self.updates, "lr_scale": self.lr_scale, "gen": self.gen.get_state(),
                "eval_gen": self.eval_gen.get_state()}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        for name in ("actors", "critic", "actor_opt", "critic_opt"):
            getattr(self, name).load_state_dict(state[name])
        self.updates, self.lr_scale = int(state["updates"]), float(state["lr_scale"])
        self.gen.set_state(state["gen"])
        self.eval_gen.set_state(state["eval_gen"])

    def agent_policy(self, i: int) -> AgentPolicy:
        net, desc, index = self.actors.agent_net(i)
        return AgentPolicy(copy.deepcopy(net).eval(), desc, "actor", self.spec.agents[i], index,
                           self.spec.describe()["obs_space"], sample=self.cfg.eval_policy == "sample")
