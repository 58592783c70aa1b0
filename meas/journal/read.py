"""Reading a journal back: the session, its snapshots, checks, events and step history.

The functions take a connection, so the writer (``Journal``) and a read-only view of a
journal file (``JournalView``, what the dataset export uses) read the same way; no module
outside ``meas.journal`` runs SQL against a journal.
"""

from __future__ import annotations

import json
import math
import sqlite3
from array import array
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NamedTuple, TypedDict

from ..snapshot import CommState, MeterBlock, Snapshot
from .schema import DONE_STATES, QUALITY_CODES, connect_read_only, parse_iso

Json = dict[str, Any]  # a JSON object as the journal stores it


@dataclass(frozen=True)
class SessionInfo:
    """The session row: who, which bench, and the profile as it was."""

    session_id: str
    created_utc: str
    operator: str
    bench: str
    profile_sha256: str
    profile_dict: Json  # the profile's dataclasses as JSON
    meta: Json


class StepTransition(TypedDict):
    """One row of the step log; switch maps decoded."""

    id: int
    time_utc: str
    step: str
    state: str
    outcome: str | None
    operator: str | None
    reason: str | None
    settle_s: float | None
    actual_switches: dict[str, str] | None
    expected_switches: dict[str, str] | None


class SnapshotRow(NamedTuple):
    id: int
    seq: int
    step: str | None
    role: str
    time_utc: str
    t_mono: float | None
    cycle_s: float | None
    switches: str  # JSON object, switch -> state
    saved_utc: str


class ReadingRow(NamedTuple):
    """One meter's values in one snapshot, still packed, with its snapshot's step, role, time."""

    snapshot: int
    meter: str
    keyset: int
    vals: bytes  # float64, little-endian, in keyset order
    qual: bytes  # one QUALITY_CODES index per value
    step: str | None
    role: str
    time_utc: str


class PollRow(NamedTuple):
    snapshot: int
    meter: str
    state: str
    exception_code: int | None
    error: str
    error_count: int
    latency_s: float | None
    last_good_utc: str | None


class CheckRow(NamedTuple):
    snapshot: int
    step: str | None
    check: str
    subject: str
    status: str
    value: float | None
    limit: float | None
    unit: str
    message: str
    cause: str


class EventRow(NamedTuple):
    id: int
    time_utc: str
    kind: str
    step: str | None
    operator: str | None
    message: str
    data: str  # JSON object


def read_session(conn: sqlite3.Connection) -> SessionInfo | None:
    r = conn.execute("SELECT * FROM session").fetchone()
    if r is None:
        return None
    return SessionInfo(
        session_id=r["id"],
        created_utc=r["created_utc"],
        operator=r["operator"],
        bench=r["bench"],
        profile_sha256=r["profile_sha256"],
        profile_dict=json.loads(r["profile_json"]),
        meta=json.loads(r["meta_json"]),
    )


def profile_files(conn: sqlite3.Connection) -> list[tuple[str, str]]:
    """(name, text) of the profile files as journalled, the main file first."""
    return [
        (r["name"], r["text"])
        for r in conn.execute("SELECT name, text FROM profile_file ORDER BY seq")
    ]


def keysets(conn: sqlite3.Connection) -> dict[int, tuple[str, ...]]:
    return {
        r["id"]: tuple(json.loads(r["keys"])) for r in conn.execute("SELECT id, keys FROM keyset")
    }


def unverified_by_step(conn: sqlite3.Connection) -> dict[str, list[str]]:
    """Step id -> the lines of its latest ``readings_unverified`` event (a retake replaces)."""
    out: dict[str, list[str]] = {}
    rows = conn.execute(
        "SELECT step, data FROM event WHERE kind = 'readings_unverified' ORDER BY id"
    ).fetchall()
    for step, data in rows:
        try:
            lines = json.loads(data).get("lines", [])
        except (ValueError, AttributeError):
            continue
        if step is not None and isinstance(lines, list):
            out[str(step)] = [str(x) for x in lines]
    return out


def step_history(conn: sqlite3.Connection) -> list[StepTransition]:
    return [
        StepTransition(
            id=r["id"],
            time_utc=r["time_utc"],
            step=r["step"],
            state=r["state"],
            outcome=r["outcome"],
            operator=r["operator"],
            reason=r["reason"],
            settle_s=r["settle_s"],
            actual_switches=_switches(r["actual_switches"]),
            expected_switches=_switches(r["expected_switches"]),
        )
        for r in conn.execute("SELECT * FROM step_log ORDER BY id")
    ]


def _switches(text: str | None) -> dict[str, str] | None:
    return json.loads(text) if text is not None else None


def resume_point(conn: sqlite3.Connection, step_ids: Sequence[str]) -> str | None:
    """The first of ``step_ids`` whose latest state is not accepted or skipped."""
    latest: dict[str, str] = {}
    for r in conn.execute("SELECT step, state FROM step_log ORDER BY id"):
        latest[r["step"]] = r["state"]
    for sid in step_ids:
        if latest.get(sid) not in DONE_STATES:
            return sid
    return None


def snapshot_count(conn: sqlite3.Connection) -> int:
    return int(conn.execute("SELECT count(*) FROM snapshot").fetchone()[0])


def iter_snapshot_ids(conn: sqlite3.Connection, role: str | None = None) -> Iterator[int]:
    q = "SELECT id FROM snapshot" + (" WHERE role=?" if role else "") + " ORDER BY id"
    yield from (r[0] for r in conn.execute(q, (role,) if role else ()))


