"""One process at a time writes a session: an OS file lock beside the journal.

``fcntl.flock`` on ``NAME.sqlite.lock`` is held for the session's life (new or resumed) and
released by the kernel when the process ends, however it ends, so a killed session never
leaves a stale lock behind. The lock file keeps who holds it (pid, host, since) so a second
``resume`` can say whom to ask. The lock file itself is left in place: removing it would let
a third process lock a fresh file while the second still holds the old one.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import socket
from datetime import UTC, datetime
from pathlib import Path

from ..errors import BenchwalkError


class SessionBusy(BenchwalkError):
    """Another process holds the session; nothing was written."""


def lock_path(journal_path: Path) -> Path:
    journal_path = Path(journal_path)
    return journal_path.with_name(journal_path.name + ".lock")


def _holder(fd: int) -> str:
    """Who holds the lock, as the holder wrote it: ``pid N on HOST since TIME``."""
    try:
        raw = os.pread(fd, 4096, 0)
        info = json.loads(raw.decode("utf-8")) if raw else {}
    except (OSError, ValueError):
        info = {}
    if not isinstance(info, dict) or "pid" not in info:
        return "another process"
    return f"pid {info.get('pid')} on {info.get('host', '?')} since {info.get('since', '?')}"


class SessionLock:
    """An exclusive, non-blocking lock on one session; ``release`` (or process end) frees it."""

    def __init__(self, journal_path: Path, session: str | None = None):
        self.path = lock_path(journal_path)
        self._fd: int | None = None
        self._name = session or Path(journal_path).stem

    def acquire(self) -> SessionLock:
        try:
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT | getattr(os, "O_CLOEXEC", 0), 0o644)
        except OSError as exc:
            raise BenchwalkError(
                f"{self.path}: cannot open the session's lock file ({exc.strerror or exc}); "
                "make the sessions folder writable"
            ) from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            who = _holder(fd)
            os.close(fd)
            raise SessionBusy(
                f"session {self._name} is open in another process ({who}); "
                "stop that one first, or wait for it to finish"
            ) from None
        except OSError as exc:
            os.close(fd)
            raise BenchwalkError(
                f"{self.path}: cannot lock the session ({exc.strerror or exc})"
            ) from None
        info = {
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "since": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        }
        with contextlib.suppress(OSError):  # who holds it is a courtesy; the lock is the flock
            os.ftruncate(fd, 0)
            os.pwrite(fd, json.dumps(info).encode("utf-8"), 0)
        self._fd = fd
        return self

    @property
    def held(self) -> bool:
        return self._fd is not None

    def release(self) -> None:
        fd, self._fd = self._fd, None
        if fd is None:
            return
        with contextlib.suppress(OSError):
            os.ftruncate(fd, 0)
        with contextlib.suppress(OSError):
            fcntl.flock(fd, fcntl.LOCK_UN)
        with contextlib.suppress(OSError):
            os.close(fd)
