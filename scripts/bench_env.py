"""Throughput benchmark of the grid games: the batched engine against the PettingZoo loop.

This is a benchmark, not a test: it measures and prints, it asserts nothing and it exits 0.

What it measures, for ``harvest_v0`` and ``cleanup_v0`` (default layout of each game, 5 agents, view radius 7
unless overridden):

``batched_agent_steps_per_s``
    ``envs.<game>.vector_env(num_envs, ...)`` stepped with uniformly random actions, generated before the
    clock starts from a seeded generator, one ``(num_envs, num_agents)`` int64 array per step.
    Agent-steps = steps x num_envs x num_agents.
``single_agent_steps_per_s``
    ``envs.<game>.parallel_env(...)`` driven the way a user drives a PettingZoo ``ParallelEnv``: a dict of
    actions ``{agent_id: int}`` per step (the dicts are built before the clock starts, so the figure is the
    env's cost, not the cost of sampling), until ``env.agents`` is empty, then ``reset()``.
    Agent-steps = steps x num_agents.
``ratio``
    batched / single: how much the batched path buys over looping single envs on one core.

Method. Everything runs on one thread: ``OMP_NUM_THREADS``, ``OPENBLAS_NUM_THREADS`` and
``MKL_NUM_THREADS`` are set to 1 before numpy is imported (the JSON records whether numpy was already loaded,
in which case the setting could not take effect). For each measurement the env is reset with a fixed seed
and warmed up for a tenth of the time budget, which also estimates its speed. From that estimate the number
of steps per repeat is chosen so that ``repeats`` timed repeats fill ``--seconds``; when a repeat holds at
least half an episode the count is rounded down to whole episodes (at least one), so every repeat runs
the same mix of steps and resets. Each repeat starts from the same seeded reset (not timed) and replays the same actions; an
episode that ends by truncation is reset inside the timed loop, because resetting is part of running
episodes. The figure reported is the best (fastest) repeat: noise on a shared machine only ever slows a
run down, so the minimum time is the best estimate of the code's own cost. Every repeat's wall time
(``times_s``) and CPU time of this process (``cpu_s``) are listed too, with the machine's load average
before and after: a wide spread of times, wall well above CPU, or a load near or above ``cpu_count`` all
mean other work shared the machine and the figures are low.

How to read it. Compare figures only between runs on the same machine (the JSON carries python, numpy,
platform and CPU). ``targets`` lists the throughput this project aims for and ``targets_met`` says whether
this run reached it; neither changes the exit code.

Usage::

    python scripts/bench_env.py            # a short table
    python scripts/bench_env.py --json     # one JSON object
    python scripts/bench_env.py --json --num-envs 128 --seconds 5
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import time
from typing import Any

from _common import cpu_name, load_average, non_negative_int, positive

__all__ = ["GAMES", "TARGETS", "measure_batched", "measure_single", "bench_game", "main"]

GAMES: tuple[str, ...] = ("harvest_v0", "cleanup_v0")
TARGETS: dict[str, dict[str, float]] = {
    "harvest_v0": {"batched_agent_steps_per_s": 300_000, "ratio": 10},
    "cleanup_v0": {"ratio": 10},
}
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")
_WARMUP_SHARE = 0.1  # share of the time budget spent warming up (and estimating the speed)
_METHOD = ("best of {k}: the fastest of {k} timed repeats after a warm-up of a tenth of the budget; every "
           "repeat starts from the same seeded reset (untimed) and replays the same pre-generated seeded "
           "random actions; truncated episodes are reset inside the timed loop")


def _single_thread() -> dict[str, Any]:
    """Pin the BLAS/OpenMP pools to one thread; must run before numpy is imported to take effect."""
    already = "numpy" in sys.modules
    for var in _THREAD_VARS:
        os.environ[var] = "1"
    return {"vars": {v: os.environ[v] for v in _THREAD_VARS}, "numpy_imported_before": already}


def _plan_steps(rate_steps_per_s: float, seconds: float, repeats: int, max_cycles: int) -> int:
    """Steps per repeat so that ``repeats`` repeats take about ``seconds``; whole episodes when long enough."""
    steps = max(1, int(rate_steps_per_s * seconds / repeats))
    if steps >= max_cycles // 2:
        steps = max(1, steps // max_cycles) * max_cycles
    return steps


def _best_of(run, repeats: int) -> tuple[float, list[float], list[float]]:
    """Best wall time of ``repeats`` calls of ``run`` (which returns wall and CPU seconds), and all of both."""
    times = [run() for _ in range(repeats)]
    wall = [w for w, _ in times]
    return min(wall), wall, [c for _, c in times]


def measure_batched(game: str, num_envs: int, num_agents: int, view_radius: int, seconds: float,
                    repeats: int, seed: int) -> dict[str, Any]:
    """Agent-steps per second of ``vector_env`` under random actions (see the module docstring)."""
    import numpy as np

    import envs

    env = getattr(envs, game).vector_env(num_envs, num_agents=num_agents, view_radius=view_radius)
    n_act = env.action_space.n
    rng = np.random.default_rng(seed)

    # warm-up, which also estimates the speed
    warm = rng.integers(0, n_act, size=(64, num_envs, num_agents), dtype=np.int64)
    env.reset(seed=seed)
    steps_done, t0 = 0, time.perf_counter()
    while time.perf_counter() - t0 < _WARMUP_SHARE * seconds or steps_done < 8:
        _, _, _, trunc, _ = env.step(warm[steps_done % len(warm)])
        steps_done += 1
        if trunc.all():
            env.reset()
    rate = steps_done / (time.perf_counter() - t0)
    steps = _plan_steps(rate, seconds * (1 - _WARMUP_SHARE), repeats, env.max_cycles)
    actions = rng.integers(0, n_act, size=(steps, num_envs, num_agents), dtype=np.int64)
    resets, obs_shape = 0, []

    def run() -> tuple[float, float]:
        nonlocal resets, obs_shape
        obs, _ = env.reset(seed=seed)
        resets = 0
        step = env.step
        t, c = time.perf_counter(), time.process_time()
        for i in range(steps):
            obs, _, _, trunc, _ = step(actions[i])
            if trunc.all():  # copies run in lockstep: all truncate together
                obs, _ = env.reset()
                resets += 1
        elapsed = time.perf_counter() - t, time.process_time() - c
        obs_shape = list(obs.shape)
        return elapsed

    best, wall, cpu = _best_of(run, repeats)
    return {"agent_steps_per_s": steps * num_envs * num_agents / best, "steps": steps,
            "resets_per_repeat": resets, "times_s": wall, "cpu_s": cpu, "obs_shape": obs_shape,
            "layout": env.params["layout"], "max_cycles": env.max_cycles}


def measure_single(game: str, num_agents: int, view_radius: int, seconds: float, repeats: int,
                   seed: int) -> dict[str, Any]:
    """Agent-steps per second of the PettingZoo ``parallel_env`` loop with dict actions."""
    import numpy as np

    import envs

    env = getattr(envs, game).parallel_env(num_agents=num_agents, view_radius=view_radius)
    agents = list(env.possible_agents)
    n_act = env.action_space(agents[0]).n
    rng = np.random.default_rng(seed)

    def dicts(count: int) -> list[dict[str, int]]:
        table = rng.integers(0, n_act, size=(count, len(agents))).tolist()
        return [dict(zip(agents, row, strict=True)) for row in table]

    warm = dicts(256)
    env.reset(seed=seed)
    steps_done, t0 = 0, time.perf_counter()
    while time.perf_counter() - t0 < _WARMUP_SHARE * seconds or steps_done < 8:
        env.step(warm[steps_done % len(warm)])
        steps_done += 1
        if not env.agents:
            env.reset()
    rate = steps_done / (time.perf_counter() - t0)
    steps = _plan_steps(rate, seconds * (1 - _WARMUP_SHARE), repeats, env.max_cycles)
    actions = dicts(steps)
    resets = 0

    def run() -> tuple[float, float]:
        nonlocal resets
        env.reset(seed=seed)
        resets = 0
        step = env.step
        t, c = time.perf_counter(), time.process_time()
        for i in range(steps):
            step(actions[i])
            if not env.agents:  # every agent truncated: the episode is over
                env.reset()
                resets += 1
        return time.perf_counter() - t, time.process_time() - c

    best, wall, cpu = _best_of(run, repeats)
    obs_shape = list(env.observation_space(agents[0]).shape)
    return {"agent_steps_per_s": steps * num_agents / best, "steps": steps, "resets_per_repeat": resets,
            "times_s": wall, "cpu_s": cpu, "obs_shape": obs_shape}


def bench_game(game: str, num_envs: int, num_agents: int, view_radius: int, seconds: float, repeats: int,
               seed: int) -> dict[str, Any]:
    """Both measurements of one game and their ratio."""
    bat = measure_batched(game, num_envs, num_agents, view_radius, seconds, repeats, seed)
    one = measure_single(game, num_agents, view_radius, seconds, repeats, seed)
    return {
        "batched_agent_steps_per_s": round(bat["agent_steps_per_s"]),
        "single_agent_steps_per_s": round(one["agent_steps_per_s"]),
        "ratio": round(bat["agent_steps_per_s"] / one["agent_steps_per_s"], 2),
        "num_envs": num_envs,
        "num_agents": num_agents,
        "view_radius": view_radius,
        "layout": bat["layout"],
        "max_cycles": bat["max_cycles"],
        "obs_shape": one["obs_shape"],
        "batched_obs_shape": bat["obs_shape"],
        "steps": {"batched": bat["steps"], "single": one["steps"]},
        "resets_per_repeat": {"batched": bat["resets_per_repeat"], "single": one["resets_per_repeat"]},
        "repeats": {"k": repeats, "method": _METHOD.format(k=repeats),
                    "times_s": {"batched": [round(t, 4) for t in bat["times_s"]],
                                "single": [round(t, 4) for t in one["times_s"]]},
                    "cpu_s": {"batched": [round(t, 4) for t in bat["cpu_s"]],
                              "single": [round(t, 4) for t in one["cpu_s"]]}},
    }


def _targets_met(results: dict[str, dict[str, Any]]) -> dict[str, dict[str, bool]]:
    return {game: {key: results[game][key] >= low for key, low in want.items()}
            for game, want in TARGETS.items() if game in results}


def _table(report: dict[str, Any]) -> str:
    load = report["load_average"]["before"]
    lines = [f"python {report['python']}  numpy {report['numpy']}  {report['platform']}",
             f"cpu {report['cpu']} x {report['cpu_count']}, load {load[0] if load else '?'} "
             f"(one thread; best of {report[GAMES[0]]['repeats']['k']} repeats)", "",
             f"{'game':<12}{'layout':<16}{'batched agent-steps/s':>23}{'single agent-steps/s':>22}"
             f"{'ratio':>8}"]
    for game in GAMES:
        r = report[game]
        lines.append(f"{game:<12}{r['layout']:<16}{r['batched_agent_steps_per_s']:>23,}"
                     f"{r['single_agent_steps_per_s']:>22,}{r['ratio']:>8.1f}")
    any_game = report[GAMES[0]]
    lines += ["", f"{any_game['num_envs']} copies x {any_game['num_agents']} agents, view radius "
              f"{any_game['view_radius']}, obs {tuple(any_game['obs_shape'])} per agent", "targets:"]
    for game, want in TARGETS.items():
        for key, low in want.items():
            met = report["targets_met"][game][key]
            lines.append(f"  {game} {key} >= {low:,}: {'met' if met else 'not met'}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--num-envs", type=positive(int), default=64, help="copies in the batched env")
    parser.add_argument("--agents", type=positive(int), default=5, help="agents per copy")
    parser.add_argument("--view-radius", type=positive(int), default=7, help="observation window radius")
    parser.add_argument("--seconds", type=positive(float), default=3.0,
                        help="time budget of each measurement (warm-up included), default 3")
    parser.add_argument("--repeats", type=positive(int), default=3, help="timed repeats; the best counts")
    parser.add_argument("--seed", type=non_negative_int, default=0,
                        help="seed of the envs and of the random actions")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    args = parser.parse_args(argv)

    threads = _single_thread()
    import numpy as np

    from envs import EnvError

    load_before = load_average()
    try:
        results = {game: bench_game(game, args.num_envs, args.agents, args.view_radius, args.seconds,
                                    args.repeats, args.seed) for game in GAMES}
    except EnvError as err:  # a game rejected an option (e.g. more agents than spawn points)
        print(f"bench_env: {err}", file=sys.stderr)
        return 2
    report = {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "platform": platform.platform(),
        "cpu": cpu_name(),
        "cpu_count": os.cpu_count(),
        "load_average": {"before": load_before, "after": load_average()},
        "threads": threads,
        "seconds_per_measurement": args.seconds,
        "seed": args.seed,
        "targets": TARGETS,
        "targets_met": _targets_met(results),
        **results,
    }
    print(json.dumps(report, indent=2) if args.json else _table(report))
    return 0


if __name__ == "__main__":
    sys.exit(main())
