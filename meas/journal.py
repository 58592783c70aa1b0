"""The session journal: an append-only SQLite file that survives a crash or a pulled plug.

Every ``record_*`` call commits before it returns, in WAL mode with ``synchronous=FULL``, so
"saved" on the console means on disk. Nothing captured is ever changed: triggers abort any
UPDATE or DELETE on the data tables. The session row keeps the profile's sha256 and the full
text of the profile and its companion files, so a dataset can describe the bench later
without the original files.

Storage is compact: one ``reading`` row per snapshot per meter holding the values as a packed
float64 blob and the qualities as one byte each, in the key order of a ``keyset`` row.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import json
import math
import os
import re
import sqlite3
import threading
import tomllib
from array import array
from collections.abc import Iterator, Mapping, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from . import __version__
from .errors import BenchwalkError
from .model import Profile
from .profile import companion_path
from .results import CheckResult
from .snapshot import CommState, MeterBlock, Quality, Snapshot

FORMAT_VERSION = 1
ROLES = ("settling", "capture", "live")
DONE_STATES = frozenset({"accepted", "skipped"})
QUALITY_CODES: tuple[Quality, ...] = tuple(Quality)  # byte value = index in this tuple
_QCODE = {q: i for i, q in enumerate(QUALITY_CODES)}
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

_SCHEMA = """
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


class JournalWriteError(BenchwalkError):
    """A record could not be saved (disk full, read-only, I/O error); earlier records are intact."""


# ---------------------------------------------------------------- session files


def default_sessions_dir() -> Path:
    """Where session journals live: ``$BENCHWALK_SESSIONS`` or ``./sessions``."""
    return Path(os.environ.get("BENCHWALK_SESSIONS") or "sessions")


def session_path(session_id: str, sessions_dir: Path | None = None) -> Path:
    return (sessions_dir or default_sessions_dir()) / f"{session_id}.sqlite"


def new_session_id(bench_name: str, when: datetime | None = None) -> str:
    """Readable id: UTC time and the bench's first word, e.g. ``20261201-221500-kestrel``."""
    when = when or datetime.now(UTC)
    words = re.findall(r"[a-z0-9]+", bench_name.lower())
    return f"{when:%Y%m%d-%H%M%S}-{(words[0] if words else 'bench')[:16]}"


def resolve_session(session: str | Path, sessions_dir: Path | None = None) -> Path:
    """A journal path from a session id or a path; BenchwalkError when there is none."""
    p = Path(session)
    if p.is_file():
        return p
    by_id = session_path(str(session), sessions_dir)
    if by_id.is_file():
        return by_id
    raise BenchwalkError(
        f"no session {str(session)!r}: not a journal file and not in {by_id.parent}/ "
        "(give the path to the .sqlite file or set BENCHWALK_SESSIONS)"
    )


# ---------------------------------------------------------------- helpers


def _now() -> str:
    return _iso(datetime.now(UTC))


def _iso(t: datetime | None) -> str | None:
    """UTC ISO 8601 with microseconds and a ``Z``: sorts as text and parses everywhere."""
    if t is None:
        return None
    if t.tzinfo is None:
        t = t.replace(tzinfo=UTC)
    return t.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def parse_iso(s: str | None) -> datetime | None:
    if not s:
        return None
    return datetime.fromisoformat(s.replace("Z", "+00:00"))


