"""The sweep ledger: registration without duplicates, the run state machine, requeueing, strict JSON,
WAL mode and readers beside a writer."""

import math
import sqlite3
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from marl_core.ablation.ledger import LEDGER_VERSION, STATES, Ledger, LedgerError, to_json
from marl_core.ablation.spec import parse_spec

REPO = Path(__file__).resolve().parents[2]


def _runs(*ids):
    return [SimpleNamespace(run_id=i, arm=f"arm_{i}", seed=n, overrides={"train.seed": n, "learner.lr": 1e-3})
            for n, i in enumerate(ids)]


def _run_dir(run_id):
    return f"runs/{run_id}"


@pytest.fixture
def ledger(tmp_path):
    with Ledger(tmp_path / "sweep" / "ledger.sqlite") as led:
        yield led


# ---------------------------------------------------------------------------------------- register

def test_register_twice_does_not_duplicate(ledger):
    assert ledger.register(_runs("a", "b"), _run_dir) == {"added": 2, "existing": 0}
    assert ledger.register(_runs("a", "b"), _run_dir) == {"added": 0, "existing": 2}
    assert [r["run_id"] for r in ledger.rows()] == ["a", "b"]


def test_register_appends_new_runs_and_leaves_old_rows_alone(ledger):
    ledger.register(_runs("b", "a"), _run_dir)
    ledger.mark_running("a", "host:1")
    ledger.mark_done("a", {"efficiency": 1.0})
    renamed = [SimpleNamespace(run_id="a", arm="renamed", seed=9, overrides={})]
    assert ledger.register([*renamed, *_runs("c")], _run_dir) == {"added": 1, "existing": 1}
    rows = ledger.rows()
    assert [r["run_id"] for r in rows] == ["b", "a", "c"]  # registration order, not id order
    a = ledger.get("a")
    assert (a["arm"], a["seed"], a["state"], a["metrics"]) == ("arm_a", 1, "done", {"efficiency": 1.0})


def test_a_registered_row_holds_the_run(ledger):
    ledger.register(_runs("a"), _run_dir)
    row = ledger.get("a")
    assert row == {"run_id": "a", "arm": "arm_a", "seed": 0,
                   "overrides": {"train.seed": 0, "learner.lr": 1e-3}, "state": "pending", "attempts": 0,
                   "started": None, "finished": None, "duration": None, "metrics": None, "error": None,
                   "run_dir": "runs/a", "worker": None}
    assert ledger.get("nothing") is None


def test_register_rejects_a_repeated_id(ledger):
    with pytest.raises(LedgerError, match="run id a is given more than once"):
        ledger.register(_runs("a", "a"), _run_dir)
    assert ledger.rows() == []


def test_register_takes_the_runs_of_a_sweep(ledger):
    sweep = parse_spec({"base": {}, "seeds": [0, 1], "axes": {"learner.dueling": [False, True]},
                        "baseline": "dueling=false"})
    ledger.register(sweep.runs, _run_dir)
    assert [(r["arm"], r["seed"], r["run_id"]) for r in ledger.rows()] == [
        (r.arm, r.seed, r.run_id) for r in sweep.runs]
    assert ledger.rows()[3]["overrides"] == {"learner.dueling": True, "train.seed": 1}


# ----------------------------------------------------------------------------------- state machine

def test_a_run_goes_pending_running_done(ledger):
    ledger.register(_runs("a"), _run_dir)
    ledger.mark_running("a", "host:42")
    row = ledger.get("a")
    assert (row["state"], row["attempts"], row["worker"]) == ("running", 1, "host:42")
    assert row["started"] is not None and row["finished"] is None
    ledger.mark_done("a", {"efficiency": 0.5, "returns": [1.0, 2.0]})
    row = ledger.get("a")
    assert row["state"] == "done" and row["metrics"] == {"efficiency": 0.5, "returns": [1.0, 2.0]}
    assert row["finished"] >= row["started"]
    assert row["duration"] == pytest.approx(row["finished"] - row["started"])


def test_a_failed_run_keeps_its_traceback(ledger):
    ledger.register(_runs("a"), _run_dir)
    ledger.mark_running("a", "w")
    ledger.mark_failed("a", "Traceback (most recent call last):\n  ...\nValueError: boom")
    row = ledger.get("a")
    assert row["state"] == "failed" and row["error"].endswith("ValueError: boom")
    assert row["metrics"] is None


@pytest.mark.parametrize("action, message", [
    (lambda led: led.mark_done("a", {}), "cannot mark run a done: it is pending, not running"),
    (lambda led: led.mark_failed("a", "x"), "cannot mark run a failed: it is pending, not running"),
    (lambda led: led.mark_running("zz", "w"), "no run 'zz' in ledger"),
], ids=["done-from-pending", "failed-from-pending", "unknown-run"])
def test_a_transition_from_the_wrong_state_is_refused(ledger, action, message):
    ledger.register(_runs("a"), _run_dir)
    with pytest.raises(LedgerError, match=message):
        action(ledger)
    assert ledger.get("a")["state"] == "pending"


def test_a_running_run_cannot_be_claimed_twice(ledger):
    ledger.register(_runs("a"), _run_dir)
    ledger.mark_running("a", "w1")
    with pytest.raises(LedgerError, match="cannot mark run a running: it is running, not pending"):
        ledger.mark_running("a", "w2")
    assert ledger.get("a")["worker"] == "w1"


def test_a_done_run_cannot_be_done_again(ledger):
    ledger.register(_runs("a"), _run_dir)
    ledger.mark_running("a", "w")
    ledger.mark_done("a", {})
    with pytest.raises(LedgerError, match="it is done, not running"):
        ledger.mark_done("a", {})


