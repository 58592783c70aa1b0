"""The session journal's writer: an append-only SQLite file that survives a crash or a pulled plug.

Every ``record_*`` call commits before it returns, in WAL mode with ``synchronous=FULL``, so
"saved" on the console means on disk. Nothing captured is ever changed: triggers abort any
UPDATE or DELETE on the data tables. The session row keeps the profile's sha256 and the full
text of the profile and its companion files, so a dataset can describe the bench later
without the original files. Making and opening the file is ``opening``'s; the errors are
``errors``'.
"""

from __future__ import annotations

import contextlib
import json
import sqlite3
import threading
from array import array
from collections.abc import Callable, Iterator, Mapping, Sequence
from datetime import datetime
from pathlib import Path
from typing import TypeVar

from ..errors import BenchwalkError
from ..model import Profile
from ..results import CheckResult
from ..snapshot import MeterBlock, Quality, Snapshot
from . import read
from .errors import JournalWriteError, SessionExists, write_advice
from .lock import SessionLock
from .opening import create_file, open_file, require_sqlite
from .read import Json, SessionInfo, StepTransition
from .schema import QUALITY_CODES, ROLES, iso, now_iso, num, to_json

_T = TypeVar("_T")
_QCODE = {q: i for i, q in enumerate(QUALITY_CODES)}


# ---------------------------------------------------------------- the journal


