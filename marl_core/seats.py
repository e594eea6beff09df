"""Mixed teams in one run: the config's ``seats`` section, between the trainer and the learners.

``seats`` maps an agent id, or several joined by commas (a group), to what sits there::

    seats:
      agent_0: {learner: {kind: maddpg}}                       # a learner of its own
      agent_1,agent_2: {policy: runs/earlier/policies}         # saved policies, kept fixed
      agent_3: {member: greedy}                                # a scripted member (or random, stay)

Agents not named form one more group with the top-level ``learner`` (idqn or maddpg: it owns the replay
keys). A group's learner sees only its own seats: its observations, actions and rewards are the group's columns of the joint transition, and a
centralised critic inside a group sees the joint action of that group (parameter sharing, too, applies
within a group). Every seat is stepped together in one env, and every group's transitions go to one replay
(the top-level learner's replay keys: ``batch_size``, ``replay_size``, ``warmup_steps``, ``train_every``,
``replay_ratio``, ...); each update draws one batch and gives each learning group its columns. A group
whose discount differs from the replay's (the top-level learner's) has its bootstrap factor rescaled,
which is exact for 1-step returns; ``n_step > 1``, prioritized replay and a critic reading the env state
are therefore not allowed with seats.

A group whose learner is on-policy (``seats.X.learner.kind: ppo``) learns from rollouts of its own seats
instead of the replay: the same steps that go into the replay also go, column by column, into the group's
rollout buffer (its ``rollout_steps`` vector steps of every copy), and the group updates each time that
buffer is full (:class:`GroupRollouts`). This is a clever learner among naive ones in one team. Its
rollout in progress is dropped at a checkpoint: a resumed run starts a new one.

A saved policy is copied into the run directory (``seats/<agent>.pt``) when the run starts, so a resume
does not depend on the original file. Checkpoints hold every learning group's state and every member's
random generator. ``summary.json`` gets ``groups``: each group's agents, what sits there, and its mean
return.
"""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from marl_core.errors import CheckpointError, ConfigError
from marl_core.spec import TeamSpec

__all__ = ["Group", "SeatedTeam", "GroupRollouts", "parse_groups", "DEFAULT_GROUP"]

DEFAULT_GROUP = "learner"  # the name of the group of agents the seats section does not name


@dataclass
class Group:
    """One group of seats: its name (the seats key, or ``learner``), agents and seat indices, and one of a
    learner config, a policy path or a member name."""

    name: str
    agents: tuple[str, ...]
    index: np.ndarray
    learner: Any = None
    policy: str | None = None
    member: str | None = None

    @property
    def what(self) -> str:
        if self.learner is not None:
            return f"learner {self.learner.kind}"
        return f"policy {self.policy}" if self.policy is not None else f"member {self.member}"


def _reads_state(learner: Any) -> bool:
    """A critic that asks for the env state (which holds every seat, not the group's own)."""
    if learner.kind == "ppo" and learner.critic == "local":
        return False
    return learner.kind in ("maddpg", "ppo") and learner.critic_input == "state"


def parse_groups(cfg: Any, agents: tuple[str, ...], env_name: str) -> list[Group]:
    """The seat groups of a run config (``cfg.seats``) over the env's ``agents``, checked."""
    from marl_core.baselines import renamed_team, team_names

    taken: dict[str, str] = {}
    groups: list[Group] = []
    for key, seat in (cfg.seats or {}).items():
        names = tuple(a.strip() for a in key.split(","))
        for a in names:
            if a not in agents:
                raise ConfigError(f"seats.{key}: {a!r} is not an agent of {env_name}; expected one of "
                                  f"{', '.join(agents)} (or several joined by commas)")
            if a in taken:
                raise ConfigError(f"seats.{key}: {a} is already seated by seats.{taken[a]}; each agent sits once")
            taken[a] = key
        if renamed_team(f"seats.{key}.member", seat.member):
            raise ConfigError(renamed_team(f"seats.{key}.member", seat.member))
        if seat.member is not None and seat.member not in team_names(env_name):
            raise ConfigError(f"seats.{key}.member = {seat.member!r} is not allowed for {env_name}; expected one "
                              f"of {', '.join(team_names(env_name))}")
        if seat.learner is not None and _reads_state(seat.learner):
            raise ConfigError(f"seats.{key}.learner.critic_input = 'state' is not allowed: the env state holds "
                              f"every seat; use 'observations' (the group's own)")
        idx = np.array([agents.index(a) for a in names])
        groups.append(Group(key, names, idx, learner=seat.learner, policy=seat.policy, member=seat.member))
    rest = tuple(a for a in agents if a not in taken)
    top = cfg.learner
    if rest and top.kind == "maddpg" and top.critic_input == "state":
        raise ConfigError("learner.critic_input = 'state' is not allowed with seats: the env state holds every "
                          "seat; use 'observations' (the group's own)")
    if rest:
        groups.append(Group(DEFAULT_GROUP, rest, np.array([agents.index(a) for a in rest]), learner=cfg.learner))
    if not any(g.learner is not None for g in groups):
        raise ConfigError("seats: every agent is a fixed policy or a member; nothing would learn (leave at least "
                          "one agent to a learner)")
    L = cfg.learner
    if getattr(L, "n_step", 1) != 1 or getattr(L, "prioritized", False):
        raise ConfigError("learner.n_step > 1 and learner.prioritized are not allowed with seats: the seats "
                          "share one replay of 1-step transitions, drawn uniformly")
    return groups


