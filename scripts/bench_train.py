"""Throughput benchmark of the training loop: where the wall time of ``marl_core.train`` goes.

This is a benchmark, not a test: it measures and prints, it asserts nothing and it exits 0.

What it measures, for each row (``--learners``: ``idqn``, ``maddpg``, ``ppo_local``,
``ppo_central``, ``ppo_joint_action``) on ``harvest_v0`` (layout ``harvest_small``, 5 agents, view
radius 7, the game's default ``max_cycles`` unless overridden), one row after the other in the same
process. The replay learners ``idqn`` and ``maddpg`` are measured under two settings
(``--settings``); the ppo rows under ``new`` only (see "ppo rows" below):

``previous``
    The first release's settings, pinned in :data:`PREVIOUS_LEARNER`: a plain (not bit-packed) replay, the
    conv encoder [16, 32] with strides 1 then 2, an update every vector step, on ``--num-envs`` copies
    (default 8).
``new``
    The library's current defaults on ``--new-num-envs`` copies (default 32), with ``learner.replay_ratio``
    set to the previous settings' ratio (batch size x updates per round / (copies x train_every)), so both
    draw the same samples per env step collected.

Per learner, the headline keys: ``env_steps_per_s`` (new), ``previous_env_steps_per_s``, ``speedup`` (their
ratio), ``replay_bytes_ratio`` (new: replay bytes per transition / the raw uint8 observation bytes),
``previous_replay_bytes_ratio``, ``replay_ratio`` and ``unpack_fraction_of_update`` (time in unpacking
sampled batches over the update time); then ``previous`` and ``new`` with every figure below.
A ppo row's headline keys: ``env_steps_per_s``, ``speedup_vs_idqn`` and
``unpack_fraction_of_update``; then ``new``.

``env_steps_per_s``
    Env steps (vector steps x ``num_envs``) per wall second of the measured window, inside the real
    training loop: a ``marl_core.train._Run`` is built from a config made by ``parse_config`` and its own
    ``train()`` runs. Nothing of the loop is reproduced here; only instance attributes of the run's
    objects are replaced by timing wrappers that call the originals: ``env.step``, ``learner.act``,
    ``learner.update``, ``replay.add``, ``replay.sample``, ``replay.update_priorities`` and the run's own
    ``scalar``, ``evaluate`` and ``save_checkpoint``.
``fractions``
    Shares of the window's wall time in ``env_step`` (``env.step``, the batched game's step plus the
    automatic reset at an episode end), ``act`` (``learner.act``), ``update`` (``replay.sample`` +
    ``learner.update`` + ``replay.update_priorities``) and ``everything_else`` = 1 - the three: the loop's
    own bookkeeping, ``Collector.step``'s merge of reset observations, ``replay.add`` (also reported on
    its own as ``replay_add``), logging and the checkpoints that fall inside the window.
    ``cpu_time_fractions`` are the same shares of this process's CPU time, which other processes on the
    machine disturb less than wall time.
``bare_update_per_s``
    The same learner (same config, same seed) built alone, updated in a tight loop on one fixed random
    batch of the replay's shapes and dtypes (uint8 observations of 0/1): best of three timed repeats after
    a warm-up (all three are listed; ``bare_update_per_cpu_s`` is the best in CPU time). Beside it:
    ``loop_updates_per_s`` (updates per wall second of the window), ``loop_update_calls_per_s``
    (updates per wall second spent inside ``learner.update``) and ``loop_update_per_cpu_s`` (the same in
    CPU time), so the cost of an update inside the loop can be compared with the bare one.
``replay_bytes_per_transition`` / ``raw_obs_bytes_per_transition``
    ``Replay.bytes_per_transition`` (every preallocated array, sum-tree included, over the slots) and
    ``Replay.raw_bytes_per_transition`` (one joint observation, plus the state when one is stored; with
    maddpg's default ``critic_input: auto`` the critic reads observations and no state is stored), and
    their ratio ``replay_over_raw``.

Method. The run's config is the library's defaults for the learner (network sizes, batch size, buffer,
``train_every``, ``updates_per_round``, torch threads) with: the env above and ``num_envs`` (default 8,
the library default); ``warmup_steps`` = the batch size rounded up to whole vector steps (with
``n_step: 1`` a transition can be sampled as soon as it is recorded), and the warm-up ends
``--warmup-updates`` update rounds later (default 3), so first-call costs such as Adam's state
allocation fall outside the window and every vector step of the window runs its update round;
``total_steps`` = warm-up + window; ``eval_every`` = ``total_steps`` (no evaluation inside the window;
the loop's evaluation at ``total_steps`` comes after the window closes); ``eval_episodes`` 1
and ``baselines: [random]`` (outside the window, they only cost time); TensorBoard, GIFs and the progress bar
off; ``log_every`` and ``checkpoint_every`` at their defaults, so a checkpoint that falls inside the
window is counted in ``everything_else`` as in a real run. The bare update loop runs first; without
``--steps`` the window is sized from its median repeat for about ``--seconds`` (default 30). The window
opens when ``learner.act`` is first called with ``env_steps >=`` the warm-up and closes when the loop
calls its evaluation at ``total_steps``; the final evaluation, checkpoint and run files are timed apart
(``excluded_after_window_s``). The run writes into a temporary directory that is deleted afterwards. Each
wrapper reads two clocks twice; that cost is measured on a no-op and reported
(``timer_overhead_fraction``); it falls on the timed parts.

ppo rows. ``ppo_local``, ``ppo_central`` and ``ppo_joint_action`` are ``learner.kind: ppo`` with
that ``learner.critic``, at the library's ppo defaults (rollout length, epochs, minibatches, network
sizes, torch threads) on ``--ppo-num-envs`` copies (default 64). ppo has no replay and no previous
settings: each update collects ``rollout_steps`` vector steps of every copy into a
``RolloutBuffer``, then calls ``learner.update`` on it once. What is measured differs from the rows
above only here:

``env_steps_per_s``, ``fractions``
    As above, in the real loop of a ``marl_core.train._OnPolicyRun`` (its own ``train()``, the loop
    of ``marl_core.onpolicy``), with timing wrappers on ``env.step``, ``learner.act``,
    ``learner.update``, ``buffer.add``, ``buffer.start``, the buffer's unpacking of observations
    (inside the update) and the run's ``scalar``, ``evaluate`` and ``save_checkpoint``. The warm-up
    is ``max(1, --warmup-updates)`` whole rollouts with their updates; the window opens at the start
    of the next rollout, holds whole rollouts (``--steps`` is rounded up to them) and closes when
    the loop calls its evaluation at ``total_steps``. ``update`` is ``learner.update`` (the
    no-gradient pass over the rollout, GAE and every minibatch step); ``everything_else`` holds
    ``buffer.add`` (also reported on its own as ``buffer_add``), the loop's bookkeeping, logging and
    checkpoints inside the window.
``bare_update_per_s``
    ``learner.update`` of a freshly built learner of the same config on one fixed full
    ``RolloutBuffer`` (random 0/1 uint8 observations, random actions, normal rewards, no episode
    end), best of three timed repeats after a warm-up; ``gflop_per_update``, ``achieved_gflops`` and
    ``achieved_over_matmul`` as above, from one counted update. Beside it: ``env_steps_per_update``
    (rollout_steps x copies), ``loop_updates_per_s``, ``loop_update_calls_per_s``,
    ``bare_update_ms`` and ``update_bound_env_steps_per_s`` (bare updates per second x env steps per
    update: the rate if acting and stepping cost nothing). Without ``--steps`` the window is sized
    for about ``--seconds`` from the bare update time and a probe of ten vector steps of acting and
    stepping.
``speedup_vs_idqn``
    The row's ``env_steps_per_s`` over the idqn row's (its ``new`` settings) measured in the same
    run; None when idqn is not measured. Also in a top-level ``speedup_vs_idqn`` mapping.
    ``--settings previous`` alone refuses the ppo rows.

Noise. The window is one long run, not a best of repeats (a training loop's state moves on). Other
processes on the machine slow it down: ``cpu_time_over_wall`` (this process's CPU time over the window's
wall time; torch runs one intra-op thread by default) well below 1, a wide spread of the bare repeats
and the load averages in the JSON say the wall-time figures are pessimistic.

How to read it. Compare figures only between runs on the same machine (the JSON carries python,
torch, numpy, platform, CPU and torch threads). ``targets`` lists what this project aims for
(``speedup`` at least 3 for idqn and 5 for maddpg, ``replay_bytes_ratio`` at most 0.15,
``speedup_vs_idqn`` at least 10 for ppo_local and 8 for ppo_central and ppo_joint_action) and
``targets_met`` says whether this run reached it (None where the run could not tell); neither
changes the exit code.

Usage::

    python scripts/bench_train.py                 # a short table
    python scripts/bench_train.py --json          # one JSON object
    python scripts/bench_train.py --json --learners idqn --steps 8000 --num-envs 16
    python scripts/bench_train.py --json --learners idqn,ppo_local --settings new --ppo-num-envs 32
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from _common import cpu_name, load_average, non_negative_int, positive

__all__ = ["LEARNERS", "PPO_ROWS", "TARGETS", "make_config", "plan", "window_steps", "measure_loop",
           "measure_bare", "bench_learner", "ppo_window_steps", "filled_rollout",
           "measure_bare_ppo", "bench_ppo", "main"]

REPLAY_LEARNERS: tuple[str, ...] = ("idqn", "maddpg")
PPO_ROWS: dict[str, str] = {"ppo_local": "local", "ppo_central": "central",
                            "ppo_joint_action": "joint_action"}  # row -> learner.critic
LEARNERS: tuple[str, ...] = (*REPLAY_LEARNERS, *PPO_ROWS)  # rows of the report, in this order
GAME, LAYOUT = "harvest_v0", "harvest_small"
TARGETS: dict[str, float] = {"speedup_min_idqn": 3.0, "speedup_min_maddpg": 5.0, "replay_bytes_ratio_max": 0.15,
                             "seconds_to_beat_greedy_max": 60.0,
                             "speedup_vs_idqn_min_ppo_local": 10.0,
                             "speedup_vs_idqn_min_ppo_central": 8.0,
                             "speedup_vs_idqn_min_ppo_joint_action": 8.0}
DEFAULT_PPO_NUM_ENVS = 64
DEFAULT_SECONDS = 30.0  # target length of the measured window when --steps is not given
DEFAULT_WARMUP_UPDATES = 3
_BARE_REPEATS = 3
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def _round_up(value: int, multiple: int) -> int:
    return -(-value // multiple) * multiple


def make_config(kind: str, num_envs: int, num_agents: int, view_radius: int, max_cycles: int | None,
                seed: int, warmup_steps: int = 0, total_steps: int = 1, torch_threads: int = 1,
                learner: dict[str, Any] | None = None):
    """The run config of one measurement (see the module docstring); ``learner`` adds learner keys.
    ``warmup_steps`` is left out for a learner that has none (ppo)."""
    from marl_core.config import LEARNERS as LEARNER_CONFIGS
    from marl_core.config import parse_config

    params: dict[str, Any] = {"layout": LAYOUT, "num_agents": num_agents, "view_radius": view_radius}
    if max_cycles is not None:
        params["max_cycles"] = max_cycles
    has_warmup = "warmup_steps" in LEARNER_CONFIGS[kind].model_fields
    warmup = {"warmup_steps": warmup_steps} if has_warmup else {}
    return parse_config({
        "env": {"name": GAME, "params": params, "num_envs": num_envs},
        "learner": {"kind": kind, **warmup, "torch_threads": torch_threads, **(learner or {})},
        "train": {"total_steps": total_steps, "seed": seed, "eval_every": total_steps,
                  "eval_episodes": 1, "baselines": ["random"]},
        "log": {"tensorboard": False, "gif_every": 0, "progress": False},
    })


def updates_per_vector_step(learner_cfg: Any, num_envs: int) -> float:
    """Updates per vector step on average: from the replay ratio when it is set, else from train_every."""
    if learner_cfg.replay_ratio is not None:
        return learner_cfg.replay_ratio * num_envs / learner_cfg.batch_size
    return learner_cfg.updates_per_round / learner_cfg.train_every


def plan(learner_cfg: Any, num_envs: int, warmup_updates: int) -> tuple[int, int]:
    """(warmup_steps, warm-up env steps): learning starts as soon as replay holds a batch (with
    ``n_step: 1`` a transition is sampleable once recorded), and the warm-up ends ``warmup_updates`` update
    rounds later; both are multiples of ``num_envs``."""
    B = num_envs
    starts = max(_round_up(learner_cfg.batch_size, B), B)
    vec_steps = max(1, -(-warmup_updates // max(updates_per_vector_step(learner_cfg, B), 1e-9)))
    return starts, starts + int(vec_steps) * B


def window_steps(learner_cfg: Any, num_envs: int, bare_update_per_s: float, seconds: float) -> int:
    """Env steps for a window of about ``seconds``, assuming updates take 90% of the loop's time at the
    bare update rate (a multiple of ``num_envs``, at least 10 vector steps)."""
    per_vec_step = updates_per_vector_step(learner_cfg, num_envs) / bare_update_per_s / 0.9
    return max(10, round(seconds / per_vec_step)) * num_envs


class _Clock:
    """Accumulates wall time per part while the window is open."""

    def __init__(self, warmup: int):
        self.warmup = warmup
        self.active = self.closed = False
        self.seconds: dict[str, float] = {}
        self.cpu_seconds: dict[str, float] = {}
        self.calls: dict[str, int] = {}
        self.t0 = self.t1 = self.cpu0 = self.cpu1 = 0.0
        self.steps0 = self.episodes0 = self.updates0 = 0
        self.load0: tuple[float, ...] = ()
        self.after: dict[str, float] = {}

    def add(self, key: str, dt: float, dcpu: float) -> None:
        self.seconds[key] = self.seconds.get(key, 0.0) + dt
        self.cpu_seconds[key] = self.cpu_seconds.get(key, 0.0) + dcpu
        self.calls[key] = self.calls.get(key, 0) + 1


def _timed(clock: _Clock, key: str, fn):
    perf, cpu = time.perf_counter, time.process_time

    def wrapper(*args, **kwargs):
        if not clock.active:
            return fn(*args, **kwargs)
        t, c = perf(), cpu()
        try:
            return fn(*args, **kwargs)
        finally:
            clock.add(key, perf() - t, cpu() - c)

    return wrapper


def _timer_overhead_s() -> float:
    """Seconds one timing wrapper adds to a call (measured on a no-op, best of 5)."""
    clock = _Clock(0)
    clock.active = True

    def noop():
        return None

    wrapped, n, best = _timed(clock, "x", noop), 100_000, float("inf")
    for _ in range(5):
        t = time.perf_counter()
        for _ in range(n):
            noop()
        bare = time.perf_counter() - t
        t = time.perf_counter()
        for _ in range(n):
            wrapped()
        best = min(best, (time.perf_counter() - t - bare) / n)
    return max(best, 0.0)


def _instrument(r: Any, clock: _Clock) -> None:
    """Replace instance attributes of the run's objects with timing wrappers around the originals.

    A replay run's window opens at the first exploring ``learner.act`` at or past the warm-up; an
    on-policy run's (it has ``r.buffer``) at the first ``buffer.start`` at or past it, the start of
    the first rollout after the warm-up's last update."""
    on_policy = hasattr(r, "buffer")
    r.env.step = _timed(clock, "env_step", r.env.step)
    if on_policy:
        r.buffer.add = _timed(clock, "buffer_add", r.buffer.add)
        # the buffer's unpacking, inside learner.update
        r.buffer.obs.decode = _timed(clock, "rollout_unpack", r.buffer.obs.decode)
    else:
        r.replay.add = _timed(clock, "replay_add", r.replay.add)
        r.replay.sample = _timed(clock, "replay_sample", r.replay.sample)
        r.replay.update_priorities = _timed(clock, "update_priorities", r.replay.update_priorities)
    r.learner.update = _timed(clock, "learner_update", r.learner.update)
    if not on_policy:
        r.replay._unpack = _timed(clock, "replay_unpack", r.replay._unpack)  # inside replay.sample
    r.scalar = _timed(clock, "logging", r.scalar)
    act = _timed(clock, "act", r.learner.act)

    def open_window(env_steps: int) -> None:
        clock.active = True
        clock.steps0, clock.episodes0, clock.updates0 = env_steps, r.episodes, r.learner.updates
        clock.load0 = load_average()
        clock.cpu0, clock.t0 = time.process_time(), time.perf_counter()

    if on_policy:
        start = _timed(clock, "buffer_start", r.buffer.start)

        def open_window_then_start(obs, state=None):
            if not clock.active and not clock.closed and r.env_steps >= clock.warmup:
                open_window(r.env_steps)
            return start(obs, state)

        r.buffer.start = open_window_then_start
        r.learner.act = act
    else:
        def open_window_then_act(obs, explore, env_steps=0):
            if explore and not clock.active and not clock.closed and env_steps >= clock.warmup:
                open_window(env_steps)
            return act(obs, explore=explore, env_steps=env_steps)

        r.learner.act = open_window_then_act
    evaluate, save = r.evaluate, r.save_checkpoint

    def close_window_then_evaluate(final: bool = False):
        if clock.active:
            clock.t1, clock.cpu1 = time.perf_counter(), time.process_time()
            clock.active, clock.closed = False, True
        t = time.perf_counter()
        out = evaluate(final=final)
        clock.after["final_evaluation"] = clock.after.get("final_evaluation", 0.0) + time.perf_counter() - t
        return out

    timed_save = _timed(clock, "checkpoint", save)

    def timed_checkpoint():
        if clock.active:
            return timed_save()
        t = time.perf_counter()
        save()
        clock.after["final_checkpoint"] = clock.after.get("final_checkpoint", 0.0) + time.perf_counter() - t

    r.evaluate, r.save_checkpoint = close_window_then_evaluate, timed_checkpoint


