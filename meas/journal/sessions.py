"""Where session journals live and what they are called: ids, paths, look-up by id or path."""

from __future__ import annotations

import os
import re
from datetime import UTC, datetime
from pathlib import Path

from ..errors import BenchwalkError
from .read import SessionState, session_state


def default_sessions_dir() -> Path:
    """Where session journals live: ``$BENCHWALK_SESSIONS``, else the per-user data folder
    (``platformdirs``, e.g. ``~/.local/share/benchwalk/sessions``), never the current folder."""
    env = os.environ.get("BENCHWALK_SESSIONS")
    if env:
        return Path(env)
    from platformdirs import user_data_path

    return user_data_path("benchwalk", appauthor=False) / "sessions"


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


def list_sessions(sessions_dir: Path | None = None) -> list[Path]:
    """Journal files in the sessions folder, newest first."""
    folder = sessions_dir or default_sessions_dir()
    if not folder.is_dir():
        return []
    return sorted(folder.glob("*.sqlite"), key=lambda p: p.stat().st_mtime, reverse=True)


def session_states(sessions_dir: Path | None = None) -> list[SessionState]:
    """Each journal in the sessions folder with its state (finished, stopped at a step, ...)."""
    return [session_state(p) for p in list_sessions(sessions_dir)]
