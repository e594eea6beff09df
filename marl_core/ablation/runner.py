"""Run a sweep: every run of a spec in its own process, recorded in the sweep's ledger, safe to rerun.

``ablate(spec, out)`` expands the spec, registers its runs in ``out/ledger.sqlite`` and runs what is not
done yet, each run in its own process writing ``out/runs/<run_id>/`` (a normal run directory). A run that
raises is recorded as failed with its traceback and the others go on; a run whose process dies is recorded
with its exit code. Rerunning the same command skips finished runs and restarts interrupted ones (resuming
from their last checkpoint when they have one); ``retry_failed`` reruns the failures too.

One sweep directory, one ``ablate`` at a time: ``ablate`` holds an exclusive lock on
``out/ablate.lock`` (``fcntl.flock``, with its process id written inside) for as long as it runs. A second
``ablate`` on the same directory, from another terminal or machine sharing the directory, refuses in one
line naming the process that holds the lock, before it reads the ledger. The operating system releases the
lock when its process ends, however it ends, so a lock file left behind by a killed sweep (even
``SIGKILL``) is simply taken over by the next ``ablate``. Where ``fcntl`` does not exist (Windows) no lock
is taken. ``status`` and ``report`` only read, and need no lock. (A network file system must support
``flock`` for the lock to hold across machines.)

Backends:

* ``local`` (default): up to ``workers`` child processes at once (``spawn`` start method, one torch thread
  each). Children die with the sweep process (Linux ``PR_SET_PDEATHSIG``), so a killed sweep leaves no
  orphan writing into a run directory.
* ``ray`` (``pip install "marl-core[ray]"``): each run is a Ray task with one CPU and up to two retries when
  a worker crashes (a retry is not counted as a new attempt in the ledger). ``address`` joins an existing
  cluster; otherwise a local one starts on 127.0.0.1.
  Workers write run directories at the sweep directory's path, so on a multi-machine cluster the sweep
  directory must be on storage every node mounts at the same path (e.g. NFS); the final metrics come back
  to the driver, which alone writes the ledger.
"""

from __future__ import annotations

import json
import os
import shutil
import time
import traceback
from collections.abc import Callable
from pathlib import Path
from typing import Any

from marl_core.ablation.ledger import Ledger
from marl_core.ablation.spec import Sweep, load_spec
from marl_core.errors import MissingExtraError, RunDirError
from marl_core.hints import command

__all__ = ["ablate", "estimate", "repeat", "run_one", "sweep_status", "BACKENDS", "HEADLINE", "LOCK_NAME"]

BACKENDS = ("local", "ray")
#: the lock file of a sweep directory, held by the ``ablate`` process that runs it
LOCK_NAME = "ablate.lock"
HEADLINE = "efficiency"  # the metric shown in status tables
SUMMARY_METRICS = ("env_steps", "episodes", "return_mean", "efficiency", "equality", "sustainability", "peace")

Progress = Callable[[dict[str, int], float | None], None]  # counts by state, ETA in seconds


# ---------------------------------------------------------------------- one run, in a worker process
def _die_with_parent() -> None:
    """Ask Linux to kill this process when its parent dies (no-op elsewhere)."""
    try:
        import ctypes
        import signal

        libc = ctypes.CDLL("libc.so.6", use_errno=True)
        libc.prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass


def run_one(config: dict[str, Any], run_dir: str) -> dict[str, Any]:
    """Train one run of a sweep into ``run_dir`` (resume it if it has a checkpoint); return its metrics."""
    import torch

    from marl_core.config import parse_config
    from marl_core.train import resume, run

    torch.set_num_threads(1)
    out = Path(run_dir)
    if (out / "checkpoints" / "last.pt").is_file() and (out / "config.yaml").is_file():
        summary = resume(out)
    else:
        if out.exists():  # started but never checkpointed: start again
            shutil.rmtree(out)
        summary = run(parse_config(config), out)
    return final_metrics(summary)


def final_metrics(summary: dict[str, Any]) -> dict[str, Any]:
    """The part of a run's summary the ledger keeps."""
    out = {k: summary.get(k) for k in SUMMARY_METRICS}
    out["returns"] = summary.get("returns")
    out["random"] = {k: (summary.get("random") or {}).get(k) for k in SUMMARY_METRICS[2:]}
    out["baselines"] = {team: {k: res.get(k) for k in SUMMARY_METRICS[2:]}
                        for team, res in (summary.get("baselines") or {}).items()}
    return out


