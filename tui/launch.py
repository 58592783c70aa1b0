"""Session wiring for ``run_console``: a factory that starts a new or resumed session.

Kept apart from ``tui.app`` so the App can be tested with any factory; this is the one
console module that knows ``meas.session``.
"""

from __future__ import annotations

from collections.abc import Awaitable, Callable
from datetime import datetime
from pathlib import Path

from meas.errors import BenchwalkError
from meas.journal.sessions import default_sessions_dir
from meas.profile import load_profile
from meas.session import Session, session_state


def list_sessions(sessions_dir: Path | None = None, limit: int = 12) -> list[tuple[str, str]]:
    """Journals in the sessions folder, newest first: (session id, its state and
    last-written time), the state from ``meas.session.session_state`` (finished with its
    verdict, or the step it stopped at)."""
    folder = sessions_dir or default_sessions_dir()
    if not folder.is_dir():
        return []
    files = sorted(folder.glob("*.sqlite"), key=lambda p: p.stat().st_mtime, reverse=True)[:limit]
    return [
        (
            p.stem,
            f"{session_state(p)}, last written "
            f"{datetime.fromtimestamp(p.stat().st_mtime):%Y-%m-%d %H:%M}",
        )
        for p in files
    ]


def make_factory(
    profile_path: str | Path | None,
    *,
    faults: list[str] | tuple[str, ...] = (),
    seed: int | None = None,
    sessions_dir: Path | None = None,
    simulate: bool = True,
    allow_changed_profile: bool = False,
    as_built_seed: str | None = None,
    model_errors: tuple[str, ...] = (),
) -> tuple[
    Callable[[str, str | None], Awaitable[Session]], str, Callable[[], list[tuple[str, str]]]
]:
    """(factory(operator, resume) -> awaitable Session, bench name, session lister).

    The profile is loaded once up front so a bad profile fails before the screen opens.
    """
    bench_name = load_profile(profile_path).bench.name if profile_path else "resumed session"
    if simulate and (as_built_seed is not None or model_errors):
        bench_name += " (simulated, as built)"  # the true network is not the nameplate

    async def factory(operator: str, resume: str | None) -> Session:
        if resume:
            return await Session.resume(
                resume,
                sessions_dir=sessions_dir,
                operator=operator,
                profile_path=profile_path,
                allow_changed_profile=allow_changed_profile,
            )
        if profile_path is None:  # the start screen offers a new session even when resuming
            raise BenchwalkError(
                "no profile to start a new session from: give --profile, or resume a listed session"
            )
        return await Session.new(
            profile_path,
            operator,
            sessions_dir=sessions_dir,
            simulate=simulate,
            faults=list(faults),
            seed=seed,
            as_built_seed=as_built_seed,
            model_errors=model_errors,
        )

    return factory, bench_name, lambda: list_sessions(sessions_dir)
