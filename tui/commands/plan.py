"""``benchwalk plan PROFILE``: show the read requests each meter costs per poll cycle.

Lets a test engineer see, before touching the bench, how many requests a cycle takes, how
many registers are read for nothing in bridged gaps, and on RS-485 how long the bus is busy.
"""

from __future__ import annotations

import argparse

from rich.table import Table

from meas.modbus.plan import naive_request_count, plan_profile, rtu_cycle_time_s
from meas.model import RtuTransport
from meas.profile import load_profile

from .output import add_json, console, emit_json

HELP = "show the poll plan: read requests, registers and RTU bus time per meter"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("profile", metavar="PROFILE", help="bench profile (.toml)")
    add_json(parser, "the plan")


def main(args: argparse.Namespace) -> int:
    profile = load_profile(args.profile)
    plans = plan_profile(profile)
    table = Table(title=f"poll plan: {profile.bench.name} (max_gap {profile.poll.max_gap})")
    table.add_column("meter", no_wrap=True, min_width=5)
    table.add_column("endpoint")
    table.add_column("unit", justify="right", no_wrap=True)
    table.add_column("requests", no_wrap=True)
    table.add_column("regs", justify="right", no_wrap=True)
    table.add_column("gaps", justify="right", no_wrap=True)
    table.add_column("bus ms", justify="right", no_wrap=True)
    n_req = n_read = n_waste = n_naive = 0
    rtu_total = 0.0
    rows: list[dict[str, object]] = []
    for m in profile.meters:
        plan = plans[m.id]
        reqs = "\n".join(
            f"FC{r.function_code} {r.address}-{r.end - 1} {r.count:>3}" for r in plan.requests
        )
        bus, endpoint = "-", m.transport.endpoint.removeprefix("tcp://")
        if isinstance(m.transport, RtuTransport):
            t = m.transport
            secs = rtu_cycle_time_s(plan, t.baudrate, t.parity, t.stopbits, t.bytesize)
            rtu_total += secs
            bus = f"{secs * 1000:.1f}"
            endpoint = f"{t.device} {t.bytesize}{t.parity}{t.stopbits} {t.baudrate}"
        table.add_row(
            m.id,
            endpoint,
            str(m.unit_id),
            reqs,
            str(plan.registers_read),
            str(plan.registers_wasted),
            bus,
        )
        rows.append(
            {
                "meter": m.id,
                "endpoint": m.transport.endpoint,
                "unit_id": m.unit_id,
                "requests": [
                    {"function_code": r.function_code, "address": r.address, "count": r.count}
                    for r in plan.requests
                ],
                "registers_read": plan.registers_read,
                "registers_wasted": plan.registers_wasted,
                "bus_ms": None if bus == "-" else float(bus),
            }
        )
        n_req += len(plan.requests)
        n_read += plan.registers_read
        n_waste += plan.registers_wasted
        n_naive += naive_request_count(profile.maps[m.map_id])
    if getattr(args, "json", False):
        emit_json(
            {
                "bench": profile.bench.name,
                "max_gap": profile.poll.max_gap,
                "meters": rows,
                "requests": n_req,
                "registers_read": n_read,
                "registers_wasted": n_waste,
                "one_read_per_quantity": n_naive,
                "rtu_bus_ms": rtu_total * 1000 if rtu_total else None,
            }
        )
        return 0
    table.add_section()
    table.add_row(
        "total",
        f"{len({m.transport.endpoint for m in profile.meters})} endpoints",
        "",
        f"{n_req} requests",
        str(n_read),
        str(n_waste),
        f"{rtu_total * 1000:.1f}" if rtu_total else "-",
    )
    table.caption = (
        f"requests: FC first-last count; regs: registers read per cycle; gaps: of those "
        f"unused; bus ms: RTU wire time of one cycle. One read per quantity: {n_naive} requests."
    )
    console().print(table)
    return 0
