"""The journal's SQL schema, owned here alone: tables, triggers, format, codes and time text.

Storage is compact: one ``reading`` row per snapshot per meter holding the values as a packed
float64 blob and the qualities as one byte each, in the key order of a ``keyset`` row. Every
other module reads and writes through ``meas.journal.store`` (with ``opening``, which makes
the file) and ``meas.journal.read``.
"""

from __future__ import annotations

import json
import math
import sqlite3
from datetime import UTC, datetime
from pathlib import Path

from ..snapshot import Quality

FORMAT_VERSION = 1
ROLES = ("settling", "capture", "live")
DONE_STATES = frozenset({"accepted", "skipped"})
QUALITY_CODES: tuple[Quality, ...] = tuple(Quality)  # byte value = index in this tuple
DATA_TABLES = (
    "session",
    "profile_file",
    "keyset",
    "snapshot",
    "reading",
    "check_result",
    "event",
    "step_log",
)

SCHEMA = """
CREATE TABLE IF NOT EXISTS session(
    id TEXT PRIMARY KEY, created_utc TEXT NOT NULL, operator TEXT NOT NULL, bench TEXT NOT NULL,
    profile_path TEXT NOT NULL, profile_sha256 TEXT NOT NULL, profile_json TEXT NOT NULL,
    meta_json TEXT NOT NULL, software TEXT NOT NULL, format INTEGER NOT NULL);
CREATE TABLE IF NOT EXISTS profile_file(
    seq INTEGER PRIMARY KEY, name TEXT NOT NULL, sha256 TEXT NOT NULL, text TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS keyset(id INTEGER PRIMARY KEY, keys TEXT NOT NULL UNIQUE);
CREATE TABLE IF NOT EXISTS snapshot(
    id INTEGER PRIMARY KEY, seq INTEGER NOT NULL, step TEXT, role TEXT NOT NULL,
    time_utc TEXT NOT NULL, t_mono REAL, cycle_s REAL, switches TEXT NOT NULL,
    saved_utc TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS reading(
    snapshot INTEGER NOT NULL REFERENCES snapshot(id), pos INTEGER NOT NULL, meter TEXT NOT NULL,
    keyset INTEGER NOT NULL REFERENCES keyset(id), vals BLOB NOT NULL, qual BLOB NOT NULL,
    state TEXT NOT NULL, exception_code INTEGER, error TEXT NOT NULL, last_good_utc TEXT,
    error_count INTEGER NOT NULL, latency_s REAL, PRIMARY KEY(snapshot, pos)) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS check_result(
    id INTEGER PRIMARY KEY, snapshot INTEGER NOT NULL REFERENCES snapshot(id), step TEXT,
    "check" TEXT NOT NULL, subject TEXT NOT NULL, status TEXT NOT NULL, value REAL,
    "limit" REAL, unit TEXT NOT NULL, message TEXT NOT NULL, cause TEXT NOT NULL);
CREATE INDEX IF NOT EXISTS check_by_snapshot ON check_result(snapshot);
CREATE TABLE IF NOT EXISTS event(
    id INTEGER PRIMARY KEY, time_utc TEXT NOT NULL, kind TEXT NOT NULL, step TEXT,
    operator TEXT, message TEXT NOT NULL, data TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS step_log(
    id INTEGER PRIMARY KEY, time_utc TEXT NOT NULL, step TEXT NOT NULL, state TEXT NOT NULL,
    outcome TEXT, operator TEXT, reason TEXT, settle_s REAL, actual_switches TEXT,
    expected_switches TEXT);
"""


def install_schema(conn: sqlite3.Connection) -> None:
    """The tables, then the append-only triggers: abort every UPDATE and DELETE on the data."""
    conn.executescript(SCHEMA)
    for table in DATA_TABLES:
        for op in ("UPDATE", "DELETE"):
            conn.execute(
                f"CREATE TRIGGER IF NOT EXISTS {table}_no_{op.lower()} BEFORE {op} ON {table} "
                f"BEGIN SELECT RAISE(ABORT, 'benchwalk journal is append-only: {op} on {table} refused'); END"
            )
    conn.commit()


def connect(path: Path) -> sqlite3.Connection:
    """The writer's connection: WAL with ``synchronous=FULL``, so a commit is on disk."""
    conn = sqlite3.connect(str(path), check_same_thread=False, timeout=10.0)
    conn.row_factory = sqlite3.Row
    mode = conn.execute("PRAGMA journal_mode=WAL").fetchone()[0]
    if str(mode).lower() != "wal":
        conn.close()
        raise sqlite3.OperationalError(f"cannot switch to WAL mode (got {mode})")
    conn.execute("PRAGMA synchronous=FULL")
    # foreign keys are declared for readers; the journal is their only writer, so enforcing
    # them on every insert would only cost time
    return conn


def connect_read_only(path: Path) -> sqlite3.Connection:
    """A reader's connection: it can never change the file."""
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    conn.row_factory = sqlite3.Row
    return conn


# ---------------------------------------------------------------- how values are stored as text


def now_iso() -> str:
    return _utc_text(datetime.now(UTC))


def iso(t: datetime | None) -> str | None:
    return None if t is None else _utc_text(t)


def _utc_text(t: datetime) -> str:
    """UTC ISO 8601 with microseconds and a ``Z``: sorts as text and parses everywhere."""
    if t.tzinfo is None:
        t = t.replace(tzinfo=UTC)
    return t.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def parse_iso(s: str | None) -> datetime | None:
    if not s:
        return None
    return datetime.fromisoformat(s.replace("Z", "+00:00"))


def num(x: float | None) -> float | None:
    """SQLite turns NaN into NULL anyway; do it explicitly so reads are symmetric."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return None
    return float(x)


def to_json(obj: object) -> str:
    return json.dumps(obj, sort_keys=True, default=str)