def measure_loop(cfg: Any, warmup: int) -> dict[str, Any]:
    """Run the real ``train()`` of ``cfg``'s run (``_Run``; ``_OnPolicyRun`` for ppo) in a temporary
    directory with the parts timed."""
    from marl_core.config import dump_config
    from marl_core.train import _OnPolicyRun, _Run

    on_policy = cfg.learner.kind == "ppo"
    tmp = Path(tempfile.mkdtemp(prefix="bench_train_"))
    try:
        out = tmp / "run"
        t_build = time.perf_counter()
        # the same steps as marl_core.train.run, which gives no handle on r
        r = (_OnPolicyRun if on_policy else _Run)(cfg, out, None)
        out.mkdir(parents=True)
        (out / "checkpoints").mkdir()
        dump_config(cfg, out / "config.yaml")
        r.open_logs(purge_step=None)
        r.measure_baselines()
        clock = _Clock(warmup)
        _instrument(r, clock)
        t_train = time.perf_counter()
        r.train()
        t_end = time.perf_counter()
        info = {
            "obs_shape": list(r.spec.obs_shape),
            "obs_dtype": str(r.spec.obs_dtype),
            "num_actions": r.spec.num_actions,
            "updates_total": r.learner.updates,
            "episodes_total": r.episodes,
            "torch_threads": _torch_threads(),
        }
        if on_policy:
            info.update({"rollout_bytes": r.buffer.nbytes, "rollout_packed": r.buffer.obs.pack,
                         "rollout_stores_state": r.keep_state})
        else:
            info.update({
                "replay_bytes_per_transition": r.replay.bytes_per_transition,
                "raw_obs_bytes_per_transition": r.replay.raw_bytes_per_transition,
                "replay_stores_state": r.keep_state,
                "replay_packed": r.replay.pack_bits,
                "replay_capacity": r.replay.capacity,
            })
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    if not clock.closed:
        raise RuntimeError("the measured window never closed; is --steps at least one vector step?")
    window = clock.t1 - clock.t0
    env_steps = cfg.train.total_steps - clock.steps0
    return {"clock": clock, "window_s": window, "window_env_steps": env_steps,
            "warmup_s": clock.t0 - t_train, "setup_s": t_train - t_build,
            "after_window_s": t_end - clock.t1, **info}


