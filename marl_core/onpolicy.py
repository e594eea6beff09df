"""The on-policy loop: collect a rollout from every env copy, learn from it once, repeat.

``run_loop(run, sigint)`` is what a run of an on-policy learner (``learner.kind: ppo``) does between its
start and its finish; the run (``marl_core.train``) keeps the run directory, evaluation, logging and
checkpoints. Each round:

1. ``learner.rollout_steps`` vector steps of the team acting with exploration (its policies' own
   randomness) on the run's ``env.num_envs`` copies, through the one :class:`marl_core.rollout.Collector`.
   The rewards pass the run's reward transforms (what the agents learn from); every metric keeps the env's
   own. Each step goes into the :class:`marl_core.buffer.RolloutBuffer`.
2. One ``learner.update`` on the full buffer (its epochs and minibatches are the learner's business).
3. At the round's end, never inside a rollout: the training scalars (every ``log.log_every`` env steps),
   an evaluation (every ``train.eval_every``) and a checkpoint (every ``train.checkpoint_every``).

The budget ``train.total_steps`` may end inside a rollout: the learner then learns from the shorter one.
A checkpoint written at an interrupt inside a rollout keeps the counters as they are; the rollout in
progress is dropped (a resumed run starts a new one and does not learn from those steps).
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np

from marl_core.rollout import Collector

__all__ = ["run_loop"]


def run_loop(run: Any, sigint: Any) -> None:
    """Train ``run`` (a ``marl_core.train`` run of an on-policy learner) to ``train.total_steps``."""
    cfg, T = run.cfg, run.cfg.train
    B = cfg.env.num_envs
    col = Collector(run.env, T.seed + run.env_steps)
    buf, keep_state = run.buffer, run.keep_state
    next_eval = (run.env_steps // T.eval_every + 1) * T.eval_every
    next_ckpt = (run.env_steps // T.checkpoint_every + 1) * T.checkpoint_every
    next_log = (run.env_steps // cfg.log.log_every + 1) * cfg.log.log_every
    reward_sums = np.zeros(2)  # env and learned reward per agent-step, summed since the last log
    log_steps = 0
    t0, s0 = time.perf_counter(), run.env_steps
    act = run.acting(run.env)  # looked up here, so a wrapper set on the learner before train() is used
    if run.progress is not None:
        run.progress(run.env_steps, T.total_steps, run.last_eval)
    while run.env_steps < T.total_steps:
        buf.start(col.obs, col.state if keep_state else None)
        while not buf.full and run.env_steps < T.total_steps:
            if sigint.requested:
                raise KeyboardInterrupt
            run._between_steps = False
            actions = act(col.obs, explore=True, env_steps=run.env_steps)
            st = col.step(actions)
            learned = run.shaper(st.rewards, st.end)
            if run.shaper.active:
                reward_sums += (st.rewards.mean(), learned.mean())
            buf.add(actions, learned, st.terminated, st.end, st.obs, col.obs,
                    st.state if keep_state else None, col.state if keep_state else None)
            run.env_steps += B
            run.vec_steps += 1
            run.episodes += int(st.end.sum())
            log_steps += 1
            run._between_steps = True
            if run.progress is not None:
                run.progress(run.env_steps, T.total_steps, run.last_eval)
        run._between_steps = False
        run.learner.schedule(run.env_steps)
        stats = run.learner.update(buf)
        if run.env_steps >= next_log or run.env_steps >= T.total_steps:
            next_log = (run.env_steps // cfg.log.log_every + 1) * cfg.log.log_every
            for k, v in stats.items():
                run.scalar(f"train/{k}", v)
            if run.shaper.active and log_steps:
                run.scalar("train/reward_env", reward_sums[0] / log_steps)
                run.scalar("train/reward_learned", reward_sums[1] / log_steps)
            reward_sums[:] = 0.0
            log_steps = 0
            run.scalar("train/env_steps_per_s", (run.env_steps - s0) / max(time.perf_counter() - t0, 1e-9))
        next_eval, next_ckpt = run.milestones(next_eval, next_ckpt)
