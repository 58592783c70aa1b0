"""``benchwalk sim``: serve the profile's simulated bench on loopback until Ctrl-C."""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import signal
import sys
from typing import TYPE_CHECKING

from .common import add_as_built

if TYPE_CHECKING:
    from meas.sim.as_built import AsBuilt
    from meas.sim.bench import SimulatedBench

HELP = "serve a simulated bench (meters and PLC over Modbus TCP on loopback) for a profile"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("profile", metavar="PROFILE", help="bench profile (TOML)")
    p.add_argument(
        "--fault",
        action="append",
        default=[],
        metavar="KIND:METER[:ARG]",
        help="inject a fault, e.g. ct-reversed:M3:B, offline:M6, offline:PLC1, slow:M2:1.5 (repeatable; see docs/faults.md)",
    )
    p.add_argument(
        "--host",
        default="127.0.0.1",
        help="address to bind (default 127.0.0.1: loopback only); any other address exposes "
        "the bench's Modbus servers, command coils included, to the network, with a warning",
    )
    p.add_argument(
        "--free-ports",
        action="store_true",
        help="let the OS pick free ports instead of the profile's",
    )
    p.add_argument(
        "--seed", type=int, default=None, help="noise seed (default: [sim] seed of the profile)"
    )
    p.add_argument(
        "--no-noise", action="store_true", help="report ideal values (faults still apply)"
    )
    add_as_built(p)


def _print_endpoints(bench: SimulatedBench, profile_path: str, built: AsBuilt | None) -> None:
    print(f"simulated bench for {profile_path}")
    for e in bench.endpoints:
        label = f"  {e.label}" if e.label else ""
        print(f"  {e.kind:5} {e.id:6} tcp://{e.host}:{e.port}  unit {e.unit_id}{label}")
    for f in bench.faults:
        print(f"  fault {f.text}")
    if built is not None:
        print(f"  {built.summary()}; the profile keeps its nameplate model")
        for a in built.applied:
            print(f"    {a.text()}")
    print(
        "SIMULATION: no real equipment is connected or switched. Ctrl-C stops the bench.",
        flush=True,
    )


async def _serve(args: argparse.Namespace) -> int:
    from meas.errors import BenchwalkError
    from meas.profile import load_profile
    from meas.profile.settings import seed_problem
    from meas.sim.as_built import from_options, readings_on
    from meas.sim.bench import SimulatedBench
    from meas.sim.faults import parse_faults
    from meas.sim.server import exposure_warning

    if args.seed is not None and (why := seed_problem(args.seed)):
        raise BenchwalkError(f"--seed: {why}")
    profile = load_profile(args.profile)
    faults = parse_faults(args.fault)
    built = None
    if args.as_built is not None or args.model_error:
        built = from_options(profile, args.as_built, args.model_error)
    if warning := exposure_warning(args.host):
        print(warning, file=sys.stderr, flush=True)
    bench = SimulatedBench(
        profile,
        faults,
        host=args.host,
        port_map="free" if args.free_ports else None,
        seed=args.seed,
        noise=not args.no_noise,
        readings=readings_on(built.profile(profile)) if built is not None else None,
    )
    stop = asyncio.Event()
    loop = asyncio.get_running_loop()
    for sig in (signal.SIGINT, signal.SIGTERM):
        with contextlib.suppress(NotImplementedError, RuntimeError):
            loop.add_signal_handler(sig, stop.set)
    await bench.start()
    try:
        _print_endpoints(bench, args.profile, built)
        await stop.wait()
    finally:
        await bench.stop()
    print("simulated bench stopped")
    return 0


def main(args: argparse.Namespace) -> int:
    return asyncio.run(_serve(args))