# ------------------------------------------------------------------------------------- requeue

def test_requeue_running_and_failed(ledger):
    ledger.register(_runs("a", "b", "c", "d"), _run_dir)
    for run_id in "abc":
        ledger.mark_running(run_id, "w")
    ledger.mark_done("a", {})
    ledger.mark_failed("b", "boom")
    assert ledger.counts() == {"pending": 1, "running": 1, "done": 1, "failed": 1}
    assert ledger.requeue() == 1  # the interrupted run c
    assert ledger.counts() == {"pending": 2, "running": 0, "done": 1, "failed": 1}
    assert ledger.requeue(("failed",)) == 1  # --retry-failed
    assert ledger.counts() == {"pending": 3, "running": 0, "done": 1, "failed": 0}
    assert ledger.get("b")["error"] == "boom"  # kept until the run starts again
    ledger.mark_running("b", "w")
    row = ledger.get("b")
    assert (row["attempts"], row["error"]) == (2, None)
    assert ledger.get("a")["state"] == "done"


def test_requeue_refuses_an_unknown_state(ledger):
    with pytest.raises(LedgerError, match="requeue: state 'lost' is not allowed"):
        ledger.requeue(("lost",))


def test_counts_list_every_state(ledger):
    assert ledger.counts() == dict.fromkeys(STATES, 0)
    ledger.register(_runs("a", "b"), _run_dir)
    assert list(ledger.counts()) == ["pending", "running", "done", "failed"]
    assert ledger.counts()["pending"] == 2


# ------------------------------------------------------------------------------------------ JSON

def test_nan_and_inf_metrics_are_stored_as_null(ledger):
    ledger.register(_runs("a"), _run_dir)
    ledger.mark_running("a", "w")
    ledger.mark_done("a", {"efficiency": math.nan, "peace": np.float32(0.25), "equality": np.float64("nan"),
                           "returns": np.array([1.0, np.inf]), "episodes": np.int64(3)})
    assert ledger.get("a")["metrics"] == {"efficiency": None, "peace": 0.25, "equality": None,
                                          "returns": [1.0, None], "episodes": 3}
    conn = sqlite3.connect(ledger.path)
    raw = conn.execute("SELECT metrics FROM runs").fetchone()[0]
    conn.close()
    assert "NaN" not in raw and "Infinity" not in raw


def test_to_json_is_strict():
    assert to_json({"x": float("nan"), "y": (1, -math.inf)}) == '{"x":null,"y":[1,null]}'


# ------------------------------------------------------------------------------------------ meta

def test_meta_is_text_by_key(ledger):
    assert ledger.get_meta("spec_hash") is None and ledger.get_meta("spec_hash", "-") == "-"
    ledger.set_meta("spec_hash", "abc")
    ledger.set_meta("spec_hash", "def")
    assert ledger.get_meta("spec_hash") == "def"
    assert float(ledger.get_meta("created")) > 0
    with pytest.raises(LedgerError, match="set_meta: key and value must be strings"):
        ledger.set_meta("n", 3)


def test_the_created_time_survives_reopening(tmp_path):
    path = tmp_path / "ledger.sqlite"
    with Ledger(path) as first:
        created = first.get_meta("created")
        first.register(_runs("a"), _run_dir)
    with Ledger(path) as again:
        assert again.get_meta("created") == created
        assert [r["run_id"] for r in again.rows()] == ["a"]


# ------------------------------------------------------------------------------- file and readers

def test_the_file_is_in_wal_mode(ledger):
    conn = sqlite3.connect(ledger.path)
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert conn.execute("PRAGMA user_version").fetchone()[0] == LEDGER_VERSION
    conn.close()


def test_a_reader_sees_committed_state_while_a_writer_holds_the_lock(tmp_path):
    path = tmp_path / "ledger.sqlite"
    writer = Ledger(path)
    writer.register(_runs("a", "b"), _run_dir)
    reader = Ledger(path)
    busy = sqlite3.connect(path, timeout=0.1)
    busy.execute("BEGIN IMMEDIATE")  # another process in the middle of a write
    busy.execute("UPDATE runs SET state = 'running' WHERE run_id = 'a'")
    assert reader.counts()["pending"] == 2  # not blocked, and sees only committed rows
    busy.commit()
    assert reader.get("a")["state"] == "running"
    writer.mark_done("a", {"efficiency": 1.0})
    assert reader.get("a")["metrics"] == {"efficiency": 1.0}
    for conn in (busy, reader, writer):
        conn.close()


def test_another_process_can_read_while_the_sweep_writes(ledger):
    ledger.register(_runs("a", "b", "c"), _run_dir)
    ledger.mark_running("a", "w")
    code = ("import json, sys; from marl_core.ablation.ledger import Ledger; "
            "led = Ledger(sys.argv[1]); print(json.dumps(led.counts())); led.close()")
    out = subprocess.run([sys.executable, "-c", code, str(ledger.path)], cwd=REPO, capture_output=True,
                         text=True, check=True, timeout=60)
    assert out.stdout.strip() == '{"pending": 2, "running": 1, "done": 0, "failed": 0}'
    ledger.mark_done("a", {})  # the writer goes on after the reader
    assert ledger.counts()["done"] == 1


def test_a_file_that_is_not_a_ledger_is_refused(tmp_path):
    path = tmp_path / "ledger.sqlite"
    path.write_bytes(b"this is not sqlite" * 100)
    with pytest.raises(LedgerError, match="cannot be used"):
        Ledger(path)


def test_a_ledger_of_another_version_is_refused(tmp_path):
    path = tmp_path / "ledger.sqlite"
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA user_version = 99")
    conn.close()
    with pytest.raises(LedgerError, match="format version 99; this code reads version 1"):
        Ledger(path)
