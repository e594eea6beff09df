"""The sweep ledger: one SQLite file in the sweep directory that records every run's state, times, final
metrics and error, so a rerun skips what is done and ``status`` can read it while the sweep runs.

The file is opened in WAL mode (readers never block the writer, nor the writer them) with
``synchronous=NORMAL`` and a busy timeout; every write is one transaction. Tables:

``runs``
    ``run_id`` (primary key), ``position`` (registration order), ``arm``, ``seed``, ``overrides`` (JSON),
    ``state``, ``attempts``, ``started`` / ``finished`` (unix time), ``duration`` (seconds), ``metrics``
    (JSON, the final metrics), ``error`` (text, a traceback), ``run_dir``, ``worker`` (e.g. ``host:pid``).
``meta``
    ``key`` → ``value`` (text): the spec hash, the spec text, when the ledger was created.

States and the only transitions allowed::

    pending ──mark_running──► running ──mark_done──► done
       ▲                         │
       │                         └──mark_failed──► failed
       └──────── requeue(("running",)) / requeue(("failed",)) ─┘

``mark_running`` is a compare-and-set on ``pending``, so two workers cannot both claim a run. JSON is
written strictly: NaN and ±inf become ``null`` (numpy scalars and arrays become numbers and lists).
"""

from __future__ import annotations

import json
import math
import sqlite3
import threading
import time
from collections.abc import Callable, Iterable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from marl_core.errors import MarlError

if TYPE_CHECKING:  # the ledger needs only the run's id, arm, seed and overrides
    from marl_core.ablation.spec import RunSpec

__all__ = ["Ledger", "LedgerError", "STATES", "LEDGER_VERSION", "to_json"]

#: Every state a run can be in, in the order of :meth:`Ledger.counts`.
STATES: tuple[str, ...] = ("pending", "running", "done", "failed")
#: Format version of the file (``PRAGMA user_version``); a ledger of another version is refused.
LEDGER_VERSION = 1
_BUSY_TIMEOUT_S = 30.0

_SCHEMA = f"""
CREATE TABLE IF NOT EXISTS runs (
    run_id    TEXT PRIMARY KEY,
    position  INTEGER NOT NULL,
    arm       TEXT NOT NULL,
    seed      INTEGER NOT NULL,
    overrides TEXT NOT NULL,
    state     TEXT NOT NULL CHECK (state IN ({", ".join(repr(s) for s in STATES)})),
    attempts  INTEGER NOT NULL DEFAULT 0,
    started   REAL,
    finished  REAL,
    duration  REAL,
    metrics   TEXT,
    error     TEXT,
    run_dir   TEXT,
    worker    TEXT
);
CREATE INDEX IF NOT EXISTS runs_position ON runs (position);
CREATE TABLE IF NOT EXISTS meta (
    key   TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
"""
_COLUMNS = ("run_id", "arm", "seed", "overrides", "state", "attempts", "started", "finished", "duration",
            "metrics", "error", "run_dir", "worker")


class LedgerError(MarlError):
    """The ledger file cannot be used, names no such run, or a state change is not allowed."""


