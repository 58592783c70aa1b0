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
from meas.session import SIM_OPERATOR, Session

from .common import add_common, saved_printer, start_console
from .headless import walk
from .technicians import SimTechnician

HELP = "run the demo feeder bench on the simulated bench (console, or --headless end to end)"

DEMO_PROFILE = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"


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
    p.add_argument("--profile", type=Path, default=DEMO_PROFILE, help=argparse.SUPPRESS)
    add_common(p)


async def _headless(args: argparse.Namespace) -> int:
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
        out_dir=args.out,
    )
    print(f"Session {session.session_id}: journal {session.path} (simulated bench)", flush=True)
    return await walk(session, SimTechnician(session, SIM_OPERATOR), args.out)


def main(args: argparse.Namespace) -> int:
    if not args.headless:
        return start_console(
            profile_path=str(args.profile),
            simulate=True,
            faults=tuple(args.fault),
            seed=args.seed,
            operator=args.operator,
            sessions_dir=args.sessions,
            out=args.out,
        )
    return asyncio.run(_headless(args))
