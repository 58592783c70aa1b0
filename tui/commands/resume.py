"""benchwalk resume: continue a stopped or interrupted session at the step where it stopped.

A demo session starts its simulated bench again (same seed and faults) with the switches the
sequence had reached and is walked by the simulated technician; a real session is confirmed
on standard input. The profile must be unchanged unless ``--allow-changed-profile``.
"""

from __future__ import annotations

import argparse
import asyncio
from pathlib import Path

from meas.cautions import HEADLESS_CAUTION
from meas.session import SIM_OPERATOR, Session

from .common import add_common, saved_printer, start_console
from .headless import walk
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
    return await walk(session, tech, args.out)


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
