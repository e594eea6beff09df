"""``marl-core ablate`` end to end: real (tiny) training runs through the sweep runner, its ledger, ``status``
and ``report``; local and Ray backends; a sweep killed mid-run and rerun; failing runs; refused specs.

Every expected value names where it comes from: a module docstring (the contract) or the code path that
decides it. The runs are tiny harvest configs derived from ``configs/ablations/quick.yaml``; their numbers
mean nothing about the game and are only compared with each other.
"""

import contextlib
import copy
import csv
import io
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml

from marl_core.ablation.ledger import Ledger
from marl_core.cli import main

REPO = Path(__file__).resolve().parents[2]
QUICK = REPO / "configs" / "ablations" / "quick.yaml"
# report.py: METRICS = ("return_mean", *envs.metrics.METRIC_NAMES), one curve_, time_ and bars_ figure each
FIVE_METRICS = ("return_mean", "efficiency", "equality", "sustainability", "peace")
# runner.py: SUMMARY_METRICS, the part of summary.json the ledger keeps
LEDGER_KEYS = ("env_steps", "episodes", "return_mean", "efficiency", "equality", "sustainability", "peace")


# ---------------------------------------------------------------------------------------------- helpers
def _quick() -> dict:
    return yaml.safe_load(QUICK.read_text(encoding="utf-8"))


def _tiny_base() -> dict:
    """quick.yaml's base shrunk to a run of a few seconds (most of it the child's torch import)."""
    base = copy.deepcopy(_quick()["base"])
    base["env"]["num_envs"] = 2
    base["env"]["params"]["max_cycles"] = 50
    base["learner"].update(warmup_steps=100, batch_size=16, replay_size=1000)
    base["train"].update(total_steps=200, eval_every=200, checkpoint_every=200, eval_episodes=1)
    base["log"]["tensorboard"] = False
    return base


def _write_spec(path: Path, spec: dict) -> Path:
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def _start_ablate(spec: Path, sweep: Path, tmp_path: Path) -> subprocess.Popen:
    """``marl-core ablate SPEC --out SWEEP --workers 1`` in a child process, its output in first.out/.err."""
    cmd = [sys.executable, "-m", "marl_core.cli", "ablate", str(spec), "--out", str(sweep), "--workers", "1"]
    with open(tmp_path / "first.out", "w") as out, open(tmp_path / "first.err", "w") as err:
        return subprocess.Popen(cmd, cwd=REPO, stdout=out, stderr=err)


def _rows(sweep: Path) -> dict[str, dict]:
    with Ledger(sweep / "ledger.sqlite") as ledger:
        return {r["run_id"]: r for r in ledger.rows()}


def _meta(sweep: Path) -> dict[str, str]:
    con = sqlite3.connect(f"file:{sweep / 'ledger.sqlite'}?mode=ro", uri=True)
    try:
        return dict(con.execute("SELECT key, value FROM meta").fetchall())
    finally:
        con.close()


def _peek(ledger_path: Path) -> dict[str, tuple[str, int]]:
    """run_id -> (state, attempts), read-only and tolerant of a ledger still being created."""
    if not ledger_path.is_file():
        return {}
    try:
        con = sqlite3.connect(f"file:{ledger_path}?mode=ro", uri=True, timeout=5)
        try:
            return {rid: (state, attempts) for rid, state, attempts
                    in con.execute("SELECT run_id, state, attempts FROM runs")}
        finally:
            con.close()
    except sqlite3.Error:
        return {}


def _files(root: Path) -> dict[str, tuple[int, int]]:
    """Every file under ``root``: relative path -> (size, mtime_ns)."""
    out = {}
    for p in sorted(root.rglob("*")):
        if p.is_file():
            st = p.stat()
            out[str(p.relative_to(root))] = (st.st_size, st.st_mtime_ns)
    return out


def _summary(sweep: Path, run_id: str) -> dict:
    return json.loads((sweep / "runs" / run_id / "summary.json").read_text(encoding="utf-8"))


def _eval_steps(sweep: Path, run_id: str) -> list[int]:
    lines = (sweep / "runs" / run_id / "metrics.jsonl").read_text(encoding="utf-8").splitlines()
    return [json.loads(line)["env_steps"] for line in lines if line.strip()]


