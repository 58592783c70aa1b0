"""benchwalk run: walk a real bench through its sequence, confirming each step on standard input.

Without ``--headless`` the console starts. The walk itself (drive loop, summary, exit codes) is
in ``headless``; the typed prompts are ``technicians.PromptTechnician``.
"""

from __future__ import annotations

import argparse
import asyncio

from meas.cautions import HEADLESS_CAUTION
from meas.errors import BenchwalkError
from meas.session import Session

from .common import add_common, saved_printer, start_console
from .headless import walk
from .technicians import PromptTechnician

HELP = "walk a bench through its switching sequence headless, confirming steps on standard input"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("profile", help="bench profile (TOML)")
    p.add_argument(
        "--headless",
        action="store_true",
        help="run in this terminal with typed prompts instead of the console",
    )
    add_common(p)


async def _run(args: argparse.Namespace) -> int:
    try:
        operator = args.operator or input("Operator name: ").strip()
    except EOFError:
        operator = ""
    if not operator:
        raise BenchwalkError("an operator name is needed: give --operator NAME")
    print(HEADLESS_CAUTION, flush=True)
    session = await Session.new(
        args.profile,
        operator,
        sessions_dir=args.sessions,
        on_saved=saved_printer(args.log_saved),
        live_checks=False,
        out_dir=args.out,
    )
    session.runner.strict_unverified = bool(getattr(args, "strict", False))
    print(f"Session {session.session_id}: journal {session.path}", flush=True)
    return await walk(
        session,
        PromptTechnician(operator),
        args.out,
        args.sessions,
        verdict_to=getattr(args, "_stdout", None),
    )


def main(args: argparse.Namespace) -> int:
    if not args.headless:
        return start_console(
            profile_path=str(args.profile),
            simulate=False,
            operator=args.operator,
            sessions_dir=args.sessions,
            out=args.out,
        )
    return asyncio.run(_run(args))
