"""``benchwalk scan ENDPOINT``: which unit ids answer on a Modbus TCP endpoint or serial line,
and what they are (read device identification), optionally written as a profile skeleton.

Read-only: identification and one-register reads; nothing is written to a device."""

from __future__ import annotations

import argparse
import asyncio
from pathlib import Path

from meas.errors import BenchwalkError

from .output import add_json, emit_json

HELP = "find the unit ids that answer on an endpoint or serial line, with their identification"


def _units(text: str) -> list[int]:
    out: list[int] = []
    for part in text.split(","):
        lo, _, hi = part.strip().partition("-")
        try:
            a, b = int(lo), int(hi or lo)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"{text!r}: give unit ids like 1-16 or 1,2,10"
            ) from None
        if not (0 <= a <= b <= 247):
            raise argparse.ArgumentTypeError(f"{text!r}: unit ids are 0..247")
        out += range(a, b + 1)
    return out


def _text(spec: str):  # noqa: ANN202 - meas.modbus.scan.TextRegister
    from meas.modbus.scan import TextRegister

    try:
        name, address, count, *order = spec.split(":")
        reg = TextRegister(name, int(address, 0), int(count), *(order or ["big"]))
    except (ValueError, TypeError):
        raise argparse.ArgumentTypeError(
            f"{spec!r}: give NAME:ADDRESS:COUNT[:big|little], e.g. serial:5000:8"
        ) from None
    if (
        not reg.name
        or not (0 <= reg.address <= 65535 and 1 <= reg.count <= 125)
        or reg.byte_order not in ("big", "little")
    ):
        raise argparse.ArgumentTypeError(
            f"{spec!r}: address 0..65535, count 1..125, order big or little"
        )
    return reg


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("endpoint", help="tcp://HOST:PORT or rtu:///dev/ttyUSB0")
    p.add_argument(
        "--units", type=_units, default=list(range(1, 17)), help="unit ids to try (default 1-16)"
    )
    p.add_argument(
        "--timeout",
        type=float,
        default=0.3,
        metavar="S",
        help="seconds to wait per unit (default 0.3)",
    )
    p.add_argument(
        "--baudrate", type=int, default=9600, help="serial line: baud rate (default 9600)"
    )
    p.add_argument(
        "--parity", choices=("N", "E", "O"), default="E", help="serial line: parity (default E)"
    )
    p.add_argument("--stopbits", type=int, choices=(1, 2), default=1, help="serial line: stop bits")
    p.add_argument(
        "--write-profile",
        type=Path,
        default=None,
        metavar="FILE",
        help="write a profile skeleton of what answered",
    )
    p.add_argument(
        "--text",
        type=_text,
        action="append",
        default=[],
        metavar="NAME:ADDRESS:COUNT",
        help="also read a text register (COUNT holding registers from ADDRESS) from every unit found",
    )
    add_json(p, "the units found")


def transport_of(args: argparse.Namespace):  # noqa: ANN201 - meas.model.Transport
    from meas.model import RtuTransport, TcpTransport

    ep: str = args.endpoint
    if ep.startswith("tcp://"):
        host, _, port = ep.removeprefix("tcp://").rpartition(":")
        if not host or not port.isdigit():
            raise BenchwalkError(f"{ep!r}: give tcp://HOST:PORT")
        return TcpTransport(host.strip("[]"), int(port))
    if ep.startswith("rtu://"):
        return RtuTransport(ep.removeprefix("rtu://"), args.baudrate, args.parity, args.stopbits)
    raise BenchwalkError(f"{ep!r}: give tcp://HOST:PORT or rtu://DEVICE")


def main(args: argparse.Namespace) -> int:
    from meas.modbus.scan import scan

    transport = transport_of(args)
    if args.write_profile is not None and args.write_profile.exists():
        raise BenchwalkError(f"{args.write_profile}: already exists; choose another file")
    found = asyncio.run(scan(transport, args.units, args.timeout, args.text))
    if args.write_profile is not None:
        from meas.profile.skeleton import skeleton

        try:
            args.write_profile.write_text(skeleton(transport, found), encoding="utf-8")
        except OSError as exc:
            raise BenchwalkError(
                f"{args.write_profile}: cannot write ({exc.strerror or exc})"
            ) from None
    if args.json:
        emit_json(
            {
                "endpoint": transport.endpoint,
                "units": [
                    {
                        "unit_id": u.unit_id,
                        "answered": u.answered,
                        "identification": u.identification,
                    }
                    for u in found
                ],
                "profile": str(args.write_profile) if args.write_profile else None,
            }
        )
    else:
        print(f"{transport.endpoint}: {len(found)} of {len(args.units)} unit ids answered")
        for u in found:
            ident = (
                ", ".join(f"{k} {v}" for k, v in u.identification.items()) or "no identification"
            )
            print(f"  unit {u.unit_id}: {u.answered}; {ident}")
        if args.write_profile is not None:
            print(
                f"profile skeleton written: {args.write_profile} (fill in the TODOs, then benchwalk lint)"
            )
    return 0 if found else 1
