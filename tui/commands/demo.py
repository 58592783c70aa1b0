"""benchwalk demo: the demo bench on the simulated bench (real Modbus on loopback).

With ``--headless`` a simulated technician walks the whole demo sequence: it operates
manual switches with ``operate_by_hand``, confirms remote commands as "simulated
technician", signs hold points and writes notes; the dataset and report go to ``--out``.
Without it the console starts.
"""

from __future__ import annotations

import argparse
import asyncio
from pathlib import Path

from meas.cautions import HEADLESS_CAUTION
from meas.session import SIM_OPERATOR, Session, as_built_line

from .common import add_as_built, add_common, saved_printer, start_console
from .demo_profiles import demo_profile
from .headless import walk
from .technicians import SimTechnician

HELP = "run the demo feeder bench on the simulated bench (console, or --headless end to end)"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--fault",
        action="append",
        default=[],
        metavar="KIND:METER[:ARG]",
        help="inject a fault into the simulated bench (repeatable), e.g. ct-reversed:M2:B",
    )
    p.add_argument(
        "--headless",
        action="store_true",
        help="run the whole demo sequence in this terminal and write the dataset",
    )
    p.add_argument("--seed", type=int, default=None, help="random seed of the simulated noise")
    add_as_built(p)
    p.add_argument("--profile", type=Path, default=None, help=argparse.SUPPRESS)
    add_common(p)


async def _headless(args: argparse.Namespace, built: str | None) -> int:
    operator = args.operator or SIM_OPERATOR
    print(HEADLESS_CAUTION, flush=True)
    session = await Session.new(
        args.profile,
        operator,
        sessions_dir=args.sessions,
        simulate=True,
        faults=args.fault,
        seed=args.seed,
        on_saved=saved_printer(args.log_saved),
        live_checks=False,
        as_built_seed=args.as_built,
        model_errors=args.model_error,
        out_dir=args.out,
    )
    session.runner.strict_unverified = bool(getattr(args, "strict", False))
    bench = f"simulated bench, {built}" if built else "simulated bench"
    print(f"Session {session.session_id}: journal {session.path} ({bench})", flush=True)
    code = await walk(
        session,
        SimTechnician(session, SIM_OPERATOR),
        args.out,
        args.sessions,
        verdict_to=getattr(args, "_stdout", None),
    )
    if built:
        print(f"Simulated bench on an {built}. The checks used the nameplate model.", flush=True)
    return code


def main(args: argparse.Namespace) -> int:
    if args.profile is None:
        args.profile = demo_profile()
    built = as_built_line(args.profile, args.as_built, args.model_error)  # before anything starts
    if not args.headless:
        return start_console(
            profile_path=str(args.profile),
            simulate=True,
            faults=tuple(args.fault),
            seed=args.seed,
            operator=args.operator,
            sessions_dir=args.sessions,
            out=args.out,
            as_built_seed=args.as_built,
            model_errors=tuple(args.model_error),
        )
    return asyncio.run(_headless(args, built))