class SeatedTeam:
    """The whole team as one learner for the trainer: ``act`` joins every group's actions, ``update`` gives
    each learning group its columns of the batch. Members that depend on an env (scripted teams) are bound
    per env: :meth:`acting` returns the policy to use on a given env."""

    priorities = None

    def __init__(self, spec: TeamSpec, cfg: Any, seed: int, env_name: str, run_dir: Path | None):
        from marl_core.learners import build_learner
        from marl_core.policy import load_policy

        self.spec, self.cfg = spec, cfg
        self.groups = parse_groups(cfg, spec.agents, env_name)
        self.replay_gamma = cfg.learner.gamma
        self.learners: dict[str, Any] = {}
        self.policies: dict[int, Any] = {}  # seat index -> fixed policy
        for k, g in enumerate(self.groups):
            if g.learner is not None:
                sub = TeamSpec(g.agents, spec.obs_space, spec.num_actions, None)
                self.learners[g.name] = build_learner(sub, g.learner, seed + 7919 * k)
            elif g.policy is not None:
                for a, i in zip(g.agents, g.index):
                    path = self._policy_file(g, a, run_dir)
                    pol = load_policy(path)
                    if tuple(pol.obs_space["shape"]) != tuple(spec.obs_space.shape) or \
                            pol.num_actions != spec.num_actions:
                        raise CheckpointError(f"seats.{g.name}.policy: '{path}' expects observations of shape "
                                              f"{tuple(pol.obs_space['shape'])} and {pol.num_actions} actions; "
                                              f"the game gives {tuple(spec.obs_space.shape)} and "
                                              f"{spec.num_actions}")
                    self.policies[int(i)] = pol.for_seat(int(i))
        self._rngs = {g.name: np.random.default_rng(seed + 104_729 * (k + 1))
                      for k, g in enumerate(self.groups) if g.member is not None}
        self._bound: dict[int, dict[str, Any]] = {}
        self.uses_state = False
        on_policy = [g for g in self.groups if g.learner is not None and _on_policy(self.learners[g.name])]
        self.rollouts = GroupRollouts(on_policy, self.learners, cfg.env.num_envs, spec) if on_policy else None

    @staticmethod
    def _policy_file(g: Group, agent: str, run_dir: Path | None) -> Path:
        """The policy file of ``agent``: the run's own copy once made, else the configured path."""
        if run_dir is not None and (run_dir / "seats" / f"{agent}.pt").is_file():
            return run_dir / "seats" / f"{agent}.pt"
        path = Path(g.policy)
        if path.is_dir():
            path = path / f"{agent}.pt"
        elif len(g.agents) > 1:
            raise ConfigError(f"seats.{g.name}.policy = {g.policy!r} is not allowed: a group of "
                              f"{len(g.agents)} seats needs a directory with one <agent>.pt per seat")
        if not path.is_file():
            raise CheckpointError(f"seats.{g.name}.policy: '{path}' not found")
        return path

    def keep_policies(self, run_dir: Path) -> None:
        """Copy every fixed policy into ``run_dir/seats/`` (a resume then needs nothing outside the run)."""
        (run_dir / "seats").mkdir(exist_ok=True)
        for g in self.groups:
            if g.policy is not None:
                for a in g.agents:
                    dst = run_dir / "seats" / f"{a}.pt"
                    if not dst.is_file():
                        shutil.copyfile(self._policy_file(g, a, None), dst)

    # -- acting
    def acting(self, env: Any):
        """``obs -> actions`` of the whole team on ``env`` (scripted members read that env's state)."""
        from marl_core.baselines import make_team

        key = id(env)
        if key not in self._bound:
            self._bound[key] = {g.name: make_team(g.member, env, int(self._rngs[g.name].integers(2**31)))
                                for g in self.groups if g.member is not None}
        bound = self._bound[key]

        def policy(obs: np.ndarray, explore: bool = False, env_steps: int | None = None) -> np.ndarray:
            return self._act(obs, explore, env_steps, bound)

        return policy

    def _act(self, obs, explore, env_steps, bound) -> np.ndarray:
        out = np.zeros(obs.shape[:2], np.int64)
        for g in self.groups:
            if g.learner is not None:
                out[:, g.index] = self.learners[g.name].act(obs[:, g.index], explore=explore, env_steps=env_steps)
            elif g.policy is not None:
                for i in g.index:
                    out[:, i] = self.policies[int(i)].act(obs[:, i])
            else:
                out[:, g.index] = np.asarray(bound[g.name](obs))[:, g.index]
        return out

    def act(self, obs: np.ndarray, explore: bool = True, env_steps: int | None = None) -> np.ndarray:
        raise TypeError("SeatedTeam.act needs an env for its members: use acting(env)(obs, explore, env_steps)")

    # -- learning
    def update(self, batch: dict[str, np.ndarray]) -> dict[str, float]:
        stats: dict[str, float] = {}
        for g in self.groups:
            if g.learner is None or _on_policy(self.learners[g.name]):
                continue
            sub = {k: (v[:, g.index] if k in ("obs", "next_obs", "actions", "returns", "discounts") else v)
                   for k, v in batch.items() if k not in ("state", "next_state")}
            if g.learner.gamma != self.replay_gamma:  # 1-step returns: discounts = gamma_replay * alive
                sub["discounts"] = sub["discounts"] * np.float32(g.learner.gamma / self.replay_gamma)
            for k, v in self.learners[g.name].update(sub).items():
                stats[k if g.name == DEFAULT_GROUP else f"{g.name}/{k}"] = v
        return stats

    def schedule(self, env_steps: int) -> None:
        for lr in self.learners.values():
            if not _on_policy(lr):  # on-policy groups move their schedule when they update
                lr.schedule(env_steps)

    def epsilon(self, env_steps: int) -> float:
        first = self.learners.get(DEFAULT_GROUP) or next(iter(self.learners.values()))
        return first.epsilon(env_steps)

    def state_dict(self) -> dict[str, Any]:
        return {"learners": {n: lr.state_dict() for n, lr in self.learners.items()},
                "rngs": {n: r.bit_generator.state for n, r in self._rngs.items()}}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        for n, lr in self.learners.items():
            lr.load_state_dict(state["learners"][n])
        for n, r in self._rngs.items():
            r.bit_generator.state = state["rngs"][n]
        self._bound.clear()

    def agent_policy(self, i: int):
        """Agent ``i``'s policy: its group learner's, or its fixed policy; None for a member."""
        for g in self.groups:
            if i in g.index:
                if g.learner is not None:
                    return self.learners[g.name].agent_policy(int(np.nonzero(g.index == i)[0][0]))
                return self.policies.get(i)
        return None

    def group_results(self, returns: dict[str, float]) -> dict[str, dict[str, Any]]:
        """Per group: its agents, what sits there and the mean of its agents' returns."""
        return {g.name: {"agents": list(g.agents), "seated": g.what,
                         "return_mean": float(np.mean([returns[a] for a in g.agents]))} for g in self.groups}