def _torch_threads() -> dict[str, int]:
    import torch

    return {"intra_op": torch.get_num_threads(), "inter_op": torch.get_num_interop_threads()}


def _fixed_batch(spec: Any, cfg: Any, seed: int) -> dict[str, Any]:
    """A random batch with the keys, shapes and dtypes of ``Replay.sample`` (no state: none is stored)."""
    import numpy as np

    rng = np.random.default_rng(seed)
    K, N = cfg.batch_size, spec.num_agents
    obs_shape = (K, N, *spec.obs_shape)
    return {
        "obs": rng.integers(0, 2, size=obs_shape, dtype=np.uint8),
        "next_obs": rng.integers(0, 2, size=obs_shape, dtype=np.uint8),
        "actions": rng.integers(0, spec.num_actions, size=(K, N), dtype=np.int64),
        "returns": rng.normal(size=(K, N)).astype(np.float32),
        "discounts": np.full((K, N), cfg.gamma, np.float32),
        "weights": np.ones(K, np.float32),
        "indices": np.arange(K, dtype=np.int64),
    }


def measure_bare(cfg: Any, seconds: float) -> dict[str, Any]:
    """``learner.update`` of a freshly built learner on one fixed batch, in a tight loop."""
    import torch

    from marl_core.learners import build_learner
    from marl_core.team_env import make_team_env

    torch.set_num_threads(cfg.learner.torch_threads)  # as _Run does
    env = make_team_env(cfg.env.name, cfg.env.params, 1, cfg.train.seed, with_state=False)
    spec = env.spec
    env.close()
    learner = build_learner(spec, cfg.learner, cfg.train.seed)
    batch = _fixed_batch(spec, cfg.learner, cfg.train.seed)
    return {**_time_updates(learner.update, batch, seconds, warm_min=5, repeats_min=3),
            "flops": update_flops(learner, batch)}


