"""benchwalk resume: continue a stopped or interrupted session at the step where it stopped.

A demo session starts its simulated bench again (same seed and faults) with the switches the
sequence had reached and is walked by the simulated technician; a real session is confirmed
on standard input. The profile must be unchanged unless ``--allow-changed-profile``.
"""

from __future__ import annotations

import argparse
import asyncio
import sys
from pathlib import Path

from meas.cautions import HEADLESS_CAUTION
from meas.session import SIM_OPERATOR, Session

from .common import add_common, saved_printer, start_console
from .headless import resume_command, walk
from .technicians import PromptTechnician, SimTechnician, Technician

HELP = "continue a session at the step where it stopped"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("session", help="session id or path to its .sqlite journal")
    p.add_argument(
        "--allow-changed-profile",
        action="store_true",
        help="resume even though the profile file changed since the session started",
    )
    p.add_argument("--headless", action="store_true", help="continue in this terminal")
    p.add_argument(
        "--profile",
        type=Path,
        default=None,
        help="the profile file, if it moved since the session started",
    )
    p.add_argument(
        "--reexport",
        action="store_true",
        help="the session is finished: write its dataset and report again (to --out)",
    )
    add_common(p)


async def _headless(args: argparse.Namespace) -> int:
    print(HEADLESS_CAUTION, flush=True)
    session = await Session.resume(
        args.session,
        allow_changed_profile=args.allow_changed_profile,
        sessions_dir=args.sessions,
        operator=args.operator,
        profile_path=args.profile,
        on_saved=saved_printer(args.log_saved),
        live_checks=False,
        out_dir=args.out,
    )
    session.runner.strict_unverified = bool(getattr(args, "strict", False))
    if session.runner.finished:
        return await _finished(session, args)
    step = session.runner.step
    print(
        f"Session {session.session_id}: resuming at "
        f"{'the end' if step is None else f'step {step.id}'}",
        flush=True,
    )
    tech: Technician
    if session.bench is not None:
        tech = SimTechnician(session, SIM_OPERATOR)
    else:
        tech = PromptTechnician(session.runner.operator)
    return await walk(
        session, tech, args.out, args.sessions, verdict_to=getattr(args, "_stdout", None)
    )


async def _finished(session: Session, args: argparse.Namespace) -> int:
    """A finished session has nothing to resume: say so and re-export only when asked
    (``--reexport``, or yes at the question on a terminal), never silently."""
    verdict = session.runner.verdict()
    target = args.out or Path(f"benchwalk-{session.session_id}")
    print(f"Session {session.session_id} is already finished: {verdict.line}", flush=True)
    try:
        again = args.reexport
        if not again and sys.stdin.isatty():
            answer = await asyncio.to_thread(
                input, f"Write its dataset and report again to {target}? [y/N] "
            )
            again = answer.strip().lower() in ("y", "yes")
        if again:
            dataset, report = session.export(target, overwrite=True)
            print(f"Dataset written to {dataset}, report to {report}", flush=True)
        else:
            print(
                "Nothing written. To write its dataset and report again: "
                + resume_command(session.session_id, args.sessions)
                + " --reexport [--out DIR]",
                flush=True,
            )
    finally:
        await session.close()
    return verdict.exit_code


def main(args: argparse.Namespace) -> int:
    if not args.headless:
        return start_console(
            profile_path=str(args.profile) if args.profile else None,
            resume=args.session,
            allow_changed_profile=args.allow_changed_profile,
            operator=args.operator,
            sessions_dir=args.sessions,
            out=args.out,
        )
    return asyncio.run(_headless(args))
