"""The headless walk shared by ``run``, ``demo`` and ``resume``: the drive loop and the summary.

A technician (``technicians``) answers what the runner's view asks for, until the sequence
ends or the technician stops (end of input). Exit codes: 0 every check passed, 1 a check
failed (a step accepted or skipped with failing checks) or a step was skipped, 2 usage or
profile error, 3 stopped before the end (the session can be resumed).
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any, TextIO

from meas.results import Status
from meas.session import Session
from meas.walk.states import State
from meas.walk.view import RunnerView

from .technicians import Technician

EXIT_PASS, EXIT_FAIL, EXIT_STOPPED = 0, 1, 3


def print_step(view: RunnerView, out: TextIO) -> None:
    step = view.step
    if step is None:
        return
    print(f"\n[{view.index + 1}/{view.total}] {step.title}  ({step.kind}, id {step.id})", file=out)
    print(f"  {step.instruction}", file=out)
    if view.expected and step.kind not in ("hold", "note"):
        print("  expect: " + ", ".join(f"{k} {v}" for k, v in view.expected.items()), file=out)


async def drive(session: Session, technician: Technician, out: TextIO = sys.stdout) -> int:
    """Run the session's sequence to its end with ``technician`` answering; the exit code."""
    runner = session.runner
    shown = -1
    last_state = None
    async for view in session.views():
        if view.step is not None and view.index != shown:
            shown = view.index
            print_step(view, out)
        if view.state != last_state and view.state is State.REVIEWING and view.capture_target:
            worst = "fail" if view.overall == "inconsistent" else "pass"
            print(f"  captured {view.captured} snapshots: checks {worst}", file=out)
        last_state = view.state
        if runner.done:
            break
        if not view.polled:
            continue  # switch states unknown until the first poll
        await technician.act(runner, view)
        if runner.done:
            break
    return summarize(session, out)


def summarize(session: Session, out: TextIO) -> int:
    """Print the outcome per step and the failing checks; the exit code."""
    runner = session.runner
    print("", file=out)
    if runner.stopped:
        print(
            f"Stopped at step {runner.step.id if runner.step else '-'}: {runner.message}", file=out
        )
        print(
            f"Session {session.session_id} is saved in {session.path}; continue with: "
            f"benchwalk resume {session.session_id} --headless",
            file=out,
        )
        return EXIT_STOPPED
    failures = [(o.step_id, r) for o in runner.outcomes.values() for r in o.failures]
    for o in runner.outcomes.values():
        extra = f" ({o.reason})" if o.reason else ""
        print(f"  {o.step_id:<22} {o.outcome:<9} {o.status.value}{extra}", file=out)
    if failures:
        print("\nFailing checks:", file=out)
        print(f"  {'step':<20} {'check':<22} {'subject':<8} {'cause':<16} message", file=out)
        for step_id, r in failures:
            print(
                f"  {step_id:<20} {r.check:<22} {r.subject:<8} {r.cause:<16} {r.message}", file=out
            )
    failed, skipped = runner.verdict() is Status.FAIL, runner.skipped_steps()
    if failed:
        word = "FAIL"
    elif skipped:
        # nothing failed, but the measurement set has holes: not a pass to put in a report
        word = f"INCOMPLETE ({len(skipped)} of {len(runner.profile.steps)} steps skipped: {', '.join(skipped)})"
    else:
        word = "PASS"
    print(f"\nSession {session.session_id}: {word}", file=out)
    return EXIT_FAIL if failed or skipped else EXIT_PASS


async def finish(
    session: Session, code: int, out_dir: Path | None, out: TextIO
) -> tuple[int, Path | None, Path | None]:
    """Export the dataset and report when the sequence completed; close the session."""
    dataset = report = None
    try:
        if session.runner.finished:
            target = out_dir or Path(f"benchwalk-{session.session_id}")
            dataset, report = session.export(target)
            print(f"Dataset written to {dataset}, report to {report}", file=out)
    finally:
        await session.close()
    return code, dataset, report


def verdict(
    session: Session, code: int, dataset: Path | None, report: Path | None
) -> dict[str, Any]:
    """The session's outcome for scripts (``--json``): the same facts ``summarize`` prints."""
    runner = session.runner
    word = {EXIT_PASS: "PASS", EXIT_STOPPED: "STOPPED"}.get(code) or (
        "FAIL" if runner.verdict() is Status.FAIL else "INCOMPLETE"
    )
    return {
        "session": session.session_id,
        "verdict": word,
        "exit_code": code,
        "journal": str(session.path),
        "stopped_at": runner.step.id if runner.stopped and runner.step else None,
        "steps": [
            {"step": o.step_id, "outcome": o.outcome, "status": o.status.value, "reason": o.reason}
            for o in runner.outcomes.values()
        ],
        "failures": [
            {
                "step": o.step_id,
                "check": r.check,
                "subject": r.subject,
                "cause": r.cause,
                "message": r.message,
            }
            for o in runner.outcomes.values()
            for r in o.failures
        ],  # fmt: skip
        "skipped": list(runner.skipped_steps()),
        "dataset": str(dataset) if dataset else None,
        "report": str(report) if report else None,
    }


async def walk(
    session: Session,
    technician: Technician,
    out_dir: Path | None,
    verdict_to: TextIO | None = None,
) -> int:
    """Drive the session to its end, then export and close it; closed on any error too.

    With ``verdict_to`` (``--json``) the verdict goes there as one JSON line."""
    try:
        code = await drive(session, technician, sys.stdout)  # the current one (--json moves it)
    except BaseException:
        await session.close()
        raise
    code, dataset, report = await finish(session, code, out_dir, sys.stdout)
    if verdict_to is not None:
        from .output import emit_json

        emit_json(verdict(session, code, dataset, report), stream=verdict_to)
    return code