def _num(x: float | None) -> float | None:
    """SQLite turns NaN into NULL anyway; do it explicitly so reads are symmetric."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return None
    return float(x)


def _json(obj: Any) -> str:
    return json.dumps(obj, sort_keys=True, default=str)


def profile_files(profile: Profile) -> list[tuple[str, str]]:
    """(name, text) of the profile file and the companion files it names (``file = ...``).

    Names are relative to the profile's folder, the main file first. A profile built in
    memory (no file) is kept as its JSON form so the journal is never without a description.
    """
    path = Path(profile.path) if profile.path else None
    if path is None or not path.is_file():
        return [("profile.json", _json(dataclasses.asdict(profile)))]
    try:
        text = path.read_bytes().decode("utf-8")  # bytes as hashed: no newline translation
        doc = tomllib.loads(text)
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise BenchwalkError(
            f"{path}: cannot read the profile to store it in the journal: {exc}"
        ) from exc
    out = [(path.name, text)]
    for name in _companion_names(doc):
        comp = companion_path(path, name)
        if comp is None:
            raise BenchwalkError(
                f"{path}: companion file {name!r} is not inside the profile's folder; keep it beside the profile"
            )
        try:
            out.append((Path(name).as_posix(), comp.read_bytes().decode("utf-8")))
        except (OSError, UnicodeDecodeError) as exc:
            raise BenchwalkError(f"{path}: companion file {name} cannot be read: {exc}") from exc
    return out


COMPANION_TABLES = ("sequence",)  # tables whose ``file`` the loader reads as part of the profile


def _companion_names(doc: Mapping[str, Any]) -> list[str]:
    """Only the files the loader itself reads: a ``file`` key elsewhere (say in the free-form
    ``[sim]`` table) is plain data and must never pull a file into the journal."""
    names: list[str] = []
    for table in COMPANION_TABLES:
        value = doc.get(table)
        if isinstance(value, Mapping):
            f = value.get("file")
            if isinstance(f, str) and f not in names:
                names.append(f)
    return names


# ---------------------------------------------------------------- the journal


class Journal:
    """One session's append-only record. Safe to call from one thread at a time (locked)."""

    def __init__(self, path: Path, conn: sqlite3.Connection, session: sqlite3.Row):
        self.path = Path(path)
        self._conn = conn
        self._lock = threading.Lock()
        self._keysets: dict[tuple[str, ...], int] = {
            tuple(json.loads(r["keys"])): r["id"]
            for r in conn.execute("SELECT id, keys FROM keyset")
        }
        self._last_t: datetime | None = None
        self._last_s: str | None = None
        self.session_id: str = session["id"]
        self.profile_sha256: str = session["profile_sha256"]
        self.operator: str = session["operator"]
        self.created_utc: str = session["created_utc"]
        self.bench: str = session["bench"]
        self.profile_dict: dict[str, Any] = json.loads(session["profile_json"])
        self.meta: dict[str, Any] = json.loads(session["meta_json"])

    # ------------------------------------------------------------ opening

    @classmethod
    def create(
        cls,
        path: Path,
        profile: Profile,
        *,
        operator: str,
        session_id: str | None = None,
        meta: dict | None = None,
    ) -> Journal:
        """A new session file; refuses to reuse an existing one (captured data is never overwritten)."""
        path = Path(path)
        if path.exists():
            raise BenchwalkError(
                f"{path}: a session journal already exists here; resume it or choose another name"
            )
        files = profile_files(profile)
        sid = session_id or path.stem
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            conn = _connect(path)
            with conn:
                conn.executescript(_SCHEMA)
                _install_triggers(conn)
                conn.execute(
                    "INSERT INTO session VALUES(?,?,?,?,?,?,?,?,?,?)",
                    (
                        sid,
                        _now(),
                        operator,
                        profile.bench.name,
                        str(profile.path),
                        profile.sha256,
                        _json(dataclasses.asdict(profile)),
                        _json(meta or {}),
                        f"benchwalk {__version__}",
                        FORMAT_VERSION,
                    ),
                )
                conn.executemany(
                    "INSERT INTO profile_file VALUES(?,?,?,?)",
                    [
                        (i, name, hashlib.sha256(text.encode()).hexdigest(), text)
                        for i, (name, text) in enumerate(files)
                    ],
                )
        except (OSError, sqlite3.Error) as exc:
            raise JournalWriteError(
                f"{path}: cannot create the session journal ({exc}); choose a writable folder with free space"
            ) from exc
        return cls(path, conn, conn.execute("SELECT * FROM session").fetchone())

    @classmethod
    def open(cls, path: Path) -> Journal:
        """An existing session, for resume or export; BenchwalkError if missing or damaged."""
        path = Path(path)
        if not path.is_file():
            raise BenchwalkError(f"{path}: no session journal here")
        try:
            conn = _connect(path)
            ok = conn.execute("PRAGMA quick_check").fetchone()[0]
            if ok != "ok":
                raise BenchwalkError(
                    f"{path}: the journal is damaged ({ok}); keep a copy and export what is readable"
                )
            row = conn.execute("SELECT * FROM session").fetchone()
        except sqlite3.Error as exc:
            raise BenchwalkError(f"{path}: not a readable benchwalk journal ({exc})") from exc
        if row is None:
            raise BenchwalkError(f"{path}: the journal holds no session")
        return cls(path, conn, row)

    # ------------------------------------------------------------ reading back

    @property
    def profile_text(self) -> str:
        """The main profile file's text as it was when the session started."""
        return self.profile_files()[0][1]

    def profile_files(self) -> list[tuple[str, str]]:
        return [
            (r["name"], r["text"])
            for r in self._conn.execute("SELECT name, text FROM profile_file ORDER BY seq")
        ]

    def step_history(self) -> list[dict]:
        rows = self._conn.execute("SELECT * FROM step_log ORDER BY id").fetchall()
        out = []
        for r in rows:
            d = dict(r)
            for k in ("actual_switches", "expected_switches"):
                d[k] = json.loads(d[k]) if d[k] is not None else None
            out.append(d)
        return out

    def step_ids(self) -> list[str]:
        return [s["id"] for s in self.profile_dict.get("steps", [])]

    def resume_point(self) -> str | None:
        """The first step of the profile's sequence whose latest state is not accepted or skipped."""
        latest: dict[str, str] = {}
        for r in self._conn.execute("SELECT step, state FROM step_log ORDER BY id"):
            latest[r["step"]] = r["state"]
        for sid in self.step_ids():
            if latest.get(sid) not in DONE_STATES:
                return sid
        return None

    def snapshot_count(self) -> int:
        return self._conn.execute("SELECT count(*) FROM snapshot").fetchone()[0]

    def snapshot_ids(self) -> list[int]:
        return [r[0] for r in self._conn.execute("SELECT id FROM snapshot ORDER BY id")]

    def read_snapshot(self, row_id: int) -> Snapshot:
        """The snapshot as it was recorded (bit-exact values and qualities)."""
        s = self._conn.execute("SELECT * FROM snapshot WHERE id=?", (row_id,)).fetchone()
        if s is None:
            raise KeyError(row_id)
        keys = {v: k for k, v in self._keysets.items()}
        blocks = {}
        for r in self._conn.execute(
            "SELECT * FROM reading WHERE snapshot=? ORDER BY pos", (row_id,)
        ):
            blocks[r["meter"]] = block_from_row(r, keys[r["keyset"]])
        return Snapshot(
            seq=s["seq"],
            time_utc=parse_iso(s["time_utc"]),
            t_mono=math.nan if s["t_mono"] is None else s["t_mono"],
            meters=blocks,
            switches=json.loads(s["switches"]),
            cycle_s=math.nan if s["cycle_s"] is None else s["cycle_s"],
        )

    def iter_snapshot_ids(self, role: str | None = None) -> Iterator[int]:
        q = "SELECT id FROM snapshot" + (" WHERE role=?" if role else "") + " ORDER BY id"
        yield from (r[0] for r in self._conn.execute(q, (role,) if role else ()))

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
                    _iso(snapshot.time_utc),
                    _num(snapshot.t_mono),
                    _num(snapshot.cycle_s),
                    _json(dict(snapshot.switches)),
                    _now(),
                ),
            )
            sid = cur.lastrowid
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
                        _num(b.latency_s),
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
                _num(r.value),
                _num(r.limit),
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
        data: dict | None = None,
    ) -> int:
        def write(conn: sqlite3.Connection) -> int:
            cur = conn.execute(
                "INSERT INTO event(time_utc, kind, step, operator, message, data) VALUES(?,?,?,?,?,?)",
                (_now(), kind, step_id, operator, message, _json(data or {})),
            )
            return cur.lastrowid

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
            _now(),
            step_id,
            state,
            outcome,
            operator,
            reason,
            _num(settle_s),
            None if actual_switches is None else _json(dict(actual_switches)),
            None if expected_switches is None else _json(dict(expected_switches)),
        )

        def write(conn: sqlite3.Connection) -> None:
            conn.execute(
                "INSERT INTO step_log(time_utc, step, state, outcome, operator, reason, settle_s,"
                " actual_switches, expected_switches) VALUES(?,?,?,?,?,?,?,?,?)",
                row,
            )

        self._write(f"step {step_id} -> {state}", write)

    def close(self) -> None:
        with self._lock, contextlib.suppress(sqlite3.Error):
            self._conn.close()

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
            self._last_t, self._last_s = t, _iso(t)
        return self._last_s

    def _keyset(self, conn: sqlite3.Connection, keys: tuple[str, ...]) -> int:
        ks = self._keysets.get(keys)
        if ks is None:
            ks = conn.execute(
                "INSERT INTO keyset(keys) VALUES(?)", (json.dumps(list(keys)),)
            ).lastrowid
            self._keysets[keys] = ks  # dropped again below if the transaction fails
        return ks

    def _write(self, what: str, fn):
        """One transaction, committed (fsync'd) before returning; failures leave earlier data intact."""
        with self._lock:
            known = dict(self._keysets)
            try:
                with self._conn:
                    return fn(self._conn)
            except sqlite3.Error as exc:
                self._keysets = known
                raise JournalWriteError(_write_advice(self.path, what, exc)) from exc


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


def block_from_row(r: Mapping[str, Any], keys: Sequence[str]) -> MeterBlock:
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


def _write_advice(path: Path, what: str, exc: sqlite3.Error) -> str:
    text = str(exc)
    low = text.lower()
    if "full" in low:
        advice = "the disk is full: free space on that drive, then resume the session"
    elif "readonly" in low or "read-only" in low:
        advice = "the file or folder is read-only: make it writable, then resume the session"
    elif "append-only" in low:
        advice = "captured records are never changed"
    else:
        advice = "check the drive, then resume the session; everything saved before this is intact"
    return f"{path}: could not save {what} ({text}); {advice}"


def _connect(path: Path) -> sqlite3.Connection:
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


def _install_triggers(conn: sqlite3.Connection) -> None:
    """Append-only: abort every UPDATE and DELETE on the data tables."""
    for table in DATA_TABLES:
        for op in ("UPDATE", "DELETE"):
            conn.execute(
                f"CREATE TRIGGER IF NOT EXISTS {table}_no_{op.lower()} BEFORE {op} ON {table} "
                f"BEGIN SELECT RAISE(ABORT, 'benchwalk journal is append-only: {op} on {table} refused'); END"
            )
    conn.commit()
