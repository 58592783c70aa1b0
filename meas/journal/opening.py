"""A journal file made or opened: what is written once when a session starts, and the checks
a file passes before it is trusted.

A new file gets the schema, the session row and the profile's file texts in one transaction.
An existing file must be SQLite (checked before SQLite touches it) and pass ``quick_check``.
The session lock is the caller's (``Journal.create``, ``Journal.open``).
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import sqlite3
from pathlib import Path

from .. import __version__
from ..errors import BenchwalkError
from ..model import Profile
from . import read
from .errors import JournalDamaged, JournalWriteError
from .read import Json, SessionInfo
from .schema import FORMAT_VERSION, connect, install_schema, now_iso, to_json

SQLITE_MAGIC = b"SQLite format 3\x00"


def create_file(
    path: Path, profile: Profile, operator: str, sid: str, meta: Json | None
) -> tuple[sqlite3.Connection, SessionInfo]:
    """Make the journal file at ``path`` (which must not exist) with its session row."""
    try:
        conn = connect(path)
        with conn:
            install_schema(conn)
            conn.execute(
                "INSERT INTO session VALUES(?,?,?,?,?,?,?,?,?,?)",
                (
                    sid,
                    now_iso(),
                    operator,
                    profile.bench.name,
                    str(profile.path),
                    profile.sha256,
                    to_json(profile_dict(profile)),
                    to_json(meta or {}),
                    f"benchwalk {__version__}",
                    FORMAT_VERSION,
                ),
            )
            conn.executemany(
                "INSERT INTO profile_file VALUES(?,?,?,?)",
                [
                    (i, name, hashlib.sha256(text.encode()).hexdigest(), text)
                    for i, (name, text) in enumerate(profile_texts(profile))
                ],
            )
    except (OSError, sqlite3.Error) as exc:
        raise JournalWriteError(
            f"{path}: cannot create the session journal ({exc}); choose a writable folder with free space"
        ) from exc
    session = read.read_session(conn)
    assert session is not None  # inserted just above
    return conn, session


def open_file(path: Path) -> tuple[sqlite3.Connection, SessionInfo]:
    """Open an existing journal (``require_sqlite`` passed) that SQLite's own check passes,
    with its session row; BenchwalkError if it is not a journal, JournalDamaged if damaged."""
    conn: sqlite3.Connection | None = None
    try:
        conn = connect(path)
        ok = conn.execute("PRAGMA quick_check").fetchone()[0]
        if ok != "ok":
            raise JournalDamaged(
                f"{path}: the journal is damaged ({ok}); keep a copy, and `benchwalk export` "
                "it to get what is readable"
            )
        row = read.read_session(conn)
    except sqlite3.DatabaseError as exc:
        if conn is not None:
            conn.close()
        if "malformed" in str(exc) or "corrupt" in str(exc):
            raise JournalDamaged(
                f"{path}: the journal is damaged ({exc}); keep a copy, and `benchwalk export` "
                "it to get what is readable"
            ) from exc
        raise BenchwalkError(f"{path}: not a readable benchwalk journal ({exc})") from exc
    except BaseException:
        if conn is not None:
            conn.close()
        raise
    if row is None:
        conn.close()
        raise BenchwalkError(f"{path}: the journal holds no session")
    return conn, row


def require_sqlite(path: Path) -> None:
    """Refuse a file that is not an SQLite database before SQLite opens it: opening an empty
    file (a typo, a wrong argument) would turn it into a database."""
    try:
        with open(path, "rb") as f:
            head = f.read(len(SQLITE_MAGIC))
    except OSError as exc:
        raise BenchwalkError(f"{path}: cannot read the journal ({exc.strerror or exc})") from None
    if head != SQLITE_MAGIC:
        what = "an empty file" if not head else "not an SQLite file"
        raise BenchwalkError(
            f"{path}: not a readable benchwalk journal ({what}); give the session's .sqlite file"
        )


def profile_dict(profile: Profile) -> dict[str, object]:
    """The validated profile as data; its file texts are kept once, in ``profile_file``."""
    data = dataclasses.asdict(profile)
    data.pop("sources", None)
    return data


def profile_texts(profile: Profile) -> list[tuple[str, str]]:
    """(name, text) of the profile's files, the main file first. A profile built in memory
    (no files) is kept as its JSON form, so a journal is never without its description."""
    if profile.sources:
        return [(f.name, f.text) for f in profile.sources]
    return [("profile.json", json.dumps(profile_dict(profile), sort_keys=True, default=str))]