def _assert_ledger_matches_run_dirs(sweep: Path, total_steps: int) -> None:
    """Every row done, each with a summary.json of the full length whose final metrics the ledger holds."""
    for rid, row in _rows(sweep).items():
        assert row["state"] == "done", (rid, row["state"])
        summary = _summary(sweep, rid)
        assert summary["env_steps"] == total_steps  # contract: train.py, summary.json env_steps
        assert {k: row["metrics"][k] for k in LEDGER_KEYS} == {k: summary.get(k) for k in LEDGER_KEYS}


def _proc_stat(pid: int) -> tuple[str, int] | None:
    """(state, ppid) of a live process, ``None`` if it is gone."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    rest = text.rsplit(")", 1)[1].split()
    return rest[0], int(rest[1])


def _descendants(pid: int) -> set[int]:
    children: dict[int, list[int]] = {}
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            st = _proc_stat(int(d.name))
            if st is not None:
                children.setdefault(st[1], []).append(int(d.name))
    found, todo = set(), [pid]
    while todo:
        for c in children.get(todo.pop(), []):
            if c not in found:
                found.add(c)
                todo.append(c)
    return found


def _alive(pid: int) -> bool:
    st = _proc_stat(pid)
    return st is not None and st[0] not in ("Z", "X")  # a zombie writes nothing


def _cmdlines_naming(text: str) -> list[int]:
    out = []
    for d in Path("/proc").iterdir():
        if not d.name.isdigit() or int(d.name) == os.getpid():
            continue
        try:
            cmd = (d / "cmdline").read_bytes().replace(b"\0", b" ").decode(errors="replace")
        except OSError:
            continue
        if text in cmd and _alive(int(d.name)):
            out.append(int(d.name))
    return out


def _check_pngs(figures: Path, names: list[str]) -> None:
    from PIL import Image

    for name in names:
        path = figures / name
        assert path.stat().st_size > 0, name
        with Image.open(path) as im:
            assert im.format == "PNG", name
            im.verify()


# ------------------------------------------------------------------------------ the quick sweep, local
@pytest.fixture(scope="module")
def local_sweep(tmp_path_factory):
    """quick.yaml run once with the local backend (shared by the local and the Ray tests)."""
    sweep = tmp_path_factory.mktemp("quick") / "sweep"
    out = io.StringIO()
    t0 = time.monotonic()
    with contextlib.redirect_stdout(out):
        code = main(["ablate", str(QUICK), "--out", str(sweep), "--workers", "2"])
    return {"dir": sweep, "code": code, "stdout": out.getvalue(), "seconds": time.monotonic() - t0}


@pytest.mark.slow
def test_quick_sweep_end_to_end_local(local_sweep, capsys):
    sweep = local_sweep["dir"]
    assert local_sweep["code"] == 0, local_sweep["stdout"]  # contract: cli.py _ablate, 0 when none failed
    assert "done 10, failed 0" in local_sweep["stdout"]  # quick.yaml: 2 arms x 5 seeds

    # the ledger: 6 runs done, each tried once, each with a normal run directory
    rows = _rows(sweep)
    assert len(rows) == 10  # quick.yaml: seeds [0, 1, 2, 3, 4] x learner.share_parameters [false, true]
    assert {r["state"] for r in rows.values()} == {"done"}
    assert {r["attempts"] for r in rows.values()} == {1}  # ledger.py: mark_running counts an attempt
    for rid in rows:
        run_dir = sweep / "runs" / rid  # contract: runner.py docstring, out/runs/<run_id>/
        for name in ("summary.json", "config.yaml", "metrics.jsonl", "checkpoints/last.pt"):
            assert (run_dir / name).is_file(), (rid, name)  # contract: train.py docstring, run layout
    _assert_ledger_matches_run_dirs(sweep, total_steps=5000)  # quick.yaml: train.total_steps 5000

    # status --json: one row per run with arm, seed, duration and the headline metric
    assert main(["status", str(sweep), "--json"]) == 0
    status = json.loads(capsys.readouterr().out)
    assert len(status) == 10
    # contract: spec.py docstring, axes-only arms are named <short>=<value>, arm-major then by seed
    assert [(s["arm"], s["seed"]) for s in status] == [
        (f"share_parameters={v}", seed) for v in ("false", "true") for seed in (0, 1, 2, 3, 4)]
    for s in status:
        assert s["state"] == "done" and s["error"] is None
        assert isinstance(s["duration"], float) and s["duration"] > 0  # ledger.py: duration, seconds
        # runner.py: HEADLINE = "efficiency", the final metric of the run
        assert s["efficiency"] == _summary(sweep, s["run_id"])["efficiency"]
    assert main(["status", str(sweep)]) == 0  # the table prints too
    table = capsys.readouterr().out
    assert all(rid in table for rid in rows)

    # report: report.md, runs.csv (one row per ledger row) and the figures (contract: report.py docstring)
    assert main(["report", str(sweep)]) == 0
    capsys.readouterr()
    report = sweep / "report"
    assert (report / "report.md").stat().st_size > 0
    with open(report / "runs.csv", newline="", encoding="utf-8") as f:
        csv_rows = list(csv.DictReader(f))
    assert len(csv_rows) == 10
    assert {r["run_id"] for r in csv_rows} == set(rows)
    assert {r["state"] for r in csv_rows} == {"done"}
    assert {r["env_steps"] for r in csv_rows} == {"5000"}
    # the metrics and harvest's behaviour measures (report.py: waste_removed is cleanup's only)
    measures = [*FIVE_METRICS, "resources_taken", "tags_fired", "times_tagged"]
    expected = ([f"curve_{m}.png" for m in measures] + [f"time_{m}.png" for m in measures]
                + [f"bars_{m}.png" for m in measures])  # report.py _figures: per step, per wall minute, bars
    found = sorted(p.name for p in (report / "figures").glob("*.png"))
    # report.py _axes: a bool override (share_parameters) is not numeric, so there is no axis_ figure
    assert found == sorted(expected)
    _check_pngs(report / "figures", expected)
    md = (report / "report.md").read_text(encoding="utf-8")
    for name in expected:
        assert f"figures/{name}" in md  # report.py _markdown: links to every figure drawn
    for arm in ("share_parameters=false", "share_parameters=true"):
        assert arm in md
    # quick.yaml says smoke_test: true; the report opens with that note (report.py module docstring)
    assert "**Smoke test.**" in md.split("\n## ", 1)[0]

    # rerun: nothing to do (contract: runner.py docstring, "Rerunning the same command skips finished runs")
    before_files, before_rows = _files(sweep / "runs"), _rows(sweep)
    assert main(["ablate", str(QUICK), "--out", str(sweep), "--workers", "2"]) == 0
    again = capsys.readouterr().out
    assert "done 10, failed 0" in again
    assert not any(line.startswith("runs ") for line in again.splitlines())  # cli.py: no progress, no run
    assert _rows(sweep) == before_rows  # attempts stay 1, times and metrics untouched
    assert _files(sweep / "runs") == before_files  # summary.json (and every other file) mtimes unchanged


# --------------------------------------------------------------------------- the quick sweep, on Ray
@pytest.mark.slow
def test_a_sweep_on_a_local_ray_cluster_matches_the_local_backend(tmp_path, monkeypatch, capsys):
    # quick.yaml's arms and seeds on the tiny base: the backend is under test, not the learning, so the
    # runs are a few hundred steps (the full quick sweep locally: test_quick_sweep_end_to_end_local)
    pytest.importorskip("ray")
    monkeypatch.setenv("RAY_USAGE_STATS_ENABLED", "0")
    monkeypatch.setenv("RAY_AUTH_MODE", "disabled")
    q = _quick()
    spec = _write_spec(tmp_path / "tiny.yaml", {"base": _tiny_base(), "seeds": [0, 1, 2], "axes": q["axes"],
                                                "baseline": q["baseline"]})
    local, sweep = tmp_path / "local_sweep", tmp_path / "ray_sweep"
    assert main(["ablate", str(spec), "--out", str(local), "--workers", "2", "--quiet"]) == 0
    capsys.readouterr()
    # contract: runner.py docstring, ray backend without --address starts a local cluster on 127.0.0.1
    assert main(["ablate", str(spec), "--out", str(sweep), "--backend", "ray", "--workers", "2"]) == 0
    assert "done 6, failed 0" in capsys.readouterr().out
    rows = _rows(sweep)
    assert len(rows) == 6 and {r["state"] for r in rows.values()} == {"done"}
    assert {r["worker"] for r in rows.values()} == {"ray"}  # runner.py _run_ray: mark_running(worker="ray")
    _assert_ledger_matches_run_dirs(sweep, total_steps=200)
    local_rows = _rows(local)
    # contract: spec.py docstring, a run's id is the hash of its resolved config, the same in any process
    assert set(rows) == set(local_rows)
    # reproducible: the same config and seed give the same final metrics whichever backend ran it
    for rid in rows:
        assert rows[rid]["metrics"] == local_rows[rid]["metrics"], rid


def _free_port() -> int:
    import socket

    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


NODES_ALIVE = """
import sys, ray
ray.init(address=sys.argv[1], log_to_driver=False, include_dashboard=False)
print(sum(n["Alive"] for n in ray.nodes()))
ray.shutdown()
"""


@pytest.mark.slow
def test_a_sweep_on_a_two_node_ray_cluster_matches_the_local_backend(tmp_path, capsys):
    # the path a user takes to a cluster (docs/studies.md, "On a Ray cluster"): a head started with
    # `ray start --head`, a second node that joins it, and `ablate --backend ray --address`
    pytest.importorskip("ray")
    ray_cli = Path(sys.executable).parent / "ray"
    env = {**os.environ, "RAY_USAGE_STATS_ENABLED": "0", "RAY_AUTH_MODE": "disabled"}
    port = _free_port()
    address = f"127.0.0.1:{port}"
    q = _quick()
    spec = _write_spec(tmp_path / "tiny.yaml", {"base": _tiny_base(), "seeds": [0, 1], "axes": q["axes"],
                                                "baseline": q["baseline"]})
    local, sweep = tmp_path / "local_sweep", tmp_path / "cluster_sweep"
    assert main(["ablate", str(spec), "--out", str(local), "--workers", "2", "--quiet"]) == 0
    nodes = []
    try:  # --block keeps each node in the foreground, so that SIGTERM stops it and only it
        for args in (["--head", f"--port={port}", "--include-dashboard=false"], [f"--address={address}"]):
            log = open(tmp_path / f"node{len(nodes)}.log", "w")  # noqa: SIM115 - closed with the node
            nodes.append((subprocess.Popen([str(ray_cli), "start", "--block", "--node-ip-address=127.0.0.1",
                                            "--num-cpus=1", *args],
                                           env=env, stdout=log, stderr=subprocess.STDOUT), log))
            if len(nodes) == 1:
                time.sleep(3)
        deadline = time.monotonic() + 120
        while True:
            alive = subprocess.run([sys.executable, "-c", NODES_ALIVE, address], env=env, capture_output=True,
                                   text=True, timeout=120)
            if alive.returncode == 0 and alive.stdout.strip().splitlines()[-1:] == ["2"]:
                break
            assert time.monotonic() < deadline, (alive.stderr[-2000:], (tmp_path / "node1.log").read_text())
            time.sleep(1)
        capsys.readouterr()
        old = {k: os.environ.get(k) for k in ("RAY_USAGE_STATS_ENABLED", "RAY_AUTH_MODE")}
        os.environ.update(RAY_USAGE_STATS_ENABLED="0", RAY_AUTH_MODE="disabled")
        try:
            code = main(["ablate", str(spec), "--out", str(sweep), "--backend", "ray", "--address", address,
                         "--workers", "2"])
        finally:
            for k, v in old.items():
                os.environ.pop(k, None) if v is None else os.environ.__setitem__(k, v)
        assert code == 0 and "done 4, failed 0" in capsys.readouterr().out
    finally:
        for proc, log in reversed(nodes):
            proc.terminate()
            try:
                proc.wait(timeout=60)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
            log.close()
    rows, local_rows = _rows(sweep), _rows(local)
    assert set(rows) == set(local_rows) and {r["worker"] for r in rows.values()} == {"ray"}
    for rid in rows:  # the same config and seed give the same numbers, whichever machine ran them
        assert rows[rid]["metrics"] == local_rows[rid]["metrics"], rid
    _assert_ledger_matches_run_dirs(sweep, total_steps=200)


# ------------------------------------------------------------------------- SIGKILL, then a rerun
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="PR_SET_PDEATHSIG and /proc are Linux's")
def test_sigkill_mid_sweep_then_rerun_completes(tmp_path):
    q = _quick()
    base = copy.deepcopy(q["base"])
    base["train"].update(total_steps=1500, eval_every=500, checkpoint_every=500)
    spec = _write_spec(tmp_path / "kill.yaml", {"base": base, "seeds": [0, 1], "axes": q["axes"],
                                                "baseline": q["baseline"]})
    sweep = tmp_path / "sweep"
    ledger_path = sweep / "ledger.sqlite"
    cmd = [sys.executable, "-m", "marl_core.cli", "ablate", str(spec), "--out", str(sweep), "--workers", "1"]
    proc = _start_ablate(spec, sweep, tmp_path)
    try:
        deadline = time.monotonic() + 150
        while True:
            assert proc.poll() is None, (tmp_path / "first.err").read_text()  # must not finish first
            assert time.monotonic() < deadline, f"no run done and another mid-run: {_peek(ledger_path)}"
            seen = _peek(ledger_path)
            done = [r for r, (s, _) in seen.items() if s == "done"]
            running = [r for r, (s, _) in seen.items() if s == "running"]
            # mid-run: the running run has written a checkpoint (train.py: every 500 steps) and not finished
            if done and running and (sweep / "runs" / running[0] / "checkpoints" / "last.pt").is_file():
                break
            time.sleep(0.1)
        children = _descendants(proc.pid)
        assert children  # the run in progress is a child process (runner.py _run_local)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()

    # the ledger as the dead sweep left it: its process alone writes it (runner.py docstring)
    left = _peek(ledger_path)
    assert len(left) == 4  # 2 arms x 2 seeds
    done_before = sorted(r for r, (s, _) in left.items() if s == "done")
    interrupted = [r for r, (s, _) in left.items() if s == "running"]
    never_started = sorted(r for r, (s, _) in left.items() if s == "pending")
    assert done_before and len(interrupted) == 1  # --workers 1: one run at a time
    assert {left[r][1] for r in done_before + interrupted} == {1}
    cut = interrupted[0]
    cut_dir = sweep / "runs" / cut
    assert not (cut_dir / "summary.json").exists()  # killed mid-run
    assert (cut_dir / "checkpoints" / "last.pt").is_file()  # ... after its first checkpoint

    # no orphan: every child died with the sweep (contract: runner.py docstring, PR_SET_PDEATHSIG)
    # (the kernel kills them as their parent dies; the wait only allows for a loaded machine)
    deadline = time.monotonic() + 2
    while any(_alive(p) for p in children) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not [p for p in children if _alive(p)]
    assert _cmdlines_naming(str(sweep)) == []
    snapshot = _files(cut_dir)
    time.sleep(2.0)
    assert _files(cut_dir) == snapshot  # nothing keeps writing into the interrupted run
    assert not (cut_dir / "summary.json").exists()  # an orphan would have finished it by now
    done_mtimes = {r: (sweep / "runs" / r / "summary.json").stat().st_mtime_ns for r in done_before}
    config_mtime = (cut_dir / "config.yaml").stat().st_mtime_ns
    # the killed sweep's lock file is left behind, naming it; the OS released its lock (runner.py docstring)
    assert f"process {proc.pid} " in (sweep / "ablate.lock").read_text()

    # the same command again completes the sweep
    again = subprocess.run(cmd, cwd=REPO, capture_output=True, text=True, timeout=300)
    assert again.returncode == 0, again.stderr
    assert "done 4, failed 0" in again.stdout
    rows = _rows(sweep)
    assert len(rows) == 4
    # contract: runner.py docstring, finished runs are skipped, interrupted ones restarted
    for r in done_before:
        assert rows[r]["attempts"] == 1, r
        assert (sweep / "runs" / r / "summary.json").stat().st_mtime_ns == done_mtimes[r], r
    assert rows[cut]["attempts"] == 2
    for r in never_started:
        assert rows[r]["attempts"] == 1, r
    # ... resumed from its checkpoint (it had one): train.resume keeps the run's config.yaml, a fresh start
    # (runner.py run_one) would have removed the directory and written a new one
    assert (cut_dir / "config.yaml").stat().st_mtime_ns == config_mtime
    # contract: train.py docstring, a resumed run logs every evaluation step exactly once
    for r in rows:
        assert _eval_steps(sweep, r) == [500, 1000, 1500], r
    _assert_ledger_matches_run_dirs(sweep, total_steps=1500)  # no row running or pending
    with Ledger(ledger_path) as ledger:
        assert ledger.counts() == {"pending": 0, "running": 0, "done": 4, "failed": 0}


def test_a_second_ablate_on_the_same_sweep_refuses_and_runs_nothing_twice(tmp_path, capsys):
    q = _quick()
    base = _tiny_base()
    base["train"].update(total_steps=600, eval_every=200, checkpoint_every=200)
    spec = _write_spec(tmp_path / "two.yaml", {"base": base, "seeds": [0, 1], "axes": q["axes"],
                                               "baseline": q["baseline"]})
    sweep = tmp_path / "sweep"
    first = _start_ablate(spec, sweep, tmp_path)
    try:
        deadline = time.monotonic() + 120
        while not any(s == "running" for s, _ in _peek(sweep / "ledger.sqlite").values()):
            assert first.poll() is None, (tmp_path / "first.err").read_text()
            assert time.monotonic() < deadline
            time.sleep(0.05)
        # the same command from a second terminal, as a user would start it
        code = main(["ablate", str(spec), "--out", str(sweep), "--workers", "1"])
        err = capsys.readouterr().err.strip()
        assert code == 2 and "\n" not in err, err
        assert err == (f"marl-core: error: sweep directory '{sweep}' is in use by ablate process {first.pid} on "
                       f"{os.uname().nodename}; wait for it to finish or stop it, then run this command again "
                       "(finished runs are kept)")
        assert first.wait(timeout=300) == 0, (tmp_path / "first.err").read_text()
    finally:
        if first.poll() is None:
            first.kill()
            first.wait()
    rows = _rows(sweep)
    assert len(rows) == 4 and all(r["state"] == "done" and r["attempts"] == 1 for r in rows.values()), rows
    # the lock is free again once the first sweep has ended: the same command now has nothing to do
    assert main(["ablate", str(spec), "--out", str(sweep), "--workers", "1"]) == 0
    assert all(r["attempts"] == 1 for r in _rows(sweep).values())


# ------------------------------------------------------------------------------------- failing runs
def test_a_failing_arm_does_not_stop_the_others(tmp_path, capsys):
    spec = _write_spec(tmp_path / "broken.yaml", {
        "base": _tiny_base(), "seeds": [0],
        # config.py _env_name_problem checks only the 'module:callable' syntax; the import fails in the run
        "arms": {"good": {}, "broken": {"env.name": "no_such_module_xyz:parallel_env"}},
        "baseline": "good"})
    sweep = tmp_path / "sweep"
    argv = ["ablate", str(spec), "--out", str(sweep), "--workers", "2"]
    assert main(argv) == 1  # contract: cli.py _ablate, status 1 when a run failed
    out = capsys.readouterr().out
    assert "done 1, failed 1" in out
    assert f"marl-core status {sweep}" in out and "--retry-failed" in out  # cli.py _ablate: how to retry

    by_arm = {r["arm"]: r for r in _rows(sweep).values()}
    assert set(by_arm) == {"good", "broken"}
    good, broken = by_arm["good"], by_arm["broken"]
    assert good["state"] == "done" and good["attempts"] == 1
    assert _summary(sweep, good["run_id"])["env_steps"] == 200  # _tiny_base: total_steps 200
    # contract: runner.py docstring, a run that raises is recorded as failed with its traceback
    assert broken["state"] == "failed" and broken["attempts"] == 1
    assert broken["error"].startswith("Traceback (most recent call last)")
    assert "no_such_module_xyz" in broken["error"]
    last_line = broken["error"].strip().splitlines()[-1]
    assert "no_such_module_xyz" in last_line
    assert not (sweep / "runs" / broken["run_id"] / "summary.json").exists()

    # status: failed, with the error's last line (runner.py sweep_status; cli.py _status)
    assert main(["status", str(sweep), "--json"]) == 0
    status = {s["arm"]: s for s in json.loads(capsys.readouterr().out)}
    assert status["broken"]["state"] == "failed" and status["broken"]["error"] == last_line
    assert status["good"]["state"] == "done" and status["good"]["error"] is None
    assert main(["status", str(sweep)]) == 0
    line = next(x for x in capsys.readouterr().out.splitlines() if x.startswith("broken"))
    assert "failed" in line and line.endswith(last_line)

    # --retry-failed runs it again (ledger.py: requeue(("failed",)) then a new attempt); it fails again
    good_mtime = (sweep / "runs" / good["run_id"] / "summary.json").stat().st_mtime_ns
    assert main([*argv, "--retry-failed"]) == 1
    capsys.readouterr()
    after = {r["arm"]: r for r in _rows(sweep).values()}
    assert after["broken"]["state"] == "failed" and after["broken"]["attempts"] == 2
    assert "no_such_module_xyz" in after["broken"]["error"]
    assert after["good"]["state"] == "done" and after["good"]["attempts"] == 1  # not rerun
    assert (sweep / "runs" / good["run_id"] / "summary.json").stat().st_mtime_ns == good_mtime

    # a bad key path fails before anything runs (contract: spec.py docstring, checks all before anything
    # runs, each one line; cli.py docstring: exit 2)
    typo = _write_spec(tmp_path / "gama.yaml", {"base": _tiny_base(), "seeds": [0],
                                                "axes": {"learner.gama": [0.9]}})
    nowhere = tmp_path / "never"
    assert main(["ablate", str(typo), "--out", str(nowhere)]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err
    assert "'learner.gama'" in err and "'learner.gamma'" in err  # the key and its nearest valid key
    assert not nowhere.exists()  # no sweep directory


# ------------------------------------------------------------------------------- another spec's dir
def test_sweep_dir_of_another_spec_is_refused(tmp_path, capsys):
    spec_a = _write_spec(tmp_path / "a.yaml", {"base": _tiny_base(), "seeds": [0]})
    spec_b = _write_spec(tmp_path / "b.yaml", {"base": _tiny_base(), "seeds": [1]})  # another run
    sweep = tmp_path / "sweep"
    assert main(["ablate", str(spec_a), "--out", str(sweep), "--workers", "1", "--quiet"]) == 0
    capsys.readouterr()
    rows, meta, files = _rows(sweep), _meta(sweep), _files(sweep / "runs")
    assert len(rows) == 1

    assert main(["ablate", str(spec_b), "--out", str(sweep), "--workers", "1"]) == 2  # cli.py docstring
    captured = capsys.readouterr()
    err = captured.err.strip()
    assert "\n" not in err and "different spec" in err  # runner.py _prepare: the spec hash differs
    assert str(sweep) in err
    assert captured.out == ""
    assert _rows(sweep) == rows  # ledger unchanged: no run of B registered
    assert _meta(sweep) == meta  # the spec hash is still A's
    assert _files(sweep / "runs") == files


def test_estimate_measures_each_arm_and_adds_up_the_sweep(tmp_path, capsys):
    from marl_core.ablation.runner import estimate

    base = _tiny_base()
    base["train"].update(total_steps=4000, eval_every=1000)
    spec = _write_spec(tmp_path / "est.yaml", {
        "base": base, "seeds": [0, 1, 2], "arms": {"a": {}, "b": {"env.params.view_radius": 4}}, "baseline": "a",
        "sizes": {"quick": {"seeds": [0]}, "full": {}}})
    est = estimate(spec, workers=2, probe_steps=100)
    assert est["size"] == "full" and [a["arm"] for a in est["arms"]] == ["a", "b"]
    for a in est["arms"]:
        assert a["runs"] == 3 and a["env_steps_per_run"] == 4000 and a["env_steps_per_s"] > 0
        # runner.py estimate: fixed + steps / speed + evaluations x one evaluation (4 evaluations here)
        assert a["run_s"] == pytest.approx(a["fixed_s"] + 4000 / a["env_steps_per_s"] + 4 * a["eval_s"])
    cpu = sum(3 * a["run_s"] for a in est["arms"])
    assert est["cpu_hours"] == pytest.approx(cpu / 3600)
    assert est["wall_hours"] == pytest.approx(max(cpu / 2, *(a["run_s"] for a in est["arms"])) / 3600)
    assert not (tmp_path / "sweep").exists()  # nothing is written where a sweep would go
    # the command: a table and the total, no SWEEP_DIR needed
    assert main(["ablate", str(spec), "--size", "quick", "--estimate", "--workers", "1", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "total at size quick:" in out and "CPU-hours" in out and "with --workers 1" in out
    assert main(["ablate", str(spec)]) == 2
    assert "ablate needs --out SWEEP_DIR" in capsys.readouterr().err
