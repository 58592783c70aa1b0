"""What a session needs before it runs: the journal, the simulated bench, the checks on the
options, where a resume starts (its profile read again, its step), where a new or resumed
bench starts, the outcomes a resume inherits, a session's one-line state for a list."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..errors import BenchwalkError
from ..journal.errors import SessionExists
from ..journal.lock import SessionBusy
from ..journal.sessions import new_session_id, resolve_session, session_path
from ..journal.store import Journal
from ..model import Profile, SwitchState
from ..profile import load_profile
from ..results import Status
from ..verdict import records_from_log, session_verdict
from ..walk.sequence import (
    configuration_after,
    configuration_before,
    find_step,
    validate_sequence,
)
from ..walk.states import StepOutcome

if TYPE_CHECKING:
    from ..sim.as_built import AsBuilt
    from ..sim.bench import SimulatedBench

SIM_OPERATOR = "simulated technician"


def bench_start_state(profile: Profile, index: int) -> dict[str, SwitchState]:
    """Where the simulated bench starts for step ``index`` (new or resumed): a capture step
    finds the states it expects; a step that operates starts from the states before it
    (for the first step, the switches' normal states: nothing to set)."""
    if index < len(profile.steps) and profile.steps[index].kind == "capture":
        return dict(configuration_after(profile, index))
    return dict(configuration_before(profile, index))


def prior_outcomes(journal: Journal, profile: Profile) -> dict[str, StepOutcome]:
    """Outcomes of steps finished before a resume, from the step log (latest entry wins)."""
    out: dict[str, StepOutcome] = {}
    unverified = journal.unverified_by_step()
    for rec in records_from_log([s.id for s in profile.steps], journal.step_history()):
        if rec.outcome == "not_captured":
            continue
        status = Status.FAIL if rec.failed_checks else Status.PASS
        lines = tuple(unverified.get(rec.step_id, ()))
        out[rec.step_id] = StepOutcome(rec.step_id, rec.outcome, status, (), rec.reason, lines)
    return out


def resume_start(
    journal: Journal,
    profile_path: str | Path | None,
    allow_changed_profile: bool,
    operator: str | None,
) -> tuple[Profile, int, str | None]:
    """Where a resume starts: the profile read again from its file (a changed one only when
    allowed, and journalled), the index of the first step not yet accepted or skipped, and
    that step's id (None when the sequence is over)."""
    ppath = Path(profile_path or journal.profile_dict.get("path", ""))
    if not ppath.is_file():
        raise BenchwalkError(
            f"{journal.path}: the profile {ppath} is not there any more; "
            "give its new location with --profile"
        )
    profile = load_profile(ppath)
    if profile.sha256 != journal.profile_sha256:
        if not allow_changed_profile:
            raise BenchwalkError(
                f"{ppath} changed since session {journal.session_id} started "
                f"(sha256 {journal.profile_sha256[:12]} -> {profile.sha256[:12]}); "
                "check the change, then resume with --allow-changed-profile"
            )
        journal.record_event(
            "profile_changed",
            f"resumed with a changed profile {ppath}",
            operator=operator or journal.operator,
            data={"old_sha256": journal.profile_sha256, "new_sha256": profile.sha256},
        )
    validate_sequence(profile)
    point = journal.resume_point()
    if point is None:
        return profile, len(profile.steps), None
    try:
        index = find_step(profile, point)
    except KeyError:
        raise BenchwalkError(
            f"step {point!r}, where session {journal.session_id} stopped, is not in "
            f"{ppath} any more"
        ) from None
    return profile, index, point


def session_state(path: Path) -> str:
    """One line for a session list: ``finished, VERDICT`` or ``unfinished at step X``.

    Read-only: listing sessions never writes to (or waits on) a journal.
    """
    from ..journal import read

    try:
        conn = read.connect_read_only(path)
    except Exception:  # noqa: BLE001 - a list must show the other sessions anyway
        return "unreadable journal"
    try:
        info = read.read_session(conn)
        if info is None:
            return "empty journal"
        ids = [s["id"] for s in info.profile_dict.get("steps", [])]
        history = read.step_history(conn)
        point = read.resume_point(conn, ids)
        by_step = read.unverified_by_step(conn)
    except Exception:  # noqa: BLE001
        return "unreadable journal"
    finally:
        conn.close()
    records = records_from_log(ids, history)
    if point is None:
        unverified = [line for sid in ids for line in by_step.get(sid, [])]
        return f"finished, {session_verdict(records, unverified).word}"
    done = sum(1 for r in records if r.outcome != "not_captured")
    return f"unfinished at step {point} ({done} of {len(ids)} steps done)"


def as_built_line(
    profile_path: str | Path, as_built_seed: int | str | None, model_errors: Sequence[str]
) -> str | None:
    """Check the as-built options before anything starts; the line a command shows for them.

    None without them; ``BenchwalkError`` names a bad option."""
    built = as_built(load_profile(profile_path), True, as_built_seed, model_errors)
    return None if built is None else built.summary()


def as_built(
    profile: Profile, simulate: bool, seed: int | str | None, model_errors: Sequence[str]
) -> AsBuilt | None:
    """The true network these options give the simulated bench (None without them)."""
    if seed is None and not model_errors:
        return None
    if not simulate:
        raise BenchwalkError("--as-built and --model-error apply to the simulated bench only")
    from ..sim.as_built import from_options

    return from_options(profile, seed, model_errors)


def create_journal(
    profile: Profile,
    operator: str,
    session_id: str | None,
    sessions_dir: Path | None,
    meta: dict[str, Any],
    *,
    base_id: str | None = None,
) -> Journal:
    """A new journal under a given id, or a fresh id unique in the folder: two sessions
    started in the same second get ``ID``, ``ID-2``, ... (the session lock settles a race).
    ``base_id`` is the fresh id to start from (default: the time now and the bench's name)."""
    if session_id is not None:
        path = session_path(session_id, sessions_dir)
        return Journal.create(path, profile, operator=operator, session_id=session_id, meta=meta)
    base = base_id or new_session_id(profile.bench.name)
    for n in range(1, 1000):
        sid = base if n == 1 else f"{base}-{n}"
        path = session_path(sid, sessions_dir)
        if path.exists():
            continue
        try:
            return Journal.create(path, profile, operator=operator, session_id=sid, meta=meta)
        except (SessionExists, SessionBusy):
            continue
    raise BenchwalkError(f"{path.parent}: too many sessions started in the same second")


async def start_bench(
    profile: Profile,
    faults: Sequence[str],
    seed: int | None,
    noise: bool,
    built: AsBuilt | None = None,
) -> tuple[SimulatedBench, Profile]:
    from ..profile.settings import seed_problem
    from ..sim.bench import SimulatedBench
    from ..sim.faults import parse_fault, validate_faults

    if seed is not None and (why := seed_problem(seed)):
        raise BenchwalkError(f"seed: {why}")
    parsed = tuple(parse_fault(f) for f in faults)
    validate_faults(profile, parsed)
    from ..sim.clock import CycleClock

    kwargs: dict[str, Any] = {"faults": parsed, "port_map": "free", "noise": noise}
    kwargs["clock"] = CycleClock(profile.poll.interval_s)  # simulated time, by poll cycles
    kwargs["self_updating"] = False  # the poller advances it before each cycle
    if seed is not None:
        kwargs["seed"] = seed
    if built is not None:
        from ..sim.as_built import readings_on

        kwargs["readings"] = readings_on(built.profile(profile))
    bench = SimulatedBench(profile, **kwargs)
    live = await bench.start()
    return bench, live


def validate_start(
    profile_path: str | Path | None,
    *,
    faults: Sequence[str] = (),
    resume: str | None = None,
    sessions_dir: Path | None = None,
) -> None:
    """Check what starting a session needs (the journal to resume, the profile, the simulated
    faults) before any screen opens: a ``BenchwalkError`` line instead of three screens."""
    if resume:
        resolve_session(resume, sessions_dir)
    profile = load_profile(profile_path) if profile_path else None
    if faults:
        from ..sim.faults import parse_fault, validate_faults

        parsed = tuple(parse_fault(f) for f in faults)
        if profile is not None:
            validate_faults(profile, parsed)