def _child(config: dict[str, Any], run_dir: str, conn: Any) -> None:
    _die_with_parent()
    try:
        conn.send(("done", run_one(config, run_dir)))
    except BaseException:  # noqa: BLE001 - every failure of a run is recorded, none stops the sweep
        conn.send(("failed", traceback.format_exc()))
    finally:
        conn.close()


# ---------------------------------------------------------------------- the sweep
def _lock(out: Path) -> Any:
    """Take the sweep directory's lock (see the module docstring); return the open lock file, or None
    where the platform has no ``flock``. Raises RunDirError naming the holder when another process has it."""
    try:
        import fcntl
    except ImportError:  # Windows: no lock
        return None
    handle = open(out / LOCK_NAME, "a+")  # noqa: SIM115 - held open until the sweep ends
    try:
        fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        handle.seek(0)
        holder = handle.read().strip() or "another process"
        handle.close()
        raise RunDirError(f"sweep directory '{out}' is in use by ablate {holder}; wait for it to finish or "
                          "stop it, then run this command again (finished runs are kept)") from None
    handle.seek(0)
    handle.truncate()
    handle.write(f"process {os.getpid()} on {os.uname().nodename if hasattr(os, 'uname') else 'this host'}")
    handle.flush()
    return handle


def _unlock(handle: Any) -> None:
    if handle is not None:
        handle.close()  # closing the file releases the flock; the file stays for the next holder


def _prepare(spec: str | Path, out: Path, retry_failed: bool, size: str | None = None
             ) -> tuple[Sweep, Ledger, Any]:
    sweep = load_spec(spec, size)
    ledger_path = out / "ledger.sqlite"
    if out.exists() and not out.is_dir():
        raise RunDirError(f"sweep directory '{out}' is a file")
    if (out.is_dir() and any(out.iterdir()) and not ledger_path.is_file()
            and not (out / LOCK_NAME).is_file()):
        raise RunDirError(f"'{out}' exists and is not a sweep directory (no ledger.sqlite); choose a new --out")
    out.mkdir(parents=True, exist_ok=True)
    lock = _lock(out)
    try:
        ledger = _open_ledger(sweep, out, ledger_path, retry_failed)
    except BaseException:
        _unlock(lock)
        raise
    return sweep, ledger, lock


def _open_ledger(sweep: Sweep, out: Path, ledger_path: Path, retry_failed: bool) -> Ledger:
    if ledger_path.is_file():
        ledger = Ledger(ledger_path)
        known = ledger.get_meta("spec_hash")
        if known is not None and known != sweep.spec_hash:
            ledger.close()
            raise RunDirError(f"sweep directory '{out}' holds a different spec (hash {known}, this one "
                              f"{sweep.spec_hash}); choose a new --out")
        # the same runs: keep the spec as now written (expect, over_training, smoke_test are not hashed)
        ledger.set_meta("spec", json.dumps(sweep.source, sort_keys=True, default=str))
    else:
        (out / "runs").mkdir(parents=True, exist_ok=True)
        ledger = Ledger(ledger_path)
        ledger.set_meta("spec_hash", sweep.spec_hash)
        ledger.set_meta("spec", json.dumps(sweep.source, sort_keys=True, default=str))
        ledger.set_meta("baseline", sweep.baseline)
        ledger.set_meta("created", str(time.time()))
    if ledger.get_meta("sources") is None:  # also for a sweep started before the ledger kept it
        ledger.set_meta("sources", json.dumps(sweep.sources, sort_keys=True))
    ledger.register(sweep.runs, run_dir_of=lambda rid: str(out / "runs" / rid))
    _reconcile(ledger, out)
    if retry_failed:
        ledger.requeue(states=("failed",))
    return ledger


def _reconcile(ledger: Ledger, out: Path) -> None:
    """Make the ledger agree with the run directories after an interruption."""
    for row in ledger.rows():
        run_dir = out / "runs" / row["run_id"]
        summary = run_dir / "summary.json"
        if row["state"] == "running":
            if summary.is_file():  # finished after the sweep process died
                ledger.mark_done(row["run_id"], final_metrics(json.loads(summary.read_text())))
            else:
                ledger.requeue(states=("running",), run_ids=[row["run_id"]])
        elif row["state"] == "done" and not summary.is_file():
            ledger.requeue(states=("done",), run_ids=[row["run_id"]])


