"""The training loop: one config in, a run directory out.

``run(cfg, out)`` trains a team and writes the run directory; ``resume(out)`` continues one from its last
checkpoint. Layout of a run directory::

    config.yaml          the resolved config (every default filled in)
    events.out.tfevents.*  TensorBoard: eval/*, train/*, hparams, GIFs of evaluation episodes
    metrics.jsonl        one JSON line per evaluation (env_steps, returns, the four social metrics, ...)
    summary.json         the final evaluation beside the baseline teams' figures (contract keys below)
    episode.gif          one episode of the final evaluation (when log.gif_every > 0)
    checkpoints/last.pt  learner, optimiser, schedule and RNG states, counters (atomic, weights only)
    policies/<agent>.pt  each agent's final policy, loadable alone (``marl_core.policy.AgentPolicy``)

``summary.json`` (contract): ``env_steps``, ``episodes``, per-agent ``returns``, ``efficiency``,
``equality``, ``sustainability``, ``peace``, the random team's figures under ``random``, and under
``baselines`` every non-learning team (:mod:`marl_core.baselines`: random, no-op, the game's scripted teams)
-> the same keys as the learned team. The baselines play once, at the start, on the evaluation copies and
seeds that every evaluation of the learned team uses, for ``train.eval_episodes`` episodes. On our games
it also has ``behaviour`` (resources taken, tags fired, times tagged and, on cleanup, waste removed, per
agent per episode, the mean over agents) and ``behaviour_per_agent`` (agent -> the same counts), for the
learned team and each baseline; TensorBoard has them as ``eval/behaviour/*``. ``metrics`` lists the social
metrics the game declares (``envs.declared_metrics``; the others are computed but mean nothing there), and
``wall_seconds`` the wall-clock time the run took over all its sessions (a resumed run's clock goes on
from its checkpoint); each line of ``metrics.jsonl`` has the time of its evaluation. Same config and seed
give the same numbers, ``wall_seconds`` aside.

The replay ratio, samples drawn per env step collected (``learner.replay_ratio``, or what ``train_every``
and ``updates_per_round`` give), is in ``summary.json`` as ``replay_ratio``, beside
``replay_ratio_measured`` (samples drawn / env steps since the first update; null before it) and logged as
``train/replay_ratio``.

Reward transforms (the config's ``reward`` section, :mod:`marl_core.rewards`) change only what goes into
the replay: every metric, return and baseline above is computed on the env's own rewards. With a
transform on, TensorBoard also logs ``train/reward_env`` and ``train/reward_learned`` (mean per
agent-step of the env's and the learned rewards since the last log).

What a resume restores: the learner (networks, targets, optimisers, exploration schedule, RNG states) and
the counters. What it does not: the replay contents (refilled from fresh experience; updates resume once a
batch is ready) and the env's mid-episode state (a new episode starts, the interrupted one is not counted).
A resumed run therefore does not reproduce an uninterrupted one bit for bit; it logs every evaluation step
exactly once (later lines and TensorBoard events are purged back to the checkpoint).

Ctrl-C (SIGINT) during the training loop does not stop the loop where it happens to be: the first one asks
the loop to stop at the end of the current step (every counter, the learner and the logs then agree), where
a checkpoint is saved (atomically, as always) and :class:`TrainingInterrupted` is raised; a second Ctrl-C
stops at once, and the last periodic checkpoint stands. A ``KeyboardInterrupt`` raised by the ``progress``
callback is handled the same way. ``TrainingInterrupted`` is a ``KeyboardInterrupt``: a caller that does
not know it still sees an interrupt. (The deferral applies in the main thread when SIGINT has Python's
default handler; elsewhere SIGINT is left alone.)
"""

from __future__ import annotations

import json
import math
import signal
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import torch

import envs
from envs.metrics import METRIC_NAMES
from marl_core.baselines import measure as measure_baselines
from marl_core.baselines import measured_teams
from marl_core.buffer import zero_one as _zero_one
from marl_core.config import RunConfig, config_hash, dump_config, load_stored_config
from marl_core.errors import CheckpointError, ConfigError, RunDirError
from marl_core.files import atomic_write, finite, write_json
from marl_core.hints import command
from marl_core.learners import build_learner
from marl_core.learners.maddpg import resolve_critic_input
from marl_core.policy import atomic_torch_save, safe_torch_load
from marl_core.replay import Replay
from marl_core.rewards import RewardShaper
from marl_core.rollout import Collector, evaluate
from marl_core.targets import linear_schedule
from marl_core.team_env import make_team_env

__all__ = ["run", "resume", "evaluate_run", "CHECKPOINT_FORMAT", "load_run", "finished_summary", "budget",
           "TrainingInterrupted"]

CHECKPOINT_FORMAT = 2  # 2: baselines beside the random team
EVAL_SEED_OFFSET = 1_000_003  # evaluation episodes use seeds apart from training's
MAX_EVAL_COPIES = 64  # evaluation plays up to this many episodes side by side