def _plain(value: Any) -> Any:
    """``value`` with NaN/inf as ``None``, numpy scalars/arrays as Python numbers/lists, tuples as lists."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, (str, int, bool)) or value is None:
        return value
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    tolist = getattr(value, "tolist", None)  # numpy scalar or array, without importing numpy
    if callable(tolist):
        return _plain(tolist())
    return str(value)


def to_json(value: Any) -> str:
    """Strict JSON of ``value``: NaN and ±inf written as ``null``, numpy values as numbers."""
    return json.dumps(_plain(value), allow_nan=False, separators=(",", ":"))


def _from_json(text: str | None) -> Any:
    return None if text is None else json.loads(text)


class Ledger:
    """The runs of one sweep and their states, in a SQLite file.

    Safe to open from several processes at once (one sweep writing, ``status`` reading) and to share
    between threads of one process.

    Args:
        path: the ledger file; created (with its directory) if missing.

    Raises:
        LedgerError: the file is not a SQLite database, or is a ledger of another format version.
    """

    def __init__(self, path: str | Path):
        self.path = Path(path)
        self._lock = threading.RLock()
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._conn = sqlite3.connect(self.path, timeout=_BUSY_TIMEOUT_S, check_same_thread=False)
        except (OSError, sqlite3.Error) as err:
            raise LedgerError(f"cannot open ledger '{self.path}': {err}") from None
        try:
            self._conn.execute(f"PRAGMA busy_timeout = {int(_BUSY_TIMEOUT_S * 1000)}")
            mode = self._conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
            if str(mode).lower() != "wal":
                raise LedgerError(f"ledger '{self.path}': cannot switch to WAL mode (got {mode!r})")
            self._conn.execute("PRAGMA synchronous = NORMAL")
            version = self._conn.execute("PRAGMA user_version").fetchone()[0]
            if version not in (0, LEDGER_VERSION):
                raise LedgerError(f"ledger '{self.path}' has format version {version}; this code reads "
                                  f"version {LEDGER_VERSION}")
            if version == 0:  # a new file: create the tables (idempotent if another process races us)
                with self._conn:
                    self._conn.executescript("BEGIN IMMEDIATE;" + _SCHEMA
                                             + f"PRAGMA user_version = {LEDGER_VERSION};")
                    self._conn.execute("INSERT OR IGNORE INTO meta (key, value) VALUES ('created', ?)",
                                       (repr(time.time()),))
        except sqlite3.DatabaseError as err:
            self._conn.close()
            raise LedgerError(f"ledger '{self.path}' cannot be used: {err}") from None
        except LedgerError:
            self._conn.close()
            raise

    # ---------------------------------------------------------------------------------- lifecycle

    def close(self) -> None:
        """Close the connection (idempotent)."""
        with self._lock:
            self._conn.close()

    def __enter__(self) -> Ledger:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"Ledger({str(self.path)!r})"

    # ------------------------------------------------------------------------------------- writes

    def register(self, runs: Sequence[RunSpec], run_dir_of: Callable[[str], str]) -> dict[str, int]:
        """Insert every run not yet in the ledger as ``pending``; rows already there are left untouched.

        Args:
            runs: the sweep's runs (anything with ``run_id``, ``arm``, ``seed`` and ``overrides``).
            run_dir_of: run id -> the run's directory, as recorded in the row.

        Returns:
            ``{"added": n, "existing": m}``.
        """
        ids = [r.run_id for r in runs]
        repeated = sorted({i for i in ids if ids.count(i) > 1})
        if repeated:
            raise LedgerError(f"register: run id {repeated[0]} is given more than once")
        with self._lock, self._conn:
            self._conn.execute("BEGIN IMMEDIATE")  # position = max + 1 must not race another writer
            added = 0
            for run in runs:
                cur = self._conn.execute(
                    "INSERT OR IGNORE INTO runs (run_id, position, arm, seed, overrides, state, attempts, "
                    "run_dir) SELECT ?, COALESCE(MAX(position), -1) + 1, ?, ?, ?, 'pending', 0, ? FROM runs",
                    (run.run_id, run.arm, int(run.seed), to_json(run.overrides), str(run_dir_of(run.run_id))))
                added += cur.rowcount
        return {"added": added, "existing": len(ids) - added}

    def _transition(self, run_id: str, to: str, allowed_from: str, sets: str, params: tuple) -> None:
        with self._lock, self._conn:
            cur = self._conn.execute(f"UPDATE runs SET state = ?, {sets} WHERE run_id = ? AND state = ?",
                                     (to, *params, run_id, allowed_from))
            if cur.rowcount == 1:
                return
            row = self._conn.execute("SELECT state FROM runs WHERE run_id = ?", (run_id,)).fetchone()
        if row is None:
            raise LedgerError(f"no run {run_id!r} in ledger '{self.path}'")
        raise LedgerError(f"cannot mark run {run_id} {to}: it is {row[0]}, not {allowed_from}")

    def mark_running(self, run_id: str, worker: str) -> None:
        """``pending`` → ``running``: count an attempt, stamp the start, clear the last result.

        Raises:
            LedgerError: no such run, or it is not pending (e.g. another worker claimed it).
        """
        self._transition(run_id, "running", "pending",
                         "attempts = attempts + 1, started = ?, finished = NULL, duration = NULL, "
                         "metrics = NULL, error = NULL, worker = ?", (time.time(), str(worker)))

    def mark_done(self, run_id: str, metrics: dict[str, Any], started: float | None = None) -> None:
        """``running`` → ``done`` with the final metrics (NaN stored as null). ``started``: when the run
        really began (unix time), for backends that queue runs before they start (Ray).

        Raises:
            LedgerError: no such run, or it is not running.
        """
        self._finish(run_id, "done", "metrics", to_json(metrics), started)

    def mark_failed(self, run_id: str, error: str, started: float | None = None) -> None:
        """``running`` → ``failed`` with the error text (a traceback); ``started`` as in :meth:`mark_done`.

        Raises:
            LedgerError: no such run, or it is not running.
        """
        self._finish(run_id, "failed", "error", str(error), started)

    def _finish(self, run_id: str, state: str, column: str, value: str, started: float | None) -> None:
        now = time.time()
        if started is None:
            self._transition(run_id, state, "running", f"finished = ?, duration = ? - started, {column} = ?",
                             (now, now, value))
        else:
            self._transition(run_id, state, "running",
                             f"started = ?, finished = ?, duration = ? - ?, {column} = ?",
                             (float(started), now, now, float(started), value))

    def requeue(self, states: Iterable[str] = ("running",), run_ids: Iterable[str] | None = None) -> int:
        """Put every run in one of ``states`` back to ``pending`` (``("running",)``: runs a dead sweep left
        behind; ``("failed",)``: retry the failures), only the runs in ``run_ids`` when given. Attempts and
        the last error are kept until the run starts again. Returns how many runs were requeued."""
        states = [states] if isinstance(states, str) else list(states)
        wrong = [s for s in states if s not in STATES or s == "pending"]
        if wrong:
            raise LedgerError(f"requeue: state {wrong[0]!r} is not allowed: expected running, done or failed")
        if not states:
            return 0
        marks = ", ".join("?" for _ in states)
        sql, args = f"UPDATE runs SET state = 'pending' WHERE state IN ({marks})", list(states)
        if run_ids is not None:
            ids = list(run_ids)
            if not ids:
                return 0
            sql += f" AND run_id IN ({', '.join('?' for _ in ids)})"
            args += ids
        with self._lock, self._conn:
            cur = self._conn.execute(sql, args)
        return cur.rowcount

    def set_meta(self, key: str, value: str) -> None:
        """Record ``key`` → ``value`` (text), replacing an earlier value."""
        if not isinstance(key, str) or not isinstance(value, str):
            raise LedgerError(f"set_meta: key and value must be strings; got {key!r} -> "
                              f"{type(value).__name__}")
        with self._lock, self._conn:
            self._conn.execute("INSERT INTO meta (key, value) VALUES (?, ?) "
                               "ON CONFLICT (key) DO UPDATE SET value = excluded.value", (key, value))

    # -------------------------------------------------------------------------------------- reads

    def get_meta(self, key: str, default: str | None = None) -> str | None:
        with self._lock:
            row = self._conn.execute("SELECT value FROM meta WHERE key = ?", (key,)).fetchone()
        return default if row is None else row[0]

    def _decode(self, row: tuple) -> dict[str, Any]:
        out = dict(zip(_COLUMNS, row))
        out["overrides"] = _from_json(out["overrides"])
        out["metrics"] = _from_json(out["metrics"])
        return out

    def rows(self) -> list[dict[str, Any]]:
        """Every run as a dict (the columns of ``runs``, JSON decoded), in registration order."""
        with self._lock:
            rows = self._conn.execute(f"SELECT {', '.join(_COLUMNS)} FROM runs ORDER BY position").fetchall()
        return [self._decode(r) for r in rows]

    def get(self, run_id: str) -> dict[str, Any] | None:
        """One run as a dict (as in :meth:`rows`), or ``None`` if it is not in the ledger."""
        with self._lock:
            row = self._conn.execute(f"SELECT {', '.join(_COLUMNS)} FROM runs WHERE run_id = ?",
                                     (run_id,)).fetchone()
        return None if row is None else self._decode(row)

    def counts(self) -> dict[str, int]:
        """State -> number of runs, every state present (in :data:`STATES` order)."""
        with self._lock:
            found = dict(self._conn.execute("SELECT state, COUNT(*) FROM runs GROUP BY state").fetchall())
        return {s: int(found.get(s, 0)) for s in STATES}