def ablate(spec: str | Path, out: str | Path, workers: int | None = None, backend: str = "local",
           address: str | None = None, retry_failed: bool = False,
           progress: Progress | None = None, notify: Callable[[str], None] | None = None,
           size: str | None = None) -> dict[str, int]:
    """Run every unfinished run of ``spec`` into the sweep directory ``out``; return the final counts.

    ``notify`` receives the spec's one-line notices (:attr:`~marl_core.ablation.spec.Sweep.notices`, e.g.
    a base learner key kept across a switch of ``learner.kind``) before anything runs. ``size``: the spec's
    size to run (``quick`` / ``full`` / ``published``; default ``full``) when it defines ``sizes``."""
    if backend not in BACKENDS:
        raise RunDirError(f"--backend = {backend!r} is not allowed; expected one of {', '.join(BACKENDS)}")
    if workers is not None and workers < 1:
        raise RunDirError(f"--workers = {workers} is not allowed; expected an integer >= 1")
    if address is not None and backend != "ray":
        raise RunDirError("--address is only used with --backend ray")
    out = Path(out)
    sweep, ledger, lock = _prepare(spec, out, retry_failed, size)
    for line in sweep.notices if notify is not None else ():
        notify(line)
    try:
        configs = {r.run_id: r.config for r in sweep.runs}
        todo = [row for row in ledger.rows() if row["state"] == "pending"]
        workers = workers or max(1, (os.cpu_count() or 1))
        if todo:
            if backend == "local":
                _run_local(todo, configs, out, ledger, workers, progress)
            else:
                _run_ray(todo, configs, out, ledger, workers, address, progress)
        return ledger.counts()
    finally:
        ledger.close()
        _unlock(lock)


def repeat(config: str | Path, seeds: list[int], out: str | Path, overrides: dict[str, Any] | None = None,
           workers: int | None = None) -> list[dict[str, Any]]:
    """Train the config file ``config`` once per seed (a one-arm sweep in ``out``, ``workers`` at a time) and
    return each run's ``summary.json`` in the order of ``seeds``; ``overrides`` (dotted key -> value) apply
    to every run. A failed run raises :class:`marl_core.errors.RunDirError` with its last error line."""
    import yaml

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    spec = {"base": str(Path(config).resolve()), "seeds": list(seeds), "set": dict(overrides or {})}
    (out / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False))
    ablate(out / "spec.yaml", out / "sweep", workers=workers)
    ledger = Ledger(out / "sweep" / "ledger.sqlite")
    try:
        rows = {r["seed"]: r for r in ledger.rows()}
    finally:
        ledger.close()
    summaries = []
    for seed in seeds:
        row = rows[seed]
        if row["state"] != "done":
            last = (row.get("error") or "").strip().splitlines()[-1:] or ["no error recorded"]
            raise RunDirError(f"run with seed {seed} of {config} {row['state']}: {last[0]}")
        summaries.append(json.loads((out / "sweep" / "runs" / row["run_id"] / "summary.json").read_text()))
    return summaries


def _eta(ledger: Ledger, workers: int) -> float | None:
    rows = ledger.rows()
    took = [r["duration"] for r in rows if r["state"] == "done" and r["duration"]]
    left = sum(r["state"] in ("pending", "running") for r in rows)
    if not took:
        return None
    return sum(took) / len(took) * left / workers


def _report(ledger: Ledger, workers: int, progress: Progress | None) -> None:
    if progress is not None:
        progress(ledger.counts(), _eta(ledger, workers))


def _config_dict(cfg: Any) -> dict[str, Any]:
    from marl_core.config import config_to_dict

    return config_to_dict(cfg)