class Journal:
    """One session's append-only record. Safe to call from one thread at a time (locked)."""

    def __init__(
        self,
        path: Path,
        conn: sqlite3.Connection,
        session: SessionInfo,
        lock: SessionLock | None = None,
    ):
        self.path = Path(path)
        self._conn = conn
        self._session_lock = lock  # held by a writer (new or resumed session) for its life
        self._lock = threading.Lock()
        self._keysets: dict[tuple[str, ...], int] = {
            keys: ks for ks, keys in read.keysets(conn).items()
        }
        self._last_t: datetime | None = None
        self._last_s: str | None = None
        self.session_id: str = session.session_id
        self.profile_sha256: str = session.profile_sha256
        self.operator: str = session.operator
        self.created_utc: str = session.created_utc
        self.bench: str = session.bench
        self.profile_dict: Json = session.profile_dict
        self.meta: Json = session.meta

    # ------------------------------------------------------------ opening

    @classmethod
    def create(
        cls,
        path: Path,
        profile: Profile,
        *,
        operator: str,
        session_id: str | None = None,
        meta: Json | None = None,
    ) -> Journal:
        """A new session file; refuses to reuse an existing one (captured data is never overwritten).

        The profile's files are stored as the loader validated them (``Profile.sources``).
        """
        path = Path(path)
        if path.exists():
            raise SessionExists(
                f"{path}: a session journal already exists here; resume it or choose another name"
            )
        sid = session_id or path.stem
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise JournalWriteError(
                f"{path}: cannot create the session journal ({exc}); choose a writable folder with free space"
            ) from exc
        lock = SessionLock(path, sid).acquire()
        try:
            if path.exists():  # made by another process between our look and our lock
                raise SessionExists(
                    f"{path}: a session journal already exists here; resume it or choose another name"
                )
            conn, session = create_file(path, profile, operator, sid, meta)
            return cls(path, conn, session, lock)
        except BaseException:
            lock.release()
            raise

    @classmethod
    def open(cls, path: Path, *, for_writing: bool = False) -> Journal:
        """An existing session, for resume (``for_writing``: lock it first) or export;
        BenchwalkError if missing, damaged, or (for writing) held by another process."""
        path = Path(path)
        if not path.is_file():
            raise BenchwalkError(f"{path}: no session journal here")
        require_sqlite(path)
        lock = SessionLock(path).acquire() if for_writing else None
        try:
            conn, session = open_file(path)
            return cls(path, conn, session, lock)
        except BaseException:
            if lock is not None:
                lock.release()
            raise

    # ------------------------------------------------------------ reading back

    @property
    def profile_text(self) -> str:
        """The main profile file's text as it was when the session started."""
        return self.profile_files()[0][1]

    def profile_files(self) -> list[tuple[str, str]]:
        return read.profile_files(self._conn)

    def step_history(self) -> list[StepTransition]:
        return read.step_history(self._conn)

    def unverified_by_step(self) -> dict[str, list[str]]:
        """Step id -> readings its final review could not verify (``readings_unverified``)."""
        return read.unverified_by_step(self._conn)

    def step_ids(self) -> list[str]:
        return [s["id"] for s in self.profile_dict.get("steps", [])]

    def resume_point(self) -> str | None:
        """The first step of the profile's sequence whose latest state is not accepted or skipped."""
        return read.resume_point(self._conn, self.step_ids())

    def snapshot_count(self) -> int:
        return read.snapshot_count(self._conn)

    def snapshot_ids(self) -> list[int]:
        return list(read.iter_snapshot_ids(self._conn))

    def read_snapshot(self, row_id: int) -> Snapshot:
        """The snapshot as it was recorded (bit-exact values and qualities)."""
        return read.read_snapshot(self._conn, {v: k for k, v in self._keysets.items()}, row_id)

    def iter_snapshot_ids(self, role: str | None = None) -> Iterator[int]:
        return read.iter_snapshot_ids(self._conn, role)

    # ------------------------------------------------------------ writing

    def record_snapshot(self, snapshot: Snapshot, *, step_id: str | None, role: str) -> int:
        """Save one snapshot durably; returns its row id (the dataset's ``snapshot`` column)."""
        if role not in ROLES:
            raise ValueError(f"role must be one of {ROLES}, not {role!r}")
        rows = []
        for meter, block in snapshot.meters.items():
            keys = tuple(block.values)
            vals = array("d", block.values.values()).tobytes()
            rows.append((meter, keys, vals, _quality_bytes(block, keys), block))

        def write(conn: sqlite3.Connection) -> int:
            cur = conn.execute(
                "INSERT INTO snapshot(seq, step, role, time_utc, t_mono, cycle_s, switches, saved_utc)"
                " VALUES(?,?,?,?,?,?,?,?)",
                (
                    snapshot.seq,
                    step_id,
                    role,
                    iso(snapshot.time_utc),
                    num(snapshot.t_mono),
                    num(snapshot.cycle_s),
                    to_json(dict(snapshot.switches)),
                    now_iso(),
                ),
            )
            sid = _row_id(cur)
            conn.executemany(
                "INSERT INTO reading VALUES(?,?,?,?,?,?,?,?,?,?,?,?)",
                [
                    (
                        sid,
                        pos,
                        meter,
                        self._keyset(conn, keys),
                        vals,
                        qual,
                        str(b.state),
                        b.exception_code,
                        b.error,
                        self._iso_cached(b.last_good_utc),
                        b.error_count,
                        num(b.latency_s),
                    )
                    for pos, (meter, keys, vals, qual, b) in enumerate(rows)
                ],
            )
            return sid

        return self._write(f"snapshot {snapshot.seq}", write)

    def record_checks(
        self, snapshot_row: int, step_id: str | None, results: Sequence[CheckResult]
    ) -> None:
        rows = [
            (
                snapshot_row,
                step_id,
                r.check,
                r.subject,
                str(r.status),
                num(r.value),
                num(r.limit),
                r.unit,
                r.message,
                r.cause,
            )
            for r in results
        ]

        def write(conn: sqlite3.Connection) -> None:
            conn.executemany(
                'INSERT INTO check_result(snapshot, step, "check", subject, status, value, "limit", unit,'
                " message, cause) VALUES(?,?,?,?,?,?,?,?,?,?)",
                rows,
            )

        self._write(f"check results of snapshot row {snapshot_row}", write)

    def record_event(
        self,
        kind: str,
        message: str,
        *,
        step_id: str | None = None,
        operator: str | None = None,
        data: Json | None = None,
    ) -> int:
        def write(conn: sqlite3.Connection) -> int:
            cur = conn.execute(
                "INSERT INTO event(time_utc, kind, step, operator, message, data) VALUES(?,?,?,?,?,?)",
                (now_iso(), kind, step_id, operator, message, to_json(data or {})),
            )
            return _row_id(cur)

        return self._write(f"event {kind!r}", write)

    def record_step(
        self,
        step_id: str,
        state: str,
        *,
        outcome: str | None = None,
        operator: str | None = None,
        reason: str | None = None,
        settle_s: float | None = None,
        actual_switches: Mapping[str, str] | None = None,
        expected_switches: Mapping[str, str] | None = None,
    ) -> None:
        """Append one state transition of a step (the journal never edits an earlier one)."""
        row = (
            now_iso(),
            step_id,
            state,
            outcome,
            operator,
            reason,
            num(settle_s),
            None if actual_switches is None else to_json(dict(actual_switches)),
            None if expected_switches is None else to_json(dict(expected_switches)),
        )

        def write(conn: sqlite3.Connection) -> None:
            conn.execute(
                "INSERT INTO step_log(time_utc, step, state, outcome, operator, reason, settle_s,"
                " actual_switches, expected_switches) VALUES(?,?,?,?,?,?,?,?,?)",
                row,
            )

        self._write(f"step {step_id} -> {state}", write)

    def checkpoint(self) -> bool:
        """Fold the WAL into the main file, so the ``.sqlite`` alone holds every saved row.

        True when the whole WAL was folded in (False: a reader kept part of it; nothing lost,
        the ``-wal`` file still holds the rest).
        """
        with self._lock:
            try:
                busy, _log, _done = self._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)").fetchone()
            except sqlite3.Error:
                return False
        return not busy

    def close(self) -> None:
        """Checkpoint (a writer), close, and let the session go to the next process."""
        if self._session_lock is not None and self._session_lock.held:
            self.checkpoint()
        with self._lock, contextlib.suppress(sqlite3.Error):
            self._conn.close()
        if self._session_lock is not None:
            self._session_lock.release()

    def __enter__(self) -> Journal:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ------------------------------------------------------------ internals

    def _iso_cached(self, t: datetime | None) -> str | None:
        """Meters of one cycle share their last-good time: format it once."""
        if t is None:
            return None
        if t != self._last_t:
            self._last_t, self._last_s = t, iso(t)
        return self._last_s

    def _keyset(self, conn: sqlite3.Connection, keys: tuple[str, ...]) -> int:
        ks = self._keysets.get(keys)
        if ks is None:
            ks = _row_id(
                conn.execute("INSERT INTO keyset(keys) VALUES(?)", (json.dumps(list(keys)),))
            )
            self._keysets[keys] = ks  # dropped again below if the transaction fails
        return ks

    def _write(self, what: str, fn: Callable[[sqlite3.Connection], _T]) -> _T:
        """One transaction, committed (fsync'd) before returning; failures leave earlier data intact."""
        with self._lock:
            known = dict(self._keysets)
            try:
                with self._conn:
                    return fn(self._conn)
            except sqlite3.Error as exc:
                self._keysets = known
                raise JournalWriteError(write_advice(self.path, what, exc)) from exc


def _row_id(cur: sqlite3.Cursor) -> int:
    """The row id an INSERT just made (always set after a successful single-row INSERT)."""
    assert cur.lastrowid is not None
    return cur.lastrowid


_QID = {
    id(q): i for i, q in enumerate(QUALITY_CODES)
}  # enum members are singletons: hash by id, fast


def _quality_bytes(block: MeterBlock, keys: Sequence[str]) -> bytes:
    """One byte per value, in key order; an unknown or missing quality counts as DECODE."""
    quality = block.quality
    try:
        if tuple(quality) == tuple(keys):  # the usual case: same order, map in C
            return bytes(map(_QID.__getitem__, map(id, quality.values())))
        return bytes([_QID[id(quality.get(k))] for k in keys])
    except KeyError:
        pass
    out = []
    for k in keys:
        q = quality.get(k, Quality.DECODE)
        try:
            out.append(_QCODE[Quality(q)])
        except ValueError:
            out.append(_QCODE[Quality.DECODE])
    return bytes(out)
