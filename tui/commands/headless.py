"""The headless walk shared by ``run``, ``demo`` and ``resume``: the drive loop and the summary.

A technician (``technicians``) answers what the runner's view asks for, until the sequence
ends or the technician stops (end of input). The verdict and the exit code are
``meas.verdict``'s: 0 PASS, 1 FAIL or INCOMPLETE, 2 usage or profile error, 3 stopped before
the end (the session can be resumed); PASS with unverified readings exits 0 (1 with
``--strict``).
"""

from __future__ import annotations

import asyncio
import contextlib
import shlex
import signal
import sys
from pathlib import Path
from typing import Any, TextIO

from meas.session import Session
from meas.verdict import EXIT_FAIL, EXIT_PASS, EXIT_STOPPED, OUTCOME_WORDS
from meas.walk.states import State
from meas.walk.view import RunnerView

from .technicians import Technician

__all__ = ["EXIT_FAIL", "EXIT_PASS", "EXIT_STOPPED", "drive", "summarize", "walk"]


def print_step(view: RunnerView, out: TextIO) -> None:
    step = view.step
    if step is None:
        return
    print(f"\n[{view.index + 1}/{view.total}] {step.title}  ({step.kind}, id {step.id})", file=out)
    print(f"  {step.instruction}", file=out)
    if view.expected and step.kind not in ("hold", "note"):
        print("  expect: " + ", ".join(f"{k} {v}" for k, v in view.expected.items()), file=out)


async def drive(
    session: Session,
    technician: Technician,
    out: TextIO = sys.stdout,
    sessions_dir: Path | None = None,
) -> int:
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
    return summarize(session, out, sessions_dir)


def summarize(session: Session, out: TextIO, sessions_dir: Path | None = None) -> int:
    """Print the outcome per step, the failing checks and the verdict; the exit code.

    The verdict line and the exit code are ``meas.verdict``'s, the same as the console's, the
    report's first line and the dataset's.
    """
    runner = session.runner
    verdict = runner.verdict()
    print("", file=out)
    if runner.stopped:
        print(
            f"Stopped at step {runner.step.id if runner.step else '-'}: {runner.message}", file=out
        )
        print_resume_hint(session.session_id, session.path, sessions_dir, out)
        print(f"Session {session.session_id} so far: {verdict.line}", file=out)
        return EXIT_STOPPED
    failures = [(o.step_id, r) for o in runner.outcomes.values() for r in o.failures]
    for rec in runner.records():
        extra = f" ({rec.reason})" if rec.reason else ""
        print(f"  {rec.step_id:<22} {OUTCOME_WORDS[rec.outcome]:<23}{extra}", file=out)
    if failures:
        print("\nFailing checks:", file=out)
        print(f"  {'step':<20} {'check':<22} {'subject':<8} {'cause':<16} message", file=out)
        for step_id, r in failures:
            print(
                f"  {step_id:<20} {r.check:<22} {r.subject:<8} {r.cause:<16} {r.message}", file=out
            )
    print(f"\nSession {session.session_id}: {verdict.line}", file=out)
    return verdict.exit_code


def resume_command(session_id: str, sessions_dir: Path | None, headless: bool = True) -> str:
    """The exact command that continues ``session_id`` (with ``--sessions`` when one was given)."""
    parts = ["benchwalk", "resume", session_id]
    if sessions_dir is not None:
        parts += ["--sessions", shlex.quote(str(sessions_dir))]
    if headless:
        parts.append("--headless")
    return " ".join(parts)


def print_resume_hint(
    session_id: str, path: Path, sessions_dir: Path | None, out: TextIO, headless: bool = True
) -> None:
    print(
        f"Session {session_id} is saved in {path}; continue with: "
        f"{resume_command(session_id, sessions_dir, headless)}",
        file=out,
    )


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
    facts = runner.verdict().as_dict()
    return {
        "session": session.session_id,
        **facts,
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


STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)


async def walk(
    session: Session,
    technician: Technician,
    out_dir: Path | None,
    sessions_dir: Path | None = None,
    verdict_to: TextIO | None = None,
) -> int:
    """Drive the session to its end, then export and close it; closed on any error too.

    With ``verdict_to`` (``--json``) the verdict goes there as one JSON line.

    SIGINT, SIGTERM and SIGHUP stop the walk where it is: the stop is journalled, the session
    id and the exact resume command are printed and the exit code is 3. A signal during the
    final export lets the export finish first.
    """
    loop = asyncio.get_running_loop()
    task = asyncio.current_task()
    got: list[signal.Signals] = []
    driving = True

    def on_signal(sig: signal.Signals) -> None:
        got.append(sig)
        if driving and task is not None and len(got) == 1:
            task.cancel()

    installed = []
    for sig in STOP_SIGNALS:
        with contextlib.suppress(NotImplementedError, RuntimeError, ValueError):
            loop.add_signal_handler(sig, on_signal, sig)
            installed.append(sig)
    try:
        try:
            code = await drive(session, technician, sys.stdout, sessions_dir)
        except asyncio.CancelledError:
            if not got or task is None:
                raise
            task.uncancel()
            session.runner.stop(f"interrupted by {got[0].name}")
            code = summarize(session, sys.stdout, sessions_dir)
        except BaseException:
            await session.close()
            raise
        driving = False
        dataset = report = None
        if got:
            await session.close()
            code = EXIT_STOPPED
        else:
            code, dataset, report = await finish(session, code, out_dir, sys.stdout)
        if verdict_to is not None:
            from .output import emit_json

            emit_json(verdict(session, code, dataset, report), stream=verdict_to)
        return code
    finally:
        for sig in installed:
            loop.remove_signal_handler(sig)