def _on_policy(learner: Any) -> bool:
    return bool(getattr(learner, "on_policy", False))


class GroupRollouts:
    """The rollout buffers of a seated team's on-policy groups, fed from the run's own steps.

    ``start(obs)`` begins every group's rollout from the team's observation; ``add(...)`` records one
    vector step in each group's buffer (its columns) and updates a group whose buffer is full, returning
    its statistics (keys prefixed with the group's name, as :meth:`SeatedTeam.update` does).

    Shape:
        start: obs (B, N, ...);  add: actions (B, N), learned rewards (B, N), a ``team_env.Step``,
        next_obs (B, N, ...)
    """

    def __init__(self, groups: list[Group], learners: dict[str, Any], num_envs: int, spec: TeamSpec):
        from marl_core.buffer import RolloutBuffer, zero_one

        self.parts = []
        for g in groups:
            L = g.learner
            buf = RolloutBuffer(L.rollout_steps, num_envs, len(g.agents), spec.obs_shape, spec.obs_dtype,
                                pack=L.pack_rollout and zero_one(spec.obs_space))
            self.parts.append((g, learners[g.name], buf))

    def start(self, obs: np.ndarray) -> None:
        for g, _, buf in self.parts:
            buf.start(obs[:, g.index])

    def add(self, actions: np.ndarray, learned: np.ndarray, st: Any, next_obs: np.ndarray,
            env_steps: int) -> dict[str, float]:
        stats: dict[str, float] = {}
        for g, learner, buf in self.parts:
            i = g.index
            buf.add(actions[:, i], learned[:, i], st.terminated[:, i], st.end, st.obs[:, i], next_obs[:, i])
            if buf.full:
                learner.schedule(env_steps)
                for k, v in learner.update(buf).items():
                    stats[k if g.name == DEFAULT_GROUP else f"{g.name}/{k}"] = v
                buf.start(next_obs[:, i])
        return stats