class TrainingInterrupted(KeyboardInterrupt):
    """Training stopped by Ctrl-C (or a ``KeyboardInterrupt`` from the progress callback).

    Attributes:
        run_dir: the run directory.
        env_steps, total_steps: where the loop stopped, and ``train.total_steps``.
        checkpoint: the checkpoint a resume starts from, or None when none was written yet.
        checkpoint_steps: its env steps (None without a checkpoint).
        saved: True when the checkpoint was saved at the interrupt, False when it is the last periodic one
            (the interrupt came in the middle of a step, where saving is not safe).
    """

    def __init__(self, run_dir: Path, env_steps: int, total_steps: int, checkpoint: Path | None,
                 checkpoint_steps: int | None, saved: bool):
        self.run_dir, self.env_steps, self.total_steps = run_dir, env_steps, total_steps
        self.checkpoint, self.checkpoint_steps, self.saved = checkpoint, checkpoint_steps, saved
        where = f"checkpoint {checkpoint} (step {checkpoint_steps})" if checkpoint else "no checkpoint yet"
        super().__init__(f"training interrupted at step {env_steps} of {total_steps}; {where}")


class _DeferSigint:
    """While active, the first SIGINT only sets ``requested`` (the loop stops at its next safe point); a
    second one raises ``KeyboardInterrupt`` at once. Installed only in the main thread over Python's
    default handler, so embedding code that handles SIGINT itself keeps its handler."""

    def __init__(self) -> None:
        self.requested = False
        self._old: Any = None

    def __enter__(self) -> _DeferSigint:
        if (threading.current_thread() is threading.main_thread()
                and signal.getsignal(signal.SIGINT) is signal.default_int_handler):
            self._old = signal.signal(signal.SIGINT, self._handle)
        return self

    def _handle(self, signum: int, frame: Any) -> None:
        if self.requested:
            raise KeyboardInterrupt
        self.requested = True

    def __exit__(self, *exc: Any) -> None:
        if self._old is not None:
            signal.signal(signal.SIGINT, self._old)
            self._old = None


def _result(ev: dict[str, Any]) -> dict[str, Any]:
    """The JSON-ready part of an evaluation."""
    keys = ("returns", "return_mean", "episode_length", "reward_per_round", *METRIC_NAMES, "behaviour",
            "behaviour_per_agent")
    return {"eval_episodes": ev["episodes"], **{k: ev[k] for k in keys if k in ev}}


