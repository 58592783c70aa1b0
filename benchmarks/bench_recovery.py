"""How soon a meter that comes back is read again, while the healthy meters keep their cycle.

Run:  /work/venv/bin/python benchmarks/bench_recovery.py [--downtimes 1,2,3,5,8]

Real pymodbus servers on loopback (``tests/support/recovery.py``): per downtime, a unit behind
a gateway falls silent and a meter's own server stops, then both answer again; the poller
runs at the default 0.2 s cycle with the default backoff (0.5 s doubling to 10 s). Printed:
median and worst time from "answers again" to the first snapshot holding its values (target
2 s for both), and the share of cycles in which the healthy gateway neighbours were read.
"""

from __future__ import annotations

import argparse
import asyncio
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from common import Figure, Target, median, rich_table  # noqa: E402
from support.recovery import run_recovery  # noqa: E402


def measure(downtimes: tuple[float, ...]) -> list[Figure]:
    run = asyncio.run(run_recovery(downtimes))
    xs = run.all_returns
    print(run.summary())
    return [
        Figure(
            "poller",
            f"meter return, median of {len(xs)} (unit behind gateway + own endpoint)",
            median(xs),
            "s",
            targets=(Target("ours", "<", 2.0),),
        ),
        Figure(
            "poller",
            f"meter return, worst of {len(xs)}",
            max(xs) if xs else None,
            "s",
            targets=(Target("ours", "<", 2.0),),
        ),
        Figure(
            "poller",
            "healthy neighbours read, share of cycles",
            run.healthy_ok_fraction(),
            "",
            targets=(Target("ours", ">=", 0.99),),
            note=f"{len(run.snapshots)} cycles; largest gap {run.largest_gap_s():.2f} s",
        ),
    ]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--downtimes", default="1,2,3,5,8", help="seconds each meter stays away")
    args = ap.parse_args(argv)
    downtimes = tuple(float(x) for x in args.downtimes.split(","))
    from rich.console import Console

    Console().print(rich_table(measure(downtimes), "meter return"))
    return 0


if __name__ == "__main__":
    sys.exit(main())