def _time_updates(update: Any, data: Any, seconds: float, warm_min: int, repeats_min: int) -> dict[str, Any]:
    """``update(data)`` in a tight loop: a warm-up of at least ``warm_min`` calls (and a tenth of
    ``seconds``), then :data:`_BARE_REPEATS` timed blocks of the same number of calls."""
    t, warm = time.perf_counter(), 0
    while warm < warm_min or time.perf_counter() - t < 0.1 * seconds:
        update(data)
        warm += 1
    per_update = (time.perf_counter() - t) / warm
    n = max(repeats_min, int(0.9 * seconds / _BARE_REPEATS / per_update))
    rates, cpu_rates = [], []
    for _ in range(_BARE_REPEATS):
        t, c = time.perf_counter(), time.process_time()
        for _ in range(n):
            update(data)
        rates.append(n / (time.perf_counter() - t))
        cpu_rates.append(n / (time.process_time() - c))
    return {"best": max(rates), "median": sorted(rates)[len(rates) // 2], "repeats": rates,
            "cpu_best": max(cpu_rates), "updates_per_repeat": n, "warmup_updates": warm}


def update_flops(learner: Any, batch: dict[str, Any]) -> int:
    """Floating-point operations of one ``learner.update`` on ``batch`` (a multiply-add counts 2), counted
    by ``torch.utils.flop_counter.FlopCounterMode`` over the matrix products and convolutions, forward and
    backward; elementwise work is not counted. The counted update is a real one (it moves the learner)."""
    from torch.utils.flop_counter import FlopCounterMode

    with FlopCounterMode(display=False) as counter:
        learner.update(batch)
    return int(counter.get_total_flops())


def matmul_gflops(size: int = 512, seconds: float = 1.0) -> dict[str, Any]:
    """What the core does on a plain float32 matrix product ``size`` x ``size`` with the current torch
    threads: best of 5 timed repeats (2 size^3 FLOPs each product), the physical yardstick for
    ``achieved_gflops``."""
    import torch

    a, b = torch.randn(size, size), torch.randn(size, size)
    t, n = time.perf_counter(), 0
    while n < 3 or time.perf_counter() - t < 0.2 * seconds:
        torch.mm(a, b)
        n += 1
    reps = max(3, int(0.8 * seconds / 5 / ((time.perf_counter() - t) / n)))
    best = 0.0
    for _ in range(5):
        t = time.perf_counter()
        for _ in range(reps):
            torch.mm(a, b)
        best = max(best, 2 * size ** 3 * reps / (time.perf_counter() - t) / 1e9)
    return {"size": size, "gflops": round(best, 2)}


def bench_learner(kind: str, args: argparse.Namespace, settings: dict[str, Any] | None = None) -> dict[str, Any]:
    """Every figure of one learner under ``settings`` (``num_envs`` and learner keys; None: ``--num-envs``
    and the library defaults): the bare update loop first (it also sizes the default window)."""
    from marl_core.config import config_to_dict

    settings = settings or {"num_envs": args.num_envs, "learner": {}}
    B, extra = settings["num_envs"], settings["learner"]
    base = make_config(kind, B, args.agents, args.view_radius, args.max_cycles, args.seed,
                       torch_threads=args.torch_threads, learner=extra)
    bare = measure_bare(base, args.bare_seconds)
    starts, warmup = plan(base.learner, B, args.warmup_updates)
    if args.steps:
        steps, chosen = _round_up(args.steps, B), "--steps"
    else:
        steps = window_steps(base.learner, B, bare["median"], args.seconds)
        chosen = f"from the bare update rate, for about {args.seconds:g} s"
    cfg = make_config(kind, B, args.agents, args.view_radius, args.max_cycles, args.seed,
                      warmup_steps=starts, total_steps=warmup + steps, torch_threads=args.torch_threads,
                      learner=extra)
    loop = measure_loop(cfg, warmup)
    clock, window = loop["clock"], loop["window_s"]
    sec = clock.seconds
    calls = clock.calls
    update_s = sec.get("replay_sample", 0.0) + sec.get("learner_update", 0.0) + sec.get(
        "update_priorities", 0.0)
    parts = {"env_step": sec.get("env_step", 0.0), "act": sec.get("act", 0.0), "update": update_s}
    else_s = window - sum(parts.values())
    overhead = _timer_overhead_s() * sum(calls.values())
    updates = calls.get("learner_update", 0)
    vec_steps = loop["window_env_steps"] // B
    named_else = {k: sec.get(k, 0.0) for k in ("replay_add", "logging", "checkpoint")}
    fractions = {**{k: v / window for k, v in parts.items()}, "everything_else": else_s / window,
                 "replay_add": named_else["replay_add"] / window}
    cpu = clock.cpu_seconds
    cpu_window = clock.cpu1 - clock.cpu0
    cpu_parts = {"env_step": cpu.get("env_step", 0.0), "act": cpu.get("act", 0.0),
                 "update": sum(cpu.get(k, 0.0)
                               for k in ("replay_sample", "learner_update", "update_priorities"))}
    cpu_fractions = {**{k: v / cpu_window for k, v in cpu_parts.items()},
                     "everything_else": 1 - sum(cpu_parts.values()) / cpu_window,
                     "replay_add": cpu.get("replay_add", 0.0) / cpu_window}
    ratio = loop["replay_bytes_per_transition"] / loop["raw_obs_bytes_per_transition"]
    L = cfg.learner
    return {
        "unpack_fraction_of_update": (round(sec.get("replay_unpack", 0.0) / update_s, 4)
                                      if update_s and loop["replay_packed"] else None),
        "replay_packed": loop["replay_packed"],
        "env_steps_per_s": round(loop["window_env_steps"] / window, 1),
        "fractions": {k: round(v, 4) for k, v in fractions.items()},
        "cpu_time_fractions": {k: round(v, 4) for k, v in cpu_fractions.items()},
        "seconds": {
            "window": round(window, 3),
            **{k: round(v, 3) for k, v in parts.items()},
            "update_parts": {k: round(sec.get(k, 0.0), 3)
                             for k in ("replay_sample", "learner_update", "update_priorities")},
            "replay_unpack": round(sec.get("replay_unpack", 0.0), 3),
            "everything_else": round(else_s, 3),
            "everything_else_parts": {**{k: round(v, 3) for k, v in named_else.items()},
                                      "loop_and_collector_rest": round(else_s - sum(named_else.values()), 3)},
        },
        "ms_per_vector_step": {
            "total": round(1e3 * window / vec_steps, 3),
            **{k: round(1e3 * v / vec_steps, 3) for k, v in parts.items()},
            "everything_else": round(1e3 * else_s / vec_steps, 3),
            "replay_add": round(1e3 * named_else["replay_add"] / vec_steps, 3),
        },
        "calls_in_window": dict(sorted(calls.items())),
        "timer_overhead_fraction": round(overhead / window, 5),
        "bare_update_per_s": round(bare["best"], 2),
        "bare_update_per_cpu_s": round(bare["cpu_best"], 2),
        "gflop_per_update": round(bare["flops"] / 1e9, 4),
        "achieved_gflops": round(bare["flops"] * bare["cpu_best"] / 1e9, 2),
        "bare_update_per_s_repeats": [round(x, 2) for x in bare["repeats"]],
        "bare_updates_per_repeat": bare["updates_per_repeat"],
        "loop_updates_per_s": round(updates / window, 2),
        "loop_update_calls_per_s": round(updates / sec["learner_update"], 2) if updates else None,
        "loop_update_call_over_bare": (round(updates / sec["learner_update"] / bare["best"], 3)
                                       if updates else None),
        "loop_update_per_cpu_s": (round(updates / clock.cpu_seconds["learner_update"], 2)
                                  if updates else None),
        "replay_bytes_per_transition": round(loop["replay_bytes_per_transition"], 2),
        "raw_obs_bytes_per_transition": loop["raw_obs_bytes_per_transition"],
        "replay_over_raw": round(ratio, 4),
        "replay_stores_state": loop["replay_stores_state"],
        "window": {"env_steps": loop["window_env_steps"], "vector_steps": vec_steps, "chosen": chosen,
                   "from_env_steps": clock.steps0, "to_env_steps": cfg.train.total_steps,
                   "updates": updates, "episodes_ended": loop["episodes_total"] - clock.episodes0},
        "warmup": {"env_steps": clock.steps0, "seconds": round(loop["warmup_s"], 3),
                   "updates": clock.updates0, "warmup_steps": L.warmup_steps},
        "excluded_after_window_s": {**{k: round(v, 3) for k, v in clock.after.items()},
                                    "all": round(loop["after_window_s"], 3)},
        "setup_s": round(loop["setup_s"], 3),
        "cpu_time_over_wall": round((clock.cpu1 - clock.cpu0) / window, 3),
        "loadavg_at_start": clock.load0,
        "loadavg_at_end": load_average(),
        "torch_threads": loop["torch_threads"],
        "obs_shape": loop["obs_shape"],
        "obs_dtype": loop["obs_dtype"],
        "num_actions": loop["num_actions"],
        "stated_config": {"num_envs": cfg.env.num_envs, "batch_size": L.batch_size,
                          "train_every": L.train_every, "updates_per_round": L.updates_per_round,
                          "replay_ratio": L.replay_ratio, "pack_replay": L.pack_replay,
                          "hidden": L.hidden, "conv_channels": L.conv_channels, "conv_strides": L.conv_strides,
                          "replay_size": L.replay_size, "warmup_steps": L.warmup_steps,
                          "total_steps": cfg.train.total_steps, "eval_every": cfg.train.eval_every,
                          "checkpoint_every": cfg.train.checkpoint_every,
                          "log_every": cfg.log.log_every, "max_cycles": cfg.env.params["max_cycles"]},
        "config": config_to_dict(cfg),
        "kind": kind,
    }


# ------------------------------------------------------------------------------------- ppo rows
def ppo_window_steps(cfg: Any, update_s: float, vector_step_s: float, seconds: float) -> int:
    """Env steps for a window of about ``seconds`` in whole rollouts (at least one): a rollout costs
    ``rollout_steps`` vector steps of acting and stepping at ``vector_step_s`` each, then one update
    of ``update_s``."""
    L, B = cfg.learner, cfg.env.num_envs
    per_update = L.rollout_steps * vector_step_s + update_s
    return max(1, round(seconds / per_update)) * L.rollout_steps * B


def filled_rollout(spec: Any, learner_cfg: Any, num_envs: int, seed: int, with_state: bool = False):
    """A full ``RolloutBuffer`` as ``_OnPolicyRun`` makes it (``rollout_steps`` x ``num_envs``,
    bit-packed when the spaces allow and ``pack_rollout`` says so), filled with random 0/1
    observations (and states when ``with_state``), uniformly random actions, normal rewards and no
    episode end (the real loop's ends are rare: one step in ``max_cycles``)."""
    import numpy as np

    from marl_core.buffer import RolloutBuffer
    from marl_core.train import _zero_one

    rng = np.random.default_rng(seed)
    T, B, N = learner_cfg.rollout_steps, num_envs, spec.num_agents
    space = spec.state_space if with_state else None
    buf = RolloutBuffer(T, B, N, spec.obs_shape, spec.obs_dtype,
                        state_shape=None if space is None else tuple(space.shape),
                        state_dtype=None if space is None else space.dtype,
                        pack=learner_cfg.pack_rollout and _zero_one(spec.obs_space) and (
                            space is None or _zero_one(space)))

    def obs():
        return rng.integers(0, 2, size=(B, N, *spec.obs_shape)).astype(spec.obs_dtype)

    def state():
        if space is None:
            return None
        return rng.integers(0, 2, size=(B, *space.shape)).astype(space.dtype)

    buf.start(obs(), state())
    terminated, end = np.zeros((B, N), bool), np.zeros(B, bool)
    for _ in range(T):
        nxt, nxt_state = obs(), state()
        actions = rng.integers(0, spec.num_actions, size=(B, N))
        rewards = rng.normal(size=(B, N)).astype(np.float32)
        buf.add(actions, rewards, terminated, end, nxt, nxt, nxt_state, nxt_state)
    return buf


def measure_bare_ppo(cfg: Any, seconds: float) -> dict[str, Any]:
    """``learner.update`` of a freshly built ppo learner on one fixed filled rollout
    (:func:`filled_rollout`), in a tight loop: best of three timed repeats after a warm-up, as
    :func:`measure_bare`. Before it, a short probe of acting and stepping (``learner.act`` with
    exploration, then the env's step, on ``env.num_envs`` copies) that only sizes the default
    window."""
    import torch

    from marl_core.learners import build_learner
    from marl_core.rollout import Collector
    from marl_core.team_env import make_team_env
    from marl_core.train import _reads_state

    torch.set_num_threads(cfg.learner.torch_threads)  # as _Run does
    seed = cfg.train.seed
    env = make_team_env(cfg.env.name, cfg.env.params, cfg.env.num_envs, seed,
                        with_state=_reads_state(cfg.learner))
    spec = env.spec
    learner = build_learner(spec, cfg.learner, seed)
    col = Collector(env, seed)
    probe, t = 0, 0.0
    for i in range(10):  # the first two steps are not timed
        if i == 2:
            t = time.perf_counter()
        col.step(learner.act(col.obs, explore=True, env_steps=0))
        probe += i >= 2
    vector_step_s = (time.perf_counter() - t) / probe
    env.close()
    rollout = filled_rollout(spec, cfg.learner, cfg.env.num_envs, seed,
                             with_state=learner.uses_state)
    flops = update_flops(learner, rollout)
    return {**_time_updates(learner.update, rollout, seconds, warm_min=2, repeats_min=2), "flops": flops,
            "vector_step_s": vector_step_s}


def bench_ppo(row: str, args: argparse.Namespace) -> dict[str, Any]:
    """Every figure of one ppo row (``learner.critic`` from :data:`PPO_ROWS`) at the library's ppo
    defaults on ``--ppo-num-envs`` copies: the bare update loop first (it also sizes the default
    window), then the real loop of ``_OnPolicyRun``."""
    from marl_core.config import config_to_dict

    B, extra = args.ppo_num_envs, {"critic": PPO_ROWS[row]}
    base = make_config("ppo", B, args.agents, args.view_radius, args.max_cycles, args.seed,
                       torch_threads=args.torch_threads, learner=extra)
    bare = measure_bare_ppo(base, args.bare_seconds)
    per_update = base.learner.rollout_steps * B  # env steps per update
    warmup = max(1, args.warmup_updates) * per_update
    if args.steps:
        steps, chosen = _round_up(args.steps, per_update), "--steps, rounded up to whole rollouts"
    else:
        steps = ppo_window_steps(base, 1 / bare["median"], bare["vector_step_s"], args.seconds)
        chosen = (f"from the bare update rate and a probe of acting and stepping, for about "
                  f"{args.seconds:g} s")
    cfg = make_config("ppo", B, args.agents, args.view_radius, args.max_cycles, args.seed,
                      total_steps=warmup + steps, torch_threads=args.torch_threads, learner=extra)
    loop = measure_loop(cfg, warmup)
    clock, window = loop["clock"], loop["window_s"]
    sec, cpu, calls = clock.seconds, clock.cpu_seconds, clock.calls
    parts = {"env_step": sec.get("env_step", 0.0), "act": sec.get("act", 0.0),
             "update": sec.get("learner_update", 0.0)}
    else_s = window - sum(parts.values())
    named_else = {k: sec.get(k, 0.0)
                  for k in ("buffer_add", "buffer_start", "logging", "checkpoint")}
    fractions = {**{k: v / window for k, v in parts.items()}, "everything_else": else_s / window,
                 "buffer_add": named_else["buffer_add"] / window}
    cpu_window = clock.cpu1 - clock.cpu0
    cpu_parts = {"env_step": cpu.get("env_step", 0.0), "act": cpu.get("act", 0.0),
                 "update": cpu.get("learner_update", 0.0)}
    cpu_fractions = {**{k: v / cpu_window for k, v in cpu_parts.items()},
                     "everything_else": 1 - sum(cpu_parts.values()) / cpu_window,
                     "buffer_add": cpu.get("buffer_add", 0.0) / cpu_window}
    overhead = _timer_overhead_s() * sum(calls.values())
    updates = calls.get("learner_update", 0)
    vec_steps = loop["window_env_steps"] // B
    update_s = parts["update"]
    L = cfg.learner
    return {
        "env_steps_per_s": round(loop["window_env_steps"] / window, 1),
        "env_steps_per_update": per_update,
        "fractions": {k: round(v, 4) for k, v in fractions.items()},
        "cpu_time_fractions": {k: round(v, 4) for k, v in cpu_fractions.items()},
        "unpack_fraction_of_update": (round(sec.get("rollout_unpack", 0.0) / update_s, 4)
                                      if update_s and loop["rollout_packed"] else None),
        "rollout_packed": loop["rollout_packed"],
        "seconds": {
            "window": round(window, 3),
            **{k: round(v, 3) for k, v in parts.items()},
            "rollout_unpack": round(sec.get("rollout_unpack", 0.0), 3),
            "everything_else": round(else_s, 3),
            "everything_else_parts": {
                **{k: round(v, 3) for k, v in named_else.items()},
                "loop_and_collector_rest": round(else_s - sum(named_else.values()), 3)},
        },
        "ms_per_vector_step": {
            "total": round(1e3 * window / vec_steps, 3),
            **{k: round(1e3 * v / vec_steps, 3) for k, v in parts.items()},
            "everything_else": round(1e3 * else_s / vec_steps, 3),
            "buffer_add": round(1e3 * named_else["buffer_add"] / vec_steps, 3),
        },
        "calls_in_window": dict(sorted(calls.items())),
        "timer_overhead_fraction": round(overhead / window, 5),
        "bare_update_per_s": round(bare["best"], 3),
        "bare_update_per_cpu_s": round(bare["cpu_best"], 3),
        "bare_update_ms": round(1e3 / bare["best"], 2),
        "update_bound_env_steps_per_s": round(bare["best"] * per_update, 1),
        "gflop_per_update": round(bare["flops"] / 1e9, 4),
        "achieved_gflops": round(bare["flops"] * bare["cpu_best"] / 1e9, 2),
        "bare_update_per_s_repeats": [round(x, 3) for x in bare["repeats"]],
        "bare_updates_per_repeat": bare["updates_per_repeat"],
        "probe_vector_step_ms": round(1e3 * bare["vector_step_s"], 3),
        "loop_updates_per_s": round(updates / window, 3),
        "loop_update_calls_per_s": round(updates / update_s, 3) if updates else None,
        "loop_update_call_over_bare": (round(updates / update_s / bare["best"], 3)
                                       if updates else None),
        "loop_update_per_cpu_s": (round(updates / cpu["learner_update"], 3) if updates else None),
        "rollout_bytes": loop["rollout_bytes"],
        "rollout_stores_state": loop["rollout_stores_state"],
        "window": {"env_steps": loop["window_env_steps"], "vector_steps": vec_steps,
                   "chosen": chosen, "from_env_steps": clock.steps0,
                   "to_env_steps": cfg.train.total_steps, "updates": updates,
                   "episodes_ended": loop["episodes_total"] - clock.episodes0},
        "warmup": {"env_steps": clock.steps0, "seconds": round(loop["warmup_s"], 3),
                   "updates": clock.updates0},
        "excluded_after_window_s": {**{k: round(v, 3) for k, v in clock.after.items()},
                                    "all": round(loop["after_window_s"], 3)},
        "setup_s": round(loop["setup_s"], 3),
        "cpu_time_over_wall": round(cpu_window / window, 3),
        "loadavg_at_start": clock.load0,
        "loadavg_at_end": load_average(),
        "torch_threads": loop["torch_threads"],
        "obs_shape": loop["obs_shape"],
        "obs_dtype": loop["obs_dtype"],
        "num_actions": loop["num_actions"],
        "stated_config": {"num_envs": cfg.env.num_envs, "critic": L.critic,
                          "critic_input": L.critic_input, "rollout_steps": L.rollout_steps,
                          "epochs": L.epochs, "minibatches": L.minibatches,
                          "minibatch_joint_steps": per_update // L.minibatches,
                          "share_parameters": L.share_parameters, "pack_rollout": L.pack_rollout,
                          "hidden": L.hidden, "conv_channels": L.conv_channels,
                          "conv_strides": L.conv_strides, "total_steps": cfg.train.total_steps,
                          "eval_every": cfg.train.eval_every,
                          "checkpoint_every": cfg.train.checkpoint_every,
                          "log_every": cfg.log.log_every,
                          "max_cycles": cfg.env.params["max_cycles"]},
        "config": config_to_dict(cfg),
        "kind": "ppo",
        "row": row,
    }


QUICK_START = Path(__file__).resolve().parent.parent / "configs" / "harvest_idqn.yaml"
TIME_TO_RESULT_SEEDS = 3
TIME_TO_RESULT_EVAL_EVERY = 5000


class _Beaten(Exception):
    """Raised from the timed evaluation that first beats the scripted greedy team: the run stops there."""


def seconds_to_beat_greedy(seed: int, eval_every: int, overrides: list[str]) -> dict[str, Any]:
    """Train the quick-start config (``configs/harvest_idqn.yaml``) with seed ``seed`` and an evaluation
    every ``eval_every`` env steps, and stop at the first evaluation whose efficiency (exploration off, the
    config's evaluation episodes) is above the greedy team's on the same episodes. ``seconds`` is the wall
    time from the first env step to the end of that evaluation, evaluations included (what a user waits);
    ``training_seconds`` leaves the evaluations out. None for both if no evaluation beats it."""
    from marl_core.config import dump_config, load_config
    from marl_core.train import _Run

    cfg = load_config(QUICK_START, [f"train.seed={seed}", f"train.eval_every={eval_every}",
                                    "train.baselines=[greedy]", "log.tensorboard=false", "log.gif_every=0",
                                    "log.progress=false", *overrides])
    tmp = Path(tempfile.mkdtemp(prefix="bench_ttr_"))
    try:
        out = tmp / "run"
        r = _Run(cfg, out, None)  # the steps of marl_core.train.run, with a handle on the run
        out.mkdir(parents=True)
        (out / "checkpoints").mkdir()
        dump_config(cfg, out / "config.yaml")
        r.open_logs(purge_step=None)
        r.measure_baselines()  # outside the timing: the greedy team's figure is the bar, not the work
        greedy = r.baselines["greedy"]["efficiency"]
        evaluate, curve, spent = r.evaluate, [], [0.0]

        def timed_evaluate(final: bool = False):
            t = time.perf_counter()
            ev = evaluate(final=final)
            spent[0] += time.perf_counter() - t
            curve.append((r.env_steps, round(ev["efficiency"], 4)))
            if ev["efficiency"] > greedy:
                raise _Beaten
            return ev

        r.evaluate = timed_evaluate
        t0 = time.perf_counter()
        try:
            r.train()
            beaten = False
        except _Beaten:
            beaten = True
        wall = time.perf_counter() - t0
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return {"seed": seed, "seconds": round(wall, 2) if beaten else None,
            "training_seconds": round(wall - spent[0], 2) if beaten else None,
            "env_steps": curve[-1][0] if beaten else None, "greedy_efficiency": round(greedy, 4),
            "curve": curve, "total_steps": cfg.train.total_steps}


def time_to_result(seeds: int, eval_every: int, overrides: list[str]) -> dict[str, Any]:
    """``seconds_to_beat_greedy``: the median over seeds 0 .. seeds-1 of :func:`seconds_to_beat_greedy`
    (a seed that never beats the greedy team counts as infinitely slow, and the median is then None if
    half or more never do), one run after the other in this process."""
    import statistics

    runs = [seconds_to_beat_greedy(seed, eval_every, overrides) for seed in range(seeds)]
    key = [r["seconds"] if r["seconds"] is not None else float("inf") for r in runs]
    median = statistics.median(key)
    return {"config": "configs/harvest_idqn.yaml", "overrides": overrides, "eval_every": eval_every,
            "seconds_to_beat_greedy": None if median == float("inf") else round(median, 2),
            "target_seconds": TARGETS["seconds_to_beat_greedy_max"], "runs": runs}


# The settings of the first release, pinned here so that the comparison stays the same as defaults move
PREVIOUS_LEARNER: dict[str, Any] = {"pack_replay": False, "conv_channels": [16, 32], "conv_strides": None,
                                    "hidden": 128, "train_every": 1, "updates_per_round": 1}
SETTINGS = ("previous", "new")
DEFAULT_NEW_NUM_ENVS = 32


def settings_of(name: str, kind: str, args: argparse.Namespace) -> dict[str, Any]:
    """``previous``: the first release's settings on ``--num-envs`` copies. ``new``: the library's current
    defaults on ``--new-num-envs`` copies, at the previous replay ratio (``learner.replay_ratio``)."""
    previous = {"num_envs": args.num_envs, "learner": dict(PREVIOUS_LEARNER)}
    if name == "previous":
        return previous
    L = make_config(kind, args.num_envs, args.agents, args.view_radius, args.max_cycles, args.seed,
                    learner=previous["learner"]).learner
    ratio = L.batch_size * L.updates_per_round / (args.num_envs * L.train_every)
    return {"num_envs": args.new_num_envs, "learner": {"replay_ratio": ratio}}


def compared(runs: dict[str, dict[str, Any]]) -> dict[str, Any]:
    """The headline keys of one row from its ``previous`` and ``new`` measurements (either may be
    missing when ``--settings`` picks one; a ppo row has only ``new``), then each measurement in
    full. A ppo row's ``speedup_vs_idqn`` is None here; ``main`` fills it in once idqn is
    measured."""
    main = runs.get("new") or runs["previous"]
    if main["kind"] == "ppo":
        head = {"env_steps_per_s": main["env_steps_per_s"], "speedup_vs_idqn": None,
                "unpack_fraction_of_update": main["unpack_fraction_of_update"],
                "targets_met": {"speedup_vs_idqn_min": None}}
        return {**head, **runs}
    head: dict[str, Any] = {
        "env_steps_per_s": main["env_steps_per_s"],
        "replay_bytes_ratio": main["replay_over_raw"],
        "unpack_fraction_of_update": main["unpack_fraction_of_update"],
    }
    if "new" in runs and "previous" in runs:
        prev = runs["previous"]
        head.update({"previous_env_steps_per_s": prev["env_steps_per_s"],
                     "speedup": round(main["env_steps_per_s"] / prev["env_steps_per_s"], 3),
                     "previous_replay_bytes_ratio": prev["replay_over_raw"],
                     "replay_ratio": main["stated_config"]["replay_ratio"]})
    head["targets_met"] = {
        **({"speedup_min": head["speedup"] >= TARGETS[f"speedup_min_{main['kind']}"]} if "speedup" in head
           else {}),
        "replay_bytes_ratio_max": head["replay_bytes_ratio"] <= TARGETS["replay_bytes_ratio_max"],
    }
    return {**head, **runs}


def _learner_list(text: str) -> list[str]:
    names = [t.strip() for t in text.split(",") if t.strip()]
    bad = [n for n in names if n not in LEARNERS]
    if not names or bad:
        raise argparse.ArgumentTypeError(f"expected a comma-separated list of {', '.join(LEARNERS)}; "
                                         f"got {text!r}")
    return list(dict.fromkeys(names))


def row_settings(row: str, settings: list[str]) -> list[str]:
    """The settings a row is measured under: those of ``--settings`` it has (a ppo row has only
    ``new``)."""
    return [n for n in settings if row not in PPO_ROWS or n == "new"]


def speedups_vs_idqn(results: dict[str, dict[str, Any]]) -> dict[str, float | None]:
    """Each ppo row's env steps per second over idqn's (its ``new`` settings) in the same run (None
    without it); sets the row's ``speedup_vs_idqn`` and ``targets_met`` too."""
    idqn = results.get("idqn", {}).get("new", {}).get("env_steps_per_s")
    out: dict[str, float | None] = {}
    for row in results:
        if row in PPO_ROWS:
            ratio = round(results[row]["env_steps_per_s"] / idqn, 3) if idqn else None
            results[row]["speedup_vs_idqn"] = out[row] = ratio
            results[row]["targets_met"]["speedup_vs_idqn_min"] = (
                None if ratio is None else ratio >= TARGETS[f"speedup_vs_idqn_min_{row}"])
    return out


def _settings_list(text: str) -> list[str]:
    names = [t.strip() for t in text.split(",") if t.strip()]
    if not names or any(n not in SETTINGS for n in names):
        raise argparse.ArgumentTypeError(f"expected a comma-separated list of {', '.join(SETTINGS)}; "
                                         f"got {text!r}")
    return [n for n in SETTINGS if n in names]


def _table(report: dict[str, Any]) -> str:
    lines = [f"python {report['python']}  torch {report['torch']}  numpy {report['numpy']}  "
             f"{report['platform']}", f"cpu {report['cpu']} x{report['cpu_count']}", "",
             f"{'learner':<18}{'settings':<10}{'copies':>7}{'env steps/s':>12}{'env':>7}{'act':>7}"
             f"{'update':>8}"
             f"{'else':>7}{'unpack':>8}{'upd/s loop':>12}{'bare':>8}{'GFLOP/s':>9}{'replay/raw':>12}"
             f"{'cpu/wall':>10}"]
    for kind in report["learners"]:
        for name in (n for n in report["settings"] if n in report[kind]):
            r = report[kind][name]
            f = r["fractions"]
            unpack = r["unpack_fraction_of_update"] or 0.0
            replay = f"{r['replay_over_raw']:>12.3f}" if "replay_over_raw" in r else f"{'-':>12}"
            lines.append(f"{kind:<18}{name:<10}{r['stated_config']['num_envs']:>7}"
                         f"{r['env_steps_per_s']:>12,.0f}"
                         f"{f['env_step']:>7.1%}{f['act']:>7.1%}{f['update']:>8.1%}{f['everything_else']:>7.1%}"
                         f"{unpack:>8.1%}{r['loop_updates_per_s']:>12.2f}"
                         f"{r['bare_update_per_s']:>8.2f}"
                         f"{r['achieved_gflops']:>9.1f}{replay}{r['cpu_time_over_wall']:>10.2f}")
    lines += ["", "fractions of the window's wall time (unpack: of the update time); upd/s: per window "
              "second, bare loop; GFLOP/s: bare updates per CPU second x counted FLOPs, against "
              f"{report['matmul_gflops']['gflops']:.1f} for a plain matrix product", "targets:"]
    for kind in report["learners"]:
        r = report[kind]
        if kind in PPO_ROWS:
            goal = TARGETS["speedup_vs_idqn_min_" + kind]
            speed = ("needs idqn in the same run" if r["speedup_vs_idqn"] is None
                     else f"{r['speedup_vs_idqn']:.2f}x")
            lines.append(f"  {kind}: env steps/s over idqn's (new settings) {speed} "
                         f"(goal >= {goal:g}x)")
            continue
        speed = (f"speedup {r['speedup']:.2f}x (goal >= {TARGETS['speedup_min_' + kind]:g}x)"
                 if "speedup" in r else "speedup: needs both settings")
        lines.append(f"  {kind}: {speed}; replay bytes / raw obs bytes {r['replay_bytes_ratio']:.3f} "
                     f"(goal <= {TARGETS['replay_bytes_ratio_max']})")
    if "time_to_result" in report:
        t = report["time_to_result"]
        per_seed = ", ".join("never" if r["seconds"] is None else f"{r['seconds']:.0f}" for r in t["runs"])
        lines.append(f"  quick start beats the greedy team after {t['seconds_to_beat_greedy']} s, median "
                     f"(seeds: {per_seed}; goal <= {TARGETS['seconds_to_beat_greedy_max']:g} s)")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--steps", type=positive(int), default=None,
                        help="measured env steps per learner (default: sized from the bare update rate "
                             "for about --seconds)")
    parser.add_argument("--seconds", type=positive(float), default=DEFAULT_SECONDS,
                        help=f"target window length when --steps is not given (default "
                             f"{DEFAULT_SECONDS:g})")
    parser.add_argument("--warmup-updates", type=non_negative_int, default=DEFAULT_WARMUP_UPDATES,
                        help=f"update rounds after learning starts and before the window (default "
                             f"{DEFAULT_WARMUP_UPDATES})")
    parser.add_argument("--num-envs", type=positive(int), default=8, help="env copies (default 8)")
    parser.add_argument("--agents", type=positive(int), default=5, help="agents per copy (default 5)")
    parser.add_argument("--view-radius", type=positive(int), default=7, help="view radius (default 7)")
    parser.add_argument("--max-cycles", type=positive(int), default=None,
                        help="episode length (default: the game's)")
    parser.add_argument("--bare-seconds", type=positive(float), default=10.0,
                        help="time budget of the bare update loop per learner (default 10)")
    parser.add_argument("--learners", type=_learner_list, default=list(LEARNERS),
                        help=f"comma-separated rows (default {','.join(LEARNERS)})")
    parser.add_argument("--seed", type=int, default=0, help="seed of the run and of the bare batch")
    parser.add_argument("--torch-threads", type=positive(int), default=1,
                        help="learner.torch_threads of the measured runs (default 1, the library default)")
    parser.add_argument("--new-num-envs", type=positive(int), default=DEFAULT_NEW_NUM_ENVS,
                        help=f"env copies of the new settings (default {DEFAULT_NEW_NUM_ENVS})")
    parser.add_argument("--settings", type=_settings_list, default=list(SETTINGS),
                        help="comma-separated: previous, new (default both); ppo rows have only "
                             "new")
    parser.add_argument("--ppo-num-envs", type=positive(int), default=DEFAULT_PPO_NUM_ENVS,
                        help=f"env copies of the ppo rows (default {DEFAULT_PPO_NUM_ENVS})")
    parser.add_argument("--time-to-result", action="store_true",
                        help="also time the quick-start config to beating the greedy team "
                             f"(seconds_to_beat_greedy, median of {TIME_TO_RESULT_SEEDS} seeds)")
    parser.add_argument("--ttr-seeds", type=positive(int), default=TIME_TO_RESULT_SEEDS,
                        help=f"seeds of --time-to-result (default {TIME_TO_RESULT_SEEDS})")
    parser.add_argument("--ttr-eval-every", type=positive(int), default=TIME_TO_RESULT_EVAL_EVERY,
                        help=f"env steps between the evaluations of --time-to-result (default "
                             f"{TIME_TO_RESULT_EVAL_EVERY})")
    parser.add_argument("--ttr-set", action="append", default=[], metavar="KEY=VALUE",
                        help="a config override for --time-to-result runs (repeatable)")
    parser.add_argument("--skip-throughput", action="store_true",
                        help="with --time-to-result: measure only the time to result")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    args = parser.parse_args(argv)
    if args.skip_throughput and not args.time_to_result:
        parser.error("--skip-throughput needs --time-to-result")
    no_setting = [row for row in args.learners if not row_settings(row, args.settings)]
    if no_setting and not args.skip_throughput:
        parser.error(f"--settings {','.join(args.settings)}: {', '.join(no_setting)} ha"
                     f"{'s' if len(no_setting) == 1 else 've'} only the new settings")

    import numpy as np
    import torch

    from envs.errors import EnvError
    from marl_core.config import load_config
    from marl_core.errors import ConfigError
    from marl_core.team_env import make_team_env

    try:  # a bad option fails here, before any measurement (e.g. more agents than spawn points)
        cfg = make_config(LEARNERS[0], args.num_envs, args.agents, args.view_radius, args.max_cycles,
                          args.seed)
        make_team_env(cfg.env.name, cfg.env.params, 1, args.seed, with_state=False).close()
    except (ConfigError, EnvError) as err:
        parser.error(str(err))
    if args.ttr_set:
        try:
            load_config(QUICK_START, args.ttr_set)
        except ConfigError as err:
            parser.error(f"--ttr-set: {err}")
    results = {}
    learners = [] if args.skip_throughput else args.learners
    for kind in learners:
        if kind in PPO_ROWS:
            runs = {"new": bench_ppo(kind, args)}
        else:
            runs = {name: bench_learner(kind, args, settings_of(name, kind, args))
                    for name in args.settings}
        results[kind] = compared(runs)
    speedup_vs_idqn = speedups_vs_idqn(results)
    torch.set_num_threads(args.torch_threads)
    matmul = matmul_gflops()
    for kind in results:
        for name in row_settings(kind, args.settings):
            run = results[kind][name]
            run["achieved_over_matmul"] = round(run["achieved_gflops"] / matmul["gflops"], 3)
    extra: dict[str, Any] = {}
    if speedup_vs_idqn:
        extra["speedup_vs_idqn"] = speedup_vs_idqn
    if args.time_to_result:
        extra["time_to_result"] = time_to_result(args.ttr_seeds, args.ttr_eval_every, args.ttr_set)
        extra["seconds_to_beat_greedy"] = extra["time_to_result"]["seconds_to_beat_greedy"]
    report = {
        "python": platform.python_version(),
        "torch": torch.__version__,
        "numpy": np.__version__,
        "platform": platform.platform(),
        "cpu": cpu_name(),
        "cpu_count": os.cpu_count(),
        "torch_threads": _torch_threads(),
        "thread_env": {v: os.environ.get(v) for v in _THREAD_VARS},
        "game": GAME,
        "layout": LAYOUT,
        "seed": args.seed,
        "learners": learners,
        "settings": args.settings,
        "targets": TARGETS,
        "targets_met": {k: results[k]["targets_met"] for k in results},
        "matmul_gflops": matmul,
        **extra,
        **results,
    }
    if args.time_to_result:
        ttr = extra["seconds_to_beat_greedy"]
        report["targets_met"]["seconds_to_beat_greedy_max"] = (
            ttr is not None and ttr <= TARGETS["seconds_to_beat_greedy_max"])
    print(json.dumps(report, indent=2) if args.json else _table(report))
    return 0


if __name__ == "__main__":
    sys.exit(main())