def _run_local(todo: list[dict], configs: dict, out: Path, ledger: Ledger, workers: int,
               progress: Progress | None) -> None:
    import multiprocessing as mp
    from multiprocessing.connection import wait

    ctx = mp.get_context("spawn")
    queue = list(todo)
    running: dict[str, tuple[Any, Any]] = {}
    _report(ledger, workers, progress)
    while queue or running:
        while queue and len(running) < workers:
            row = queue.pop(0)
            rid = row["run_id"]
            recv, send = ctx.Pipe(duplex=False)
            proc = ctx.Process(target=_child, args=(_config_dict(configs[rid]), str(out / "runs" / rid), send),
                               name=f"marl-core run {rid}", daemon=False)
            proc.start()
            send.close()
            running[rid] = (proc, recv)
            ledger.mark_running(rid, worker=f"pid {proc.pid}")
            _report(ledger, workers, progress)
        wait([p.sentinel for p, _ in running.values()], timeout=1.0)
        for rid, (proc, recv) in list(running.items()):
            if proc.is_alive():
                continue
            proc.join()
            msg = recv.recv() if recv.poll() else None
            recv.close()
            del running[rid]
            if msg is not None and msg[0] == "done":
                ledger.mark_done(rid, msg[1])
            elif msg is not None:
                ledger.mark_failed(rid, msg[1])
            else:
                ledger.mark_failed(rid, f"worker process died with exit code {proc.exitcode}")
            _report(ledger, workers, progress)


def _ray_task(config: dict[str, Any], run_dir: str) -> tuple[str, Any, float]:
    started = time.time()  # Ray queues tasks; the ledger's start time is when the run really began
    try:
        return "done", run_one(config, run_dir), started
    except Exception:  # noqa: BLE001 - recorded as a failed run
        return "failed", traceback.format_exc(), started


def _run_ray(todo: list[dict], configs: dict, out: Path, ledger: Ledger, workers: int, address: str | None,
             progress: Progress | None) -> None:
    os.environ.setdefault("RAY_USAGE_STATS_ENABLED", "0")
    os.environ.setdefault("RAY_AUTH_MODE", "disabled")
    try:
        import ray
    except ImportError:
        raise MissingExtraError(f'the ray backend needs Ray: {command("pip")} install "marl-core[ray]"') from None
    started_here = not ray.is_initialized()
    if started_here:
        if address:
            ray.init(address=address, include_dashboard=False, log_to_driver=False)
        else:
            # address="local": always a new cluster of our own, even when `ray start` runs on this machine
            ray.init(address="local", num_cpus=workers, include_dashboard=False, log_to_driver=False,
                     _node_ip_address="127.0.0.1")
    try:
        task = ray.remote(num_cpus=1, max_retries=2)(_ray_task)
        pending = {}
        for row in todo:
            rid = row["run_id"]
            ref = task.remote(_config_dict(configs[rid]), str((out / "runs" / rid).resolve()))
            pending[ref] = rid
            ledger.mark_running(rid, worker="ray")
        _report(ledger, workers, progress)
        while pending:
            ready, _ = ray.wait(list(pending), num_returns=1, timeout=1.0)
            for ref in ready:
                rid = pending.pop(ref)
                try:
                    state, value, started = ray.get(ref)
                except Exception:  # noqa: BLE001 - a task that crashed past its retries
                    state, value, started = "failed", traceback.format_exc(), None
                if state == "done":
                    ledger.mark_done(rid, value, started=started)
                else:
                    ledger.mark_failed(rid, value, started=started)
                _report(ledger, workers, progress)
    finally:
        if started_here:
            ray.shutdown()


def sweep_status(out: str | Path) -> list[dict[str, Any]]:
    """Every run of a sweep: arm, seed, state, duration, the headline metric, error (first line)."""
    out = Path(out)
    if not (out / "ledger.sqlite").is_file():
        raise RunDirError(f"'{out}' is not a sweep directory (no ledger.sqlite)")
    ledger = Ledger(out / "ledger.sqlite")
    try:
        rows = []
        for r in ledger.rows():
            metrics = r.get("metrics") or {}
            err = (r.get("error") or "").strip().splitlines()
            rows.append({"run_id": r["run_id"], "arm": r["arm"], "seed": r["seed"], "state": r["state"],
                         "duration": r.get("duration"), HEADLINE: metrics.get(HEADLINE),
                         "error": err[-1] if err else None})
        return rows
    finally:
        ledger.close()


# ---------------------------------------------------------------------- the cost of a sweep
def _probe(config: dict[str, Any], steps: int, eval_every: int, root: Path) -> float:
    """Seconds to train ``config`` for ``steps`` env steps evaluating every ``eval_every`` (one thread, no
    TensorBoard, GIF or checkpoint in the way), in a fresh directory under ``root``."""
    import copy as _copy

    from marl_core.config import parse_config
    from marl_core.train import run

    cfg = _copy.deepcopy(config)
    cfg["train"].update(total_steps=steps, eval_every=eval_every, checkpoint_every=10 * steps)
    cfg["log"].update(tensorboard=False, gif_every=0, progress=False)
    out = root / f"probe_{len(list(root.iterdir()))}"
    start = time.perf_counter()
    run(parse_config(cfg), out)
    return time.perf_counter() - start


