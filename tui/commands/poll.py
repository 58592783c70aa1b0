"""``benchwalk poll PROFILE``: read every meter a few times and show a live table.

A quick wiring look without starting a session: values in primary units and the
communication state per meter. Read-only: nothing is ever written to a device.
"""

from __future__ import annotations

import argparse
import asyncio
import math

from rich.live import Live
from rich.table import Table

from meas.poll.cycle import Poller
from meas.profile import load_profile
from meas.snapshot import MeterBlock, Snapshot

from .output import add_json, console, emit_json

HELP = "poll the profile's meters and show V, I, P, Q, PF, f and comm state (read-only)"

COLUMNS = [  # header, candidate keys (first present wins), format
    ("V", ("v_ln.A", "v_ll.AB"), "{:.1f}"),
    ("I", ("i.A",), "{:.3f}"),
    ("P", ("p.T",), "{:.0f}"),
    ("Q", ("q.T",), "{:.0f}"),
    ("PF", ("pf.T",), "{:.3f}"),
    ("f", ("f.T",), "{:.3f}"),
]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("profile", metavar="PROFILE", help="bench profile (.toml)")
    parser.add_argument(
        "--cycles", type=int, default=10, metavar="N", help="poll cycles (default 10)"
    )
    parser.add_argument(
        "--interval",
        type=float,
        default=None,
        metavar="S",
        help="seconds between cycles (default: the profile's poll interval)",
    )
    add_json(parser, "one JSON object per cycle (JSON Lines)")


def _cell(block: MeterBlock, keys: tuple[str, ...], fmt: str) -> str:
    for k in keys:
        if k in block.values:
            v = block.get(k)
            return "-" if math.isnan(v) else fmt.format(v)
    return ""


def render(snap: Snapshot, total: int) -> Table:
    table = Table(
        title=f"cycle {snap.seq}/{total}  {snap.time_utc:%H:%M:%S} UTC  {snap.cycle_s * 1000:.0f} ms"
    )
    table.add_column("meter")
    for head, _, _ in COLUMNS:
        table.add_column(head, justify="right")
    table.add_column("comm")
    table.add_column("note", no_wrap=True, overflow="ellipsis", max_width=36)
    for mid, block in snap.meters.items():
        table.add_row(
            mid,
            *(_cell(block, keys, fmt) for _, keys, fmt in COLUMNS),
            str(block.state),
            block.error,
        )
    if snap.switches:
        table.caption = "  ".join(f"{k}: {v}" for k, v in snap.switches.items())
    return table


def as_json(snap: Snapshot) -> dict[str, object]:
    """One cycle for scripts: every value (NaN -> null), its quality, the meter's state."""
    return {
        "seq": snap.seq,
        "time_utc": snap.time_utc.isoformat(),
        "cycle_s": snap.cycle_s,
        "switches": dict(snap.switches),
        "meters": {
            mid: {
                "state": str(b.state),
                "error": b.error,
                "values": dict(b.values),
                "quality": {k: str(q) for k, q in b.quality.items()},
            }
            for mid, b in snap.meters.items()
        },
    }


async def _poll(args: argparse.Namespace) -> Snapshot | None:
    profile = load_profile(args.profile)
    poller = Poller(profile)
    last: Snapshot | None = None
    if getattr(args, "json", False):
        try:
            await poller.start()
            async for snap in poller.run(args.interval):
                last = snap
                emit_json(as_json(snap))
                if snap.seq >= args.cycles:
                    break
        finally:
            await poller.close()
        return last
    try:
        await poller.start()
        with Live(console=console(), auto_refresh=False, transient=False) as live:
            async for snap in poller.run(args.interval):
                last = snap
                live.update(render(snap, args.cycles), refresh=True)
                if snap.seq >= args.cycles:
                    break
    finally:
        await poller.close()
    return last


def main(args: argparse.Namespace) -> int:
    if args.cycles < 1:
        args.cycles = 1
    asyncio.run(_poll(args))
    return 0
