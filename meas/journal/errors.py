"""The journal's user errors, each one line naming the file and what to do."""

from __future__ import annotations

import sqlite3
from pathlib import Path

from ..errors import BenchwalkError


class JournalWriteError(BenchwalkError):
    """A record could not be saved (disk full, read-only, I/O error); earlier records are intact."""


class JournalDamaged(BenchwalkError):
    """SQLite's own check found damage: resume is refused; export salvages what is readable."""


class SessionExists(BenchwalkError):
    """A journal of that name is already there: captured data is never overwritten."""


def write_advice(path: Path, what: str, exc: sqlite3.Error) -> str:
    """The line a failed write shows: what was not saved, why, and what to do next."""
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
