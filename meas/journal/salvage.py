"""Export what is readable from a damaged journal, with the damage listed.

A journal with one bad region (a failing disk, a file copied half-way) must not be refused
whole. Every table is copied row range by row range into a fresh journal file; a range that
cannot be read is split until the unreadable rows are pinned down, and each lost range is
named. The damaged file itself is only ever opened read-only: it stays as it was, for anyone
who can recover more from it.
"""

from __future__ import annotations

import contextlib
import sqlite3
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import BenchwalkError
from .schema import DATA_TABLES, connect, install_schema

CHUNK = 512  # rows per read; a failing chunk is split in halves down to single keys
# the key a table is walked by: rowid, or the first primary-key column of a WITHOUT ROWID table
WALK_KEY = {"reading": "snapshot", "profile_file": "seq"}


@dataclass
class Salvage:
    """The readable copy and what could not be read (one sentence per lost range)."""

    path: Path
    damage: list[str] = field(default_factory=list)
    copied: dict[str, int] = field(default_factory=dict)


def _bounds(src: sqlite3.Connection, table: str, key: str) -> tuple[int, int] | None:
    for sql in (f"SELECT min({key}), max({key}) FROM {table}",):  # noqa: S608 - our own names
        try:
            lo, hi = src.execute(sql).fetchone()
        except sqlite3.DatabaseError:
            return None
        if lo is None:
            return (1, 0)
        return int(lo), int(hi)
    return None


def _copy_range(
    src: sqlite3.Connection,
    dst: sqlite3.Connection,
    table: str,
    key: str,
    lo: int,
    hi: int,
    lost: list[tuple[int, int]],
) -> int:
    try:
        rows = src.execute(
            f"SELECT * FROM {table} WHERE {key} BETWEEN ? AND ? ORDER BY {key}",  # noqa: S608
            (lo, hi),
        ).fetchall()
    except sqlite3.DatabaseError:
        if lo >= hi:
            lost.append((lo, hi))
            return 0
        mid = (lo + hi) // 2
        return _copy_range(src, dst, table, key, lo, mid, lost) + _copy_range(
            src, dst, table, key, mid + 1, hi, lost
        )
    if rows:
        marks = ",".join("?" * len(rows[0]))
        dst.executemany(f"INSERT OR IGNORE INTO {table} VALUES({marks})", rows)  # noqa: S608
    return len(rows)


def _merge(lost: list[tuple[int, int]]) -> list[tuple[int, int]]:
    out: list[tuple[int, int]] = []
    for lo, hi in sorted(lost):
        if out and lo <= out[-1][1] + 1:
            out[-1] = (out[-1][0], max(out[-1][1], hi))
        else:
            out.append((lo, hi))
    return out


def salvage_journal(damaged: Path, into: Path) -> Salvage:
    """Copy every readable row of ``damaged`` into a new journal at ``into``."""
    damaged, into = Path(damaged), Path(into)
    try:
        src = sqlite3.connect(f"file:{damaged}?mode=ro", uri=True)
    except sqlite3.Error as exc:
        raise BenchwalkError(f"{damaged}: the journal cannot be opened at all ({exc})") from None
    out = Salvage(into)
    try:
        into.parent.mkdir(parents=True, exist_ok=True)
        dst = connect(into)
        install_schema(dst)
        with contextlib.closing(dst):
            for table in DATA_TABLES:
                key = WALK_KEY.get(table, "rowid")
                bounds = _bounds(src, table, key)
                if bounds is None:
                    out.damage.append(f"table {table}: unreadable, nothing of it exported")
                    continue
                lost: list[tuple[int, int]] = []
                n = 0
                with dst:
                    for lo in range(bounds[0], bounds[1] + 1, CHUNK):
                        n += _copy_range(
                            src, dst, table, key, lo, min(bounds[1], lo + CHUNK - 1), lost
                        )
                out.copied[table] = n
                for lo, hi in _merge(lost):
                    what = f"{key} {lo}" if lo == hi else f"{key} {lo}..{hi}"
                    out.damage.append(f"table {table}: rows with {what} unreadable, left out")
            dst.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    finally:
        src.close()
    if "session" not in out.copied or out.copied.get("session", 0) == 0:
        raise BenchwalkError(
            f"{damaged}: the session row itself is unreadable; nothing can be exported from it"
        )
    return out