def read_snapshot(
    conn: sqlite3.Connection, keys_by_id: Mapping[int, Sequence[str]], row_id: int
) -> Snapshot:
    """The snapshot as it was recorded (bit-exact values and qualities)."""
    s = conn.execute("SELECT * FROM snapshot WHERE id=?", (row_id,)).fetchone()
    if s is None:
        raise KeyError(row_id)
    blocks = {}
    for r in conn.execute("SELECT * FROM reading WHERE snapshot=? ORDER BY pos", (row_id,)):
        blocks[r["meter"]] = _block_from_row(r, keys_by_id[r["keyset"]])
    time_utc = parse_iso(s["time_utc"])
    assert time_utc is not None  # NOT NULL in the schema
    return Snapshot(
        seq=s["seq"],
        time_utc=time_utc,
        t_mono=math.nan if s["t_mono"] is None else s["t_mono"],
        meters=blocks,
        switches=json.loads(s["switches"]),
        cycle_s=math.nan if s["cycle_s"] is None else s["cycle_s"],
    )


def _block_from_row(r: sqlite3.Row, keys: Sequence[str]) -> MeterBlock:
    """A ``reading`` row back into the meter block it was packed from."""
    vals = array("d")
    vals.frombytes(r["vals"])
    qual = r["qual"]
    return MeterBlock(
        meter=r["meter"],
        values=dict(zip(keys, vals, strict=True)),
        quality={k: QUALITY_CODES[c] for k, c in zip(keys, qual, strict=True)},
        state=CommState(r["state"]),
        exception_code=r["exception_code"],
        error=r["error"],
        last_good_utc=parse_iso(r["last_good_utc"]),
        error_count=r["error_count"],
        latency_s=math.nan if r["latency_s"] is None else r["latency_s"],
    )


class JournalView:
    """A read-only view of a journal file in one read transaction.

    The view is consistent while the runner may still append to the same file; it can never
    change the file.
    """

    def __init__(self, path: Path):
        self._conn = connect_read_only(path)
        self._conn.execute("BEGIN")

    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> JournalView:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def reading_count(self) -> int:
        """Rows of the ``reading`` table: one meter in one snapshot."""
        return int(self._conn.execute("SELECT count(*) FROM reading").fetchone()[0])

    def keysets(self) -> dict[int, tuple[str, ...]]:
        return keysets(self._conn)

    def reading_batches(self, size: int) -> Iterator[list[ReadingRow]]:
        """Every reading with its snapshot's step, role and time, ``size`` rows at a time."""
        cur = self._tuples(
            "SELECT r.snapshot, r.meter, r.keyset, r.vals, r.qual, s.step, s.role, s.time_utc"
            " FROM reading r JOIN snapshot s ON s.id = r.snapshot ORDER BY r.snapshot, r.pos"
        )
        while rows := cur.fetchmany(size):
            yield list(map(ReadingRow._make, rows))

    def snapshots(self) -> list[SnapshotRow]:
        return [
            SnapshotRow._make(r)
            for r in self._tuples(
                "SELECT id, seq, step, role, time_utc, t_mono, cycle_s, switches, saved_utc"
                " FROM snapshot ORDER BY id"
            )
        ]

    def polls(self) -> list[PollRow]:
        """The communication state of each meter in each snapshot, in journal order."""
        return [
            PollRow._make(r)
            for r in self._tuples(
                "SELECT snapshot, meter, state, exception_code, error, error_count, latency_s,"
                " last_good_utc FROM reading ORDER BY snapshot, pos"
            )
        ]

    def checks(self) -> list[CheckRow]:
        return [
            CheckRow._make(r)
            for r in self._tuples(
                'SELECT snapshot, step, "check", subject, status, value, "limit", unit, message,'
                " cause FROM check_result ORDER BY id"
            )
        ]

    def events(self) -> list[EventRow]:
        return [
            EventRow._make(r)
            for r in self._tuples(
                "SELECT id, time_utc, kind, step, operator, message, data FROM event ORDER BY id"
            )
        ]

    def step_history(self) -> list[StepTransition]:
        return step_history(self._conn)

    def profile_files(self) -> list[tuple[str, str]]:
        """(name, text) of the profile and its companions, the profile first."""
        return profile_files(self._conn)

    def _tuples(self, sql: str) -> sqlite3.Cursor:
        """Rows as plain tuples, in the order the query names its columns."""
        cur = self._conn.cursor()
        cur.row_factory = None
        return cur.execute(sql)


@dataclass(frozen=True)
class SessionState:
    """A journal at a glance, for listing sessions."""

    session_id: str
    path: Path
    bench: str
    operator: str
    created_utc: str
    state: str  # finished, stopped, not started, unreadable
    step: str | None  # the step it stopped at (resume continues there)
    steps_done: int
    steps_total: int
    snapshots: int


def session_state(path: Path) -> SessionState:
    """What a journal says about its session; ``unreadable`` for a damaged or foreign file."""
    try:
        conn = connect_read_only(path)
        try:
            info = read_session(conn)
            if info is None:
                raise sqlite3.DatabaseError("no session row")
            ids = [s["id"] for s in info.profile_dict.get("steps", [])]
            latest: dict[str, str] = {}
            for r in conn.execute("SELECT step, state FROM step_log ORDER BY id"):
                latest[r["step"]] = r["state"]
            at = resume_point(conn, ids)
            n = snapshot_count(conn)
        finally:
            conn.close()
    except (sqlite3.Error, ValueError, KeyError, TypeError):
        return SessionState(path.stem, path, "", "", "", "unreadable", None, 0, 0, 0)
    done = sum(1 for s in ids if latest.get(s) in DONE_STATES)
    state = "finished" if at is None else ("not started" if not latest else "stopped")
    return SessionState(
        info.session_id, path, info.bench, info.operator, info.created_utc, state, at, done,
        len(ids), n,
    )  # fmt: skip