def _chunk(config: dict[str, Any]) -> int:
    """Env steps between two updates: a rollout for ppo, one vector step for the replay learners."""
    n = int(config["env"].get("num_envs", 1))
    learner = config["learner"]
    return n * int(learner.get("rollout_steps", 1)) if learner.get("kind") == "ppo" else n


def estimate(spec: str | Path, size: str | None = None, workers: int | None = None,
             probe_steps: int | None = None, progress: Callable[[str], None] | None = None) -> dict[str, Any]:
    """What running ``spec`` at ``size`` costs on this machine, from throughput measured now.

    For each arm, three short runs of its first seed's config, one thread each, one after another (so the
    figure is for one run per core with the others idle): ``P`` env steps with one evaluation, ``2P`` with one
    evaluation, and ``P`` with two. Their differences give the training speed (env steps/s), the cost of one
    evaluation (the config's ``eval_episodes``) and the fixed cost (start-up and the non-learning teams).
    A run is then fixed + total steps / speed + evaluations × one evaluation; checkpoints are not counted.
    ``P`` is ``probe_steps`` or about 20,000 env steps (a quarter of a run when that is less), rounded up
    to an even number of updates. ``lola`` counts updates,
    not env steps, and is refused.

    Returns ``{"size", "workers", "arms": [{"arm", "runs", "env_steps_per_run", "env_steps_per_s",
    "eval_s", "fixed_s", "run_s"}], "cpu_hours", "wall_hours", "probe_s"}``."""
    import tempfile

    import torch

    from marl_core.config import config_to_dict

    if workers is not None and workers < 1:
        raise RunDirError(f"--workers = {workers} is not allowed; expected an integer >= 1")
    sweep = load_spec(spec, size)
    workers = workers or max(1, os.cpu_count() or 1)
    threads = torch.get_num_threads()
    torch.set_num_threads(1)
    arms: list[dict[str, Any]] = []
    began = time.perf_counter()
    try:
        with tempfile.TemporaryDirectory(prefix="marl_estimate_") as tmp:
            for arm in sweep.arms:
                runs = sweep.runs_of(arm.name)
                config = config_to_dict(runs[0].config)
                if config["learner"]["kind"] == "lola":
                    raise RunDirError(f"--estimate: arm {arm.name!r} runs lola, which counts updates, not env "
                                      "steps; its runs take about a minute (see the study header)")
                chunk = _chunk(config)
                total = int(config["train"]["total_steps"])
                want = probe_steps or min(20_000, total // 4)  # never probe much longer than a run
                k = max(2, -(-want // chunk))
                p = (k + k % 2) * chunk  # an even number of updates: the half-way evaluation falls on one
                if progress is not None:
                    progress(f"measuring arm {arm.name}: 3 short runs of {p:,}-{2 * p:,} env steps")
                t1 = _probe(config, p, p, Path(tmp))
                t2 = _probe(config, 2 * p, 2 * p, Path(tmp))
                t3 = _probe(config, p, p // 2, Path(tmp))
                speed = p / (t2 - t1) if t2 > t1 else 2 * p / t2
                one_eval = max(t3 - t1, 0.0)
                fixed = max(t1 - p / speed - one_eval, 0.0)
                evals = -(-total // int(config["train"]["eval_every"]))
                run_s = fixed + total / speed + evals * one_eval
                arms.append({"arm": arm.name, "runs": len(runs), "env_steps_per_run": total,
                             "env_steps_per_s": speed, "eval_s": one_eval, "fixed_s": fixed, "run_s": run_s})
    finally:
        torch.set_num_threads(threads)
    cpu = sum(a["runs"] * a["run_s"] for a in arms)
    longest = max((a["run_s"] for a in arms), default=0.0)
    return {"spec": str(spec), "size": sweep.size, "workers": workers, "arms": arms, "cpu_hours": cpu / 3600,
            "wall_hours": max(cpu / workers, longest) / 3600, "probe_s": time.perf_counter() - began}
