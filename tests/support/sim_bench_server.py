"""The simulated demo bench served in its own process, steered one command a line on stdin.

For soak tests: the polling process then holds only the poller's memory, sockets and tasks.
Prints one JSON line once listening, ``{"ports": {"HOST:PORT": bound_port, ...}}`` (the
profile's TCP endpoints -> the ports the OS gave), then answers each command with ``ack``
(or ``err <one line>``):

- ``faults [FAULT ...]``: replace the injected faults (``offline:M3 exception:M5:4``; none = clear)
- ``hand SWITCH open|closed``: the simulated technician operates a switch at its panel
- ``quit``

::

    python tests/support/sim_bench_server.py profiles_demo/feeder_bench.toml --seed 7
"""

from __future__ import annotations

import argparse
import asyncio
import json
import sys

from meas.errors import BenchwalkError
from meas.model import TcpTransport
from meas.profile import load_profile
from meas.sim.bench import SimulatedBench
from meas.sim.faults import parse_fault


async def _serve(profile_path: str, seed: int) -> None:
    profile = load_profile(profile_path)
    bench = SimulatedBench(profile, port_map="free", seed=seed)
    bound = await bench.start()
    ports = {}
    for before, after in zip(
        (*profile.meters, *profile.plcs), (*bound.meters, *bound.plcs), strict=True
    ):
        if isinstance(before.transport, TcpTransport):
            ports[f"{before.transport.host}:{before.transport.port}"] = after.transport.port
    print(json.dumps({"ports": ports}), flush=True)
    loop = asyncio.get_running_loop()
    reader = asyncio.StreamReader()
    await loop.connect_read_pipe(lambda: asyncio.StreamReaderProtocol(reader), sys.stdin)
    try:
        while line := (await reader.readline()).decode().strip():
            word, *args = line.split()
            try:
                if word == "quit":
                    break
                if word == "faults":
                    bench.set_faults([parse_fault(a) for a in args])
                elif word == "hand" and len(args) == 2:
                    bench.operate_by_hand(args[0], args[1])  # type: ignore[arg-type]
                else:
                    raise BenchwalkError(f"unknown command {line!r}")
                reply = "ack"
            except BenchwalkError as exc:
                reply = f"err {exc}"
            print(reply, flush=True)
    finally:
        await bench.stop()


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("profile")
    ap.add_argument("--seed", type=int, default=20261201)
    args = ap.parse_args()
    asyncio.run(_serve(args.profile, args.seed))


if __name__ == "__main__":
    main()