# ---------------------------------------------------------------------- the run
class _Run:
    """State of one training run (built fresh or from a checkpoint)."""

    def __init__(self, cfg: RunConfig, out: Path, progress: Callable | None):
        self.cfg, self.out = cfg, out
        torch.set_num_threads(cfg.learner.torch_threads)
        seed = cfg.train.seed
        e = cfg.env
        # only a critic that reads the state needs state() on every step (``auto`` may mean either)
        wants_state = _reads_state(cfg.learner)
        self.env = make_team_env(e.name, e.params, e.num_envs, seed, with_state=wants_state)
        self.spec = self.env.spec
        self.eval_env = _eval_env(cfg, cfg.train.eval_episodes, render=cfg.log.gif_every > 0)
        if cfg.seats:
            from marl_core.seats import SeatedTeam

            self.learner = SeatedTeam(self.spec, cfg, seed, e.name, out)
        else:
            self.learner = build_learner(self.spec, cfg.learner, seed)
        state_space = self.spec.state_space if getattr(self.learner, "uses_state", False) else None
        self.keep_state = state_space is not None
        self._make_store(state_space)
        # what the agents learn from (the metrics keep the env's rewards); checked before any file is written
        self.shaper = RewardShaper(cfg.reward, e.num_envs, self.spec.num_agents)
        self.env_steps = self.vec_steps = self.episodes = self.evals = 0
        self.samples = 0  # transitions drawn from replay (batch size x updates)
        self.learn_steps = -1  # env steps collected before the first update (-1: no update yet)
        self.owed = 0.0  # with learner.replay_ratio: samples owed, less than a batch
        self.baselines: dict[str, Any] | None = None
        self.last_eval: dict[str, Any] | None = None
        self.progress = progress
        self.writer = None
        self.elapsed_before, self.clock = 0.0, time.perf_counter()  # wall time of earlier sessions; this one's start

    def _make_store(self, state_space: Any) -> None:
        """The replay the learner samples from."""
        L, e, seed = self.cfg.learner, self.cfg.env, self.cfg.train.seed
        self.replay = Replay(
            capacity=L.replay_size, num_envs=e.num_envs, num_agents=self.spec.num_agents,
            obs_shape=self.spec.obs_shape, obs_dtype=self.spec.obs_dtype, num_actions=self.spec.num_actions,
            state_shape=None if state_space is None else tuple(state_space.shape),
            state_dtype=None if state_space is None else state_space.dtype,
            n_step=getattr(L, "n_step", 1), gamma=L.gamma, prioritized=getattr(L, "prioritized", False),
            alpha=getattr(L, "priority_alpha", 0.6), eps=getattr(L, "priority_eps", 1e-6), seed=seed,
            pack_bits=L.pack_replay and _zero_one(self.spec.obs_space) and (
                state_space is None or _zero_one(state_space)))

    COUNTER = "env_steps"  # what the budget counts: summary.json, metrics.jsonl and TensorBoard steps

    def acting(self, env: Any) -> Callable[..., np.ndarray]:
        """The team's ``act(obs, explore, env_steps)`` on ``env`` (a seated team's scripted members read the
        state of the env they play on)."""
        acting = getattr(self.learner, "acting", None)
        return acting(env) if acting is not None else self.learner.act

    def count(self) -> int:
        """Progress so far, in the budget's unit."""
        return self.env_steps

    def budget(self) -> int:
        return self.cfg.train.total_steps

    # -- checkpoints
    def _counters(self) -> dict[str, Any]:
        return {"env_steps": self.env_steps, "vec_steps": self.vec_steps, "episodes": self.episodes,
                "evals": self.evals, "samples": self.samples, "learn_steps": self.learn_steps, "owed": self.owed,
                "elapsed": self.wall_seconds()}

    def wall_seconds(self) -> float:
        """Wall-clock seconds the run has taken, over every session (a resumed run goes on from where its
        checkpoint left; the time between sessions does not count)."""
        return self.elapsed_before + time.perf_counter() - self.clock

    def _extra_state(self) -> dict[str, Any]:
        return {"replay_rng": self.replay.rng_state()}

    def save_checkpoint(self) -> None:
        atomic_torch_save({
            "format": CHECKPOINT_FORMAT, "config_hash": config_hash(self.cfg), "counters": self._counters(),
            "baselines": json.dumps(finite(self.baselines)), "last_eval": json.dumps(finite(self.last_eval)),
            "learner": self.learner.state_dict(), **self._extra_state(), "torch_rng": torch.get_rng_state(),
        }, self.out / "checkpoints" / "last.pt")

    def _read_checkpoint(self) -> dict[str, Any]:
        path = self.out / "checkpoints" / "last.pt"
        data = safe_torch_load(path, "checkpoint")
        if data["format"] != CHECKPOINT_FORMAT:
            raise CheckpointError(f"checkpoint '{path}' has format {data['format']}; this version reads "
                                  f"format {CHECKPOINT_FORMAT}")
        if data.get("config_hash") != config_hash(self.cfg):
            raise CheckpointError(f"checkpoint '{path}' was written for a different config.yaml; "
                                  f"restore the run's config.yaml or start a new run")
        return data

    def load_checkpoint(self) -> None:
        data = self._read_checkpoint()
        c = data["counters"]
        self.env_steps, self.vec_steps = int(c["env_steps"]), int(c["vec_steps"])
        self.episodes, self.evals = int(c["episodes"]), int(c["evals"])
        # absent from checkpoints written before replay_ratio: the measured ratio then restarts
        self.samples, self.learn_steps = int(c.get("samples", 0)), int(c.get("learn_steps", -1))
        self.owed = float(c.get("owed", 0.0))
        self.baselines, self.last_eval = json.loads(data["baselines"]), json.loads(data["last_eval"])
        self.elapsed_before, self.clock = float(c.get("elapsed", 0.0)), time.perf_counter()
        self.learner.load_state_dict(data["learner"])
        self._load_extra_state(data)
        torch.set_rng_state(data["torch_rng"])

    def _load_extra_state(self, data: dict[str, Any]) -> None:
        self.replay.set_rng_state(data["replay_rng"])

    def _data_summary(self) -> dict[str, Any]:
        """What summary.json says of the data the learner learned from."""
        return {"replay_ratio": self.replay_ratio(), "replay_ratio_measured": self.measured_replay_ratio()}

    def replay_ratio(self) -> float:
        """The configured replay ratio: samples drawn per env step collected, once updates run."""
        L = self.cfg.learner
        if L.replay_ratio is not None:
            return float(L.replay_ratio)
        return L.batch_size * L.updates_per_round / (self.cfg.env.num_envs * L.train_every)

    def measured_replay_ratio(self) -> float | None:
        """Samples drawn per env step collected since the first update (None before it)."""
        if self.learn_steps < 0 or self.env_steps <= self.learn_steps:
            return None
        return self.samples / (self.env_steps - self.learn_steps)

    # -- logging
    def open_logs(self, purge_step: int | None) -> None:
        metrics = self.out / "metrics.jsonl"
        if purge_step is not None and metrics.exists():  # drop what was logged after the checkpoint
            keep = [line for line in metrics.read_text().splitlines()
                    if line.strip() and json.loads(line)[self.COUNTER] <= purge_step]
            atomic_write(metrics, lambda f: f.write("".join(line + "\n" for line in keep)))
        if self.cfg.log.tensorboard:
            from torch.utils.tensorboard import SummaryWriter

            # TensorBoard keeps events with step < purge_step; the checkpoint's own step stays logged
            self.writer = SummaryWriter(log_dir=str(self.out),
                                        purge_step=None if purge_step is None else purge_step + 1)

    def scalar(self, tag: str, value: float) -> None:
        if self.writer is not None and value is not None and math.isfinite(value):
            self.writer.add_scalar(tag, value, self.count())

    def log_eval(self, ev: dict[str, Any]) -> None:
        row = {"env_steps": self.env_steps, self.COUNTER: self.count(), "episodes": self.episodes,
               "wall_seconds": round(self.wall_seconds(), 3), **_result(ev)}
        with open(self.out / "metrics.jsonl", "a") as f:
            f.write(json.dumps(finite(row), sort_keys=True) + "\n")
        for m in (*METRIC_NAMES, "return_mean"):
            self.scalar(f"eval/{m}", ev[m])
        for a, r in ev["returns"].items():
            self.scalar(f"eval/return/{a}", r)
        for k, v in ev.get("behaviour", {}).items():
            self.scalar(f"eval/behaviour/{k}", v)
        for a, measures in ev.get("behaviour_per_agent", {}).items():
            for k, v in measures.items():
                self.scalar(f"eval/behaviour/{k}/{a}", v)
        for team, res in self.baselines.items():
            for m in (*METRIC_NAMES, "return_mean"):
                self.scalar(f"{'random' if team == 'random' else 'baseline/' + team}/{m}", res[m])
        if ev.get("frames") and self.writer is not None:
            from marl_core.tb import add_gif

            add_gif(self.writer, "eval/episode", ev["frames"], self.count(), fps=8)

    # -- evaluation
    def evaluate(self, final: bool = False) -> dict[str, Any]:
        """Evaluate with exploration off; the final evaluation also writes ``episode.gif``."""
        self.evals += 1
        every = self.cfg.log.gif_every
        gif = every > 0 and ((self.evals - 1) % every == 0 or final)
        act = self.acting(self.eval_env)
        ev = evaluate(self.eval_env, lambda o: act(o, explore=False),
                      self.cfg.train.eval_episodes, self.cfg.train.seed + EVAL_SEED_OFFSET, gif=gif)
        self.last_eval = {**_result(ev), "metrics": list(envs.declared_metrics(self.cfg.env.name))}
        self.log_eval(ev)
        if final and ev.get("frames"):
            from envs.render import write_gif

            write_gif(ev["frames"], self.out / "episode.gif")
        return ev

    def measure_baselines(self) -> None:
        t = self.cfg.train
        self.baselines = measure_baselines(self.eval_env, measured_teams(self.cfg), t.eval_episodes,
                                           t.seed + EVAL_SEED_OFFSET, _result)

    # -- the loop
    def train(self) -> dict[str, Any]:
        """Train to ``train.total_steps`` and finish; on Ctrl-C see the module docstring."""
        self._between_steps = True  # False while a step is under way: a checkpoint then could mix two steps
        with _DeferSigint() as sigint:
            try:
                self._loop(sigint)
            except KeyboardInterrupt:
                raise self._interrupted(self._between_steps) from None
        return self.finish()

    def _interrupted(self, safe: bool) -> TrainingInterrupted:
        """Save a checkpoint if the loop stopped between steps; close the logs; the exception to raise."""
        path = self.out / "checkpoints" / "last.pt"
        if safe:
            self.save_checkpoint()
        if self.writer is not None:
            self.writer.close()
        self.env.close()
        self.eval_env.close()
        steps = None
        if path.is_file():
            steps = self.count() if safe else int(safe_torch_load(path, "checkpoint")["counters"][self.COUNTER])
        return TrainingInterrupted(self.out, self.count(), self.budget(), path if path.is_file() else None,
                                   steps, saved=safe)

    def _loop(self, sigint: _DeferSigint) -> None:
        cfg, L, T = self.cfg, self.cfg.learner, self.cfg.train
        B = cfg.env.num_envs
        col = Collector(self.env, T.seed + self.env_steps)
        self.replay.start(col.obs, col.state if self.keep_state else None)
        next_eval = (self.env_steps // T.eval_every + 1) * T.eval_every
        next_ckpt = (self.env_steps // T.checkpoint_every + 1) * T.checkpoint_every
        next_log = (self.env_steps // cfg.log.log_every + 1) * cfg.log.log_every
        stats: dict[str, float] = {}
        reward_sums = np.zeros(2)  # env and learned reward per agent-step, summed since the last log
        log_steps = 0
        t0, s0 = time.perf_counter(), self.env_steps
        prioritized = getattr(L, "prioritized", False)
        act = self.acting(self.env)  # looked up here, so a wrapper set on the learner before train() is used
        # seats with on-policy groups: the same steps feed their rollouts (a resume starts new ones)
        rollouts = getattr(self.learner, "rollouts", None)
        if rollouts is not None:
            rollouts.start(col.obs)
        if self.progress is not None:  # the start: steps/s and elapsed time count from here
            self.progress(self.env_steps, T.total_steps, self.last_eval)
        while self.env_steps < T.total_steps:
            if sigint.requested:
                raise KeyboardInterrupt
            self._between_steps = False
            actions = act(col.obs, explore=True, env_steps=self.env_steps)
            st = col.step(actions)
            learned = self.shaper(st.rewards, st.end)
            if self.shaper.active:
                reward_sums += (st.rewards.mean(), learned.mean())
            self.replay.add(actions, learned, st.terminated, st.end, st.obs,
                            st.state if self.keep_state else None, st.reset_obs,
                            st.reset_state if self.keep_state else None)
            self.env_steps += B
            self.vec_steps += 1
            self.episodes += int(st.end.sum())
            if rollouts is not None:
                stats.update(rollouts.add(actions, learned, st, col.obs, self.env_steps))
            updates = 0
            if self.env_steps >= L.warmup_steps and len(self.replay) >= L.batch_size:
                if L.replay_ratio is None:
                    updates = L.updates_per_round if self.vec_steps % L.train_every == 0 else 0
                else:  # samples owed for the steps just collected; whole batches are drawn
                    self.owed += B * L.replay_ratio
                    updates = int(self.owed // L.batch_size)
                    self.owed -= updates * L.batch_size
            if updates:
                beta = linear_schedule(self.env_steps, getattr(L, "priority_beta_start", 1.0), 1.0, T.total_steps)
                self.learner.schedule(self.env_steps)
                self.samples += updates * L.batch_size
                if self.learn_steps < 0:
                    self.learn_steps = self.env_steps - B
                for _ in range(updates):
                    batch = self.replay.sample(L.batch_size, beta=beta)
                    stats.update(self.learner.update(batch))  # latest of each key: not every update has all
                    if prioritized:
                        self.replay.update_priorities(batch["indices"], self.learner.priorities)
            log_steps += 1
            if self.env_steps >= next_log:
                next_log += cfg.log.log_every
                for k, v in stats.items():
                    self.scalar(f"train/{k}", v)
                if self.shaper.active:  # what the transforms did to the rewards, per agent-step
                    self.scalar("train/reward_env", reward_sums[0] / log_steps)
                    self.scalar("train/reward_learned", reward_sums[1] / log_steps)
                reward_sums[:] = 0.0
                log_steps = 0
                self.scalar("train/epsilon", self.learner.epsilon(self.env_steps))
                self.scalar("train/replay_ratio", self.measured_replay_ratio())
                rate = (self.env_steps - s0) / max(time.perf_counter() - t0, 1e-9)
                self.scalar("train/env_steps_per_s", rate)
            next_eval, next_ckpt = self.milestones(next_eval, next_ckpt)

    def milestones(self, next_eval: int, next_ckpt: int) -> tuple[int, int]:
        """Between two steps of a loop: evaluate and checkpoint when their step has come (and at the end of
        the budget), then report progress; returns the next evaluation and checkpoint steps."""
        T = self.cfg.train
        done = self.env_steps >= T.total_steps
        if self.env_steps >= next_eval or done:
            next_eval = (self.env_steps // T.eval_every + 1) * T.eval_every
            self.evaluate(final=done)
        if self.env_steps >= next_ckpt or done:
            next_ckpt = (self.env_steps // T.checkpoint_every + 1) * T.checkpoint_every
            self.save_checkpoint()
        self._between_steps = True
        if self.progress is not None:
            self.progress(self.env_steps, T.total_steps, self.last_eval)
        return next_eval, next_ckpt

    def finish(self) -> dict[str, Any]:
        if self.last_eval is None:
            self.evaluate(final=True)
        for i, agent in enumerate(self.spec.agents):
            policy = self.learner.agent_policy(i)
            if policy is not None:  # a seated member (scripted, random) has no policy file
                policy.save(self.out / "policies" / f"{agent}.pt")
        summary = {"env_steps": self.env_steps, "episodes": self.episodes, **self.last_eval,
                   "random": self.baselines["random"], "baselines": self.baselines, **self._data_summary(),
                   "learner": self.cfg.learner.kind, "env": self.cfg.env.name, "seed": self.cfg.train.seed,
                   "metrics": list(envs.declared_metrics(self.cfg.env.name)),
                   "wall_seconds": round(self.wall_seconds(), 3)}
        if self.cfg.seats:
            summary["groups"] = self.learner.group_results(self.last_eval["returns"])
        write_json(self.out / "summary.json", summary)
        if self.writer is not None:
            from marl_core.tb import add_hparams

            add_hparams(self.writer, self.cfg, summary)
            self.writer.close()
        self.env.close()
        self.eval_env.close()
        return summary


class _OnPolicyRun(_Run):
    """A run of an on-policy learner (``learner.kind: ppo``): a rollout buffer instead of a replay, and the
    loop of :mod:`marl_core.onpolicy`. Checkpoints are written between rollouts, or at an interrupt (the
    rollout in progress is then dropped: a resume starts a new one)."""

    def _make_store(self, state_space: Any) -> None:
        from marl_core.buffer import RolloutBuffer

        L, e = self.cfg.learner, self.cfg.env
        self.buffer = RolloutBuffer(
            L.rollout_steps, e.num_envs, self.spec.num_agents, self.spec.obs_shape, self.spec.obs_dtype,
            state_shape=None if state_space is None else tuple(state_space.shape),
            state_dtype=None if state_space is None else state_space.dtype,
            pack=L.pack_rollout and _zero_one(self.spec.obs_space) and (
                state_space is None or _zero_one(state_space)))

    def _extra_state(self) -> dict[str, Any]:
        return {}

    def _load_extra_state(self, data: dict[str, Any]) -> None:
        pass

    def _data_summary(self) -> dict[str, Any]:
        L = self.cfg.learner
        return {"updates": self.learner.updates,
                "rollout_env_steps": L.rollout_steps * self.cfg.env.num_envs}

    def measured_replay_ratio(self) -> None:
        return None

    def _loop(self, sigint: _DeferSigint) -> None:
        from marl_core.onpolicy import run_loop

        run_loop(self, sigint)


class _LolaRun(_Run):
    """A ``learner.kind: lola`` run (marl_core/learners/lola.py): ``learner.updates`` simultaneous updates of two
    memory-one players, no replay. The budget counts updates; ``env_steps`` counts the rounds played for
    sampled gradients (0 for exact ones: they learn from the game's table)."""

    COUNTER = "updates"

    def __init__(self, cfg: RunConfig, out: Path, progress: Callable | None):
        from envs.matrix_v0 import build_table, resolve_params
        from marl_core.learners.lola import LOLA

        self.cfg, self.out = cfg, out
        torch.set_num_threads(cfg.learner.torch_threads)
        e = cfg.env
        self.env = make_team_env(e.name, e.params, e.num_envs, cfg.train.seed, with_state=False)
        self.spec = self.env.spec
        self.eval_env = _eval_env(cfg, cfg.train.eval_episodes, render=cfg.log.gif_every > 0)
        _, table = build_table(resolve_params(e.params))
        try:
            self.learner = LOLA(self.spec, cfg.learner, cfg.train.seed, table)
        except ValueError as err:
            raise ConfigError(str(err)) from None
        self.rounds = int(resolve_params(e.params)["max_cycles"])
        self.updates = self.env_steps = self.vec_steps = self.episodes = self.evals = 0
        self.baselines: dict[str, Any] | None = None
        self.last_eval: dict[str, Any] | None = None
        self.progress = progress
        self.writer = None
        self.elapsed_before, self.clock = 0.0, time.perf_counter()  # wall time of earlier sessions; this one's start

    def count(self) -> int:
        return self.updates

    def budget(self) -> int:
        return self.cfg.learner.updates

    def _counters(self) -> dict[str, Any]:
        return {"updates": self.updates, "env_steps": self.env_steps, "episodes": self.episodes,
                "evals": self.evals, "elapsed": self.wall_seconds()}

    def _extra_state(self) -> dict[str, Any]:
        return {}

    def load_checkpoint(self) -> None:
        data = self._read_checkpoint()
        c = data["counters"]
        self.updates, self.env_steps = int(c["updates"]), int(c["env_steps"])
        self.episodes, self.evals = int(c["episodes"]), int(c["evals"])
        self.baselines, self.last_eval = json.loads(data["baselines"]), json.loads(data["last_eval"])
        self.elapsed_before, self.clock = float(c.get("elapsed", 0.0)), time.perf_counter()
        self.learner.load_state_dict(data["learner"])
        torch.set_rng_state(data["torch_rng"])

    def _play(self, col: Collector) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """One whole episode on every copy: states (B, T), actions (B, T, 2), rewards (B, T, 2)."""
        from marl_core.learners.lola import play_episodes

        def step(actions: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
            rewards = col.step(actions).rewards
            return col.obs, rewards

        batch = play_episodes(self.learner.act, step, col.obs, self.rounds)
        B = self.cfg.env.num_envs
        self.env_steps += B * self.rounds
        self.vec_steps += self.rounds
        self.episodes += B
        return batch

    def _loop(self, sigint: _DeferSigint) -> None:
        L, T = self.cfg.learner, self.cfg.train
        col = Collector(self.env, T.seed + self.updates) if L.gradient == "sampled" else None
        if self.progress is not None:
            self.progress(self.updates, L.updates, self.last_eval)
        while self.updates < L.updates:
            if sigint.requested:
                raise KeyboardInterrupt
            self._between_steps = False
            batch = self._play(col) if col is not None else None
            stats = self.learner.update(batch)
            self.updates += 1
            if self.updates % self.cfg.log.log_every == 0 or self.updates == 1:
                for k, v in stats.items():
                    self.scalar(f"train/{k}", v)
            done = self.updates >= L.updates
            if self.updates % L.eval_every_updates == 0 or done:
                self.evaluate(final=done)
            if self.updates % L.checkpoint_every_updates == 0 or done:
                self.save_checkpoint()
            self._between_steps = True
            if self.progress is not None:
                self.progress(self.updates, L.updates, self.last_eval)

    def finish(self) -> dict[str, Any]:
        if self.last_eval is None:
            self.evaluate(final=True)
        for i, agent in enumerate(self.spec.agents):
            self.learner.agent_policy(i).save(self.out / "policies" / f"{agent}.pt")
        summary = {"updates": self.updates, "env_steps": self.env_steps, "episodes": self.episodes,
                   **self.last_eval, "random": self.baselines["random"], "baselines": self.baselines,
                   "closed_form": self.learner.closed_form(), "policies": self._policies(),
                   "learner": self.cfg.learner.kind, "env": self.cfg.env.name, "seed": self.cfg.train.seed,
                   "metrics": list(envs.declared_metrics(self.cfg.env.name)),
                   "wall_seconds": round(self.wall_seconds(), 3)}
        write_json(self.out / "summary.json", summary)
        if self.writer is not None:
            self.writer.close()
        self.env.close()
        self.eval_env.close()
        return summary

    def _policies(self) -> dict[str, dict[str, float]]:
        """Each player's probability of action 0 per state, by name."""
        names = ("first", "after_00", "after_01", "after_10", "after_11")
        return {a: dict(zip(names, map(float, p))) for a, p in zip(self.spec.agents, self.learner.probs())}


def _make_run(cfg: RunConfig, out: Path, progress: Callable | None) -> _Run:
    kind = cfg.learner.kind
    return (_LolaRun if kind == "lola" else _OnPolicyRun if kind == "ppo" else _Run)(cfg, out, progress)


def _reads_state(learner: Any) -> bool:
    """Whether the learner's critic reads the env's state() (our games then compute it every step)."""
    if learner.kind == "maddpg" or (learner.kind == "ppo" and learner.critic != "local"):
        return resolve_critic_input(learner.critic_input, has_state=True) == "state"
    return False




# ---------------------------------------------------------------------- entry points
def _eval_env(cfg: RunConfig, episodes: int, render: bool):
    """The evaluation copies (up to ``MAX_EVAL_COPIES`` episodes side by side), seeded apart from training."""
    e = cfg.env
    return make_team_env(e.name, e.params, min(episodes, MAX_EVAL_COPIES), cfg.train.seed + EVAL_SEED_OFFSET,
                         render=render, with_state=False)


def _fresh_dir(out: Path) -> None:
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise RunDirError(f"run directory '{out}' already exists and is not empty; choose a new --out, or "
                          f"continue it with: {command()} train --resume {out}")


def run(cfg: RunConfig, out: str | Path,
        progress: Callable[[int, int, dict | None], None] | None = None) -> dict[str, Any]:
    """Train from scratch into the new run directory ``out``; return the summary."""
    out = Path(out)
    _fresh_dir(out)
    r = _make_run(cfg, out, progress)  # builds envs and learner first: a bad env fails before any file
    out.mkdir(parents=True, exist_ok=True)
    (out / "checkpoints").mkdir(exist_ok=True)
    if cfg.seats:
        r.learner.keep_policies(out)
    dump_config(cfg, out / "config.yaml")
    r.open_logs(purge_step=None)
    r.measure_baselines()
    return r.train()


def load_run(out: str | Path) -> RunConfig:
    """The resolved config of an existing run directory."""
    out = Path(out)
    if not (out / "config.yaml").is_file():
        if not out.exists():
            raise RunDirError(f"run directory '{out}' does not exist")
        raise RunDirError(f"'{out}' is not a run directory (no config.yaml)")
    return load_stored_config(out / "config.yaml")


def finished_summary(out: str | Path) -> dict[str, Any] | None:
    """The summary of the run in ``out`` if it is finished (its ``summary.json`` is at
    ``train.total_steps``), else None. Reads files only."""
    out = Path(out)
    cfg = load_run(out)
    path = out / "summary.json"
    if not path.is_file():
        return None
    try:
        summary = json.loads(path.read_text())
    except (OSError, ValueError):
        return None
    key, total = budget(cfg)
    steps = summary.get(key) if isinstance(summary, dict) else None
    return summary if isinstance(steps, int) and steps >= total else None


def budget(cfg: RunConfig) -> tuple[str, int]:
    """What a run's length counts and how much of it: ``("env_steps", train.total_steps)``, or for
    ``learner.kind: lola`` ``("updates", learner.updates)``."""
    if cfg.learner.kind == "lola":
        return "updates", cfg.learner.updates
    return "env_steps", cfg.train.total_steps


def checkpoint_counters(out: str | Path) -> dict[str, Any]:
    """The counters of a run's last checkpoint (``env_steps``, ``episodes``, ``elapsed`` wall seconds over
    earlier sessions, and ``updates`` for lola), read without building the run; {} when it has none."""
    path = Path(out) / "checkpoints" / "last.pt"
    if not path.is_file():
        return {}
    return dict(safe_torch_load(path, "checkpoint").get("counters", {}))


def extend_run(out: str | Path, total_steps: int) -> int:
    """Give a run a larger budget, ``train.total_steps = total_steps``, so that :func:`resume` continues it;
    return the old budget. Its ``config.yaml`` and its checkpoint's config hash are rewritten (atomically)
    to the new config, and a finished run's ``summary.json`` is kept as ``summary.<old steps>.json``.
    Nothing else may change: a run is its config. ``lola`` counts updates and is refused.

    Raises:
        RunDirError / ConfigError: no checkpoint, a lola run, or ``total_steps`` not above the steps the
            checkpoint has already taken (one line each).
    """
    out = Path(out)
    cfg = load_run(out)
    if cfg.learner.kind == "lola":
        raise ConfigError("train.total_steps cannot extend a lola run: it counts learner.updates")
    path = out / "checkpoints" / "last.pt"
    if not path.is_file():
        raise RunDirError(f"run directory '{out}' has no checkpoint to extend (checkpoints/last.pt)")
    data = safe_torch_load(path, "checkpoint")
    done = int(data["counters"]["env_steps"])
    old = cfg.train.total_steps
    if total_steps == old:
        return old
    if total_steps <= done:
        raise ConfigError(f"train.total_steps = {total_steps} is not allowed: the run has taken {done} env "
                          f"steps; expected more than that to extend it")
    if data.get("config_hash") != config_hash(cfg):
        raise CheckpointError(f"checkpoint '{path}' was written for a different config.yaml; restore the "
                              "run's config.yaml first")
    new = cfg.model_copy(update={"train": cfg.train.model_copy(update={"total_steps": int(total_steps)})})
    summary = out / "summary.json"
    if summary.is_file():
        summary.replace(out / f"summary.{old}.json")
    data["config_hash"] = config_hash(new)
    atomic_torch_save(data, path)
    dump_config(new, out / "config.yaml")
    return old


def resume(out: str | Path,
           progress: Callable[[int, int, dict | None], None] | None = None) -> dict[str, Any]:
    """Continue the run in ``out`` from its last checkpoint; return the summary."""
    out = Path(out)
    cfg = load_run(out)
    if not (out / "checkpoints" / "last.pt").is_file():
        raise RunDirError(f"run directory '{out}' has no checkpoint to resume from (checkpoints/last.pt)")
    r = _make_run(cfg, out, progress)
    r.load_checkpoint()
    if r.count() >= r.budget() and (out / "summary.json").is_file():
        return json.loads((out / "summary.json").read_text())
    r.open_logs(purge_step=r.count())
    return r.train()


def evaluate_run(out: str | Path, episodes: int | None = None, gif: str | Path | None = None,
                 seed: int | None = None) -> dict[str, Any]:
    """Evaluate the last checkpoint of a run with exploration off, beside the baseline teams played on the
    same episodes and seeds; the keys match ``summary.json``."""
    out = Path(out)
    cfg = load_run(out)
    if not (out / "checkpoints" / "last.pt").is_file():
        raise RunDirError(f"run directory '{out}' has no checkpoint to evaluate (checkpoints/last.pt)")
    if episodes is not None and episodes < 1:
        raise RunDirError(f"--episodes = {episodes} is not allowed; expected an integer >= 1")
    n = episodes or cfg.train.eval_episodes
    seed = cfg.train.seed + EVAL_SEED_OFFSET if seed is None else seed
    r = _make_run(cfg, out, None)
    r.load_checkpoint()
    r.env.close()
    r.eval_env.close()
    with _eval_env(cfg, n, render=gif is not None) as env:
        act = r.acting(env)
        ev = evaluate(env, lambda o: act(o, explore=False), n, seed, gif=gif is not None)
        baselines = measure_baselines(env, measured_teams(cfg), n, seed, _result)
    if gif is not None:
        from envs.render import write_gif

        write_gif(ev["frames"], gif)
    out_ = {"env_steps": r.env_steps, "episodes": r.episodes, **_result(ev), "random": baselines["random"],
            "baselines": baselines, "metrics": list(envs.declared_metrics(cfg.env.name))}
    if isinstance(r, _LolaRun):
        out_ = {"updates": r.updates, **out_, "closed_form": r.learner.closed_form(), "policies": r._policies()}
    return out_
