"""One rollout path for training and evaluation: collect steps from a batched team env under a policy.

:class:`Collector` keeps a :class:`marl_core.team_env.TeamEnv` and its current observations and steps it with
the actions a policy chose. Training steps it once per loop iteration; :func:`evaluate` steps a fresh one
until the wanted number of episodes has finished, so an evaluation measures exactly what training saw, with
exploration off. Episode results are the per-agent returns and the four social outcome metrics
(``envs.metrics``) of each finished episode, averaged.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from envs.metrics import BEHAVIOUR_NAMES, METRIC_NAMES, social_outcomes
from marl_core.team_env import Step, TeamEnv

__all__ = ["Collector", "evaluate", "random_policy", "BEHAVIOUR"]

BEHAVIOUR: tuple[str, ...] = BEHAVIOUR_NAMES  # envs.metrics: per-agent event counts per episode

Policy = Callable[[np.ndarray], np.ndarray]  # obs (B, N, ...) -> actions (B, N)


class Collector:
    """A team env and its current observation/state; ``step(actions)`` advances it (auto-reset)."""

    def __init__(self, env: TeamEnv, seed: int):
        self.env = env
        self.obs, self.state = env.reset(seed)

    def step(self, actions: np.ndarray) -> Step:
        st = self.env.step(actions)
        self.obs, self.state = st.obs, st.state
        if st.end.any():
            end = st.end
            self.obs = np.where(end.reshape(-1, *[1] * (st.obs.ndim - 1)), st.reset_obs, st.obs)
            if st.state is not None:
                self.state = np.where(end.reshape(-1, *[1] * (st.state.ndim - 1)), st.reset_state, st.state)
        return st


def random_policy(num_actions: int, seed: int) -> Policy:
    """A uniformly random team."""
    rng = np.random.default_rng(seed)
    return lambda obs: rng.integers(num_actions, size=obs.shape[:2])


def evaluate(env: TeamEnv, policy: Policy, episodes: int, seed: int, gif: bool = False,
             keep_episodes: bool = False) -> dict[str, Any]:
    """Play ``episodes`` episodes over the env's copies (reset with ``seed``) and average the results.

    Returns ``episodes``, per-agent mean ``returns``, ``return_mean`` (mean over agents), the four social
    outcome metrics (means over episodes, NaN values left out), ``episode_length``, per-agent
    ``reward_per_round`` (the mean over episodes of return / episode length); where the env reports
    them (our games), ``behaviour``: each of :data:`BEHAVIOUR` per agent per episode, the mean over agents,
    and ``behaviour_per_agent``: agent -> measure -> count per episode; and, with ``gif``, the
    ``frames`` of copy 0's first episode: its first state, then the state after each step. The env must be
    made with ``render=True`` for the last one: the env resets copy 0 inside the step that ends its episode,
    so that frame is the step's ``final_frame`` (rendered before the reset), not ``render(0)``. With
    ``keep_episodes``, ``per_episode`` holds each finished episode's ``returns`` (per agent) and social
    metrics, in the order the episodes finished (for intervals over episodes).
    """
    col = Collector(env, seed)
    B = env.num_envs
    # every copy plays a fixed quota of episodes, so short episodes are not favoured by finishing first
    quota = np.array([episodes // B + (b < episodes % B) for b in range(B)])
    rewards: list[list[np.ndarray]] = [[] for _ in range(B)]
    frozen: list[list[np.ndarray]] = [[] for _ in range(B)]
    counts: list[dict[str, np.ndarray]] = [{} for _ in range(B)]  # behaviour so far in each copy's episode
    done: list[dict[str, Any]] = []
    frames = [env.render(0)] if gif and quota[0] else []
    recording = gif and quota[0] > 0
    while (quota > 0).any():
        st = col.step(policy(col.obs))
        if recording:
            frames.append(st.final_frame if st.end[0] else env.render(0))
        for b in np.nonzero(quota > 0)[0]:
            rewards[b].append(st.rewards[b])
            frozen[b].append(st.frozen[b])
            for k in BEHAVIOUR:
                if k in st.infos:
                    counts[b][k] = counts[b].get(k, 0) + np.asarray(st.infos[k][b], np.float64)
            if st.end[b]:
                r, f = np.asarray(rewards[b], np.float64), np.asarray(frozen[b], bool)
                done.append({"returns": r.sum(axis=0), "length": len(r), "counts": counts[b],
                             **social_outcomes(r, f)})
                rewards[b], frozen[b], counts[b] = [], [], {}
                quota[b] -= 1
                recording = recording and b != 0
    returns = np.mean([d["returns"] for d in done], axis=0)
    out: dict[str, Any] = {
        "episodes": len(done),
        "returns": {a: float(r) for a, r in zip(env.spec.agents, returns)},
        "return_mean": float(returns.mean()),
        "episode_length": float(np.mean([d["length"] for d in done])),
        # the mean reward per step (a round of a matrix game), per agent: return / length of each episode
        "reward_per_round": {a: float(r) for a, r in zip(
            env.spec.agents, np.mean([d["returns"] / d["length"] for d in done], axis=0))},
    }
    for m in METRIC_NAMES:
        vals = np.array([d[m] for d in done], np.float64)
        out[m] = float(np.nanmean(vals)) if np.isfinite(vals).any() else float("nan")
    measures = [k for k in BEHAVIOUR if all(k in d["counts"] for d in done)]
    if measures:
        per_agent = {k: np.mean([d["counts"][k] for d in done], axis=0) for k in measures}
        out["behaviour"] = {k: float(v.mean()) for k, v in per_agent.items()}
        out["behaviour_per_agent"] = {a: {k: float(per_agent[k][i]) for k in measures}
                                      for i, a in enumerate(env.spec.agents)}
    if keep_episodes:
        out["per_episode"] = [{"returns": [float(x) for x in d["returns"]],
                               **{m: float(d[m]) for m in METRIC_NAMES}} for d in done]
    if gif:
        out["frames"] = [f for f in frames if f is not None]
    return out
