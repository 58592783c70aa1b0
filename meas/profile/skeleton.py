"""A profile skeleton from what a scan found: one meter per unit id that answered, its
endpoint and identification, and marked places for what only a person can fill in (register
map, bus, branch, classes, the network). It is a start, not a profile: ``benchwalk lint``
lists what is still missing."""

from __future__ import annotations

import json
import re
from collections.abc import Sequence
from typing import Protocol

from ..model import RtuTransport, TcpTransport, Transport


class Found(Protocol):
    """A unit a scan found (``meas.modbus.scan.UnitFound``)."""

    @property
    def unit_id(self) -> int: ...
    @property
    def answered(self) -> str: ...
    @property
    def identification(self) -> dict[str, str]: ...


def _q(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)  # a TOML basic string is a JSON string


def _transport(t: Transport) -> str:
    if isinstance(t, TcpTransport):
        return f"tcp = {{ host = {_q(t.host)}, port = {t.port} }}"
    assert isinstance(t, RtuTransport)
    return (
        f"rtu = {{ device = {_q(t.device)}, baudrate = {t.baudrate}, parity = {_q(t.parity)}, "
        f"stopbits = {t.stopbits} }}"
    )


def skeleton(transport: Transport, found: Sequence[Found], bench_name: str = "New bench") -> str:
    """The TOML text of a profile skeleton for the units found on one endpoint."""
    maps: dict[str, str] = {}  # map id -> description, one per vendor/product seen
    meters = []
    for n, u in enumerate(found, start=1):
        ident = u.identification
        product = " ".join(x for x in (ident.get("vendor"), ident.get("product_code")) if x)
        map_id = re.sub(r"[^a-z0-9]+", "-", product.lower()).strip("-") or "unknown-meter"
        maps.setdefault(map_id, product or "a meter that gave no identification")
        desc = ", ".join(f"{k} {v}" for k, v in ident.items()) or f"answered: {u.answered}"
        meters.append(
            "\n".join(
                [
                    "[[meter]]",
                    f'id = "M{n}"',
                    f"label = {_q(desc)}",
                    f"map = {_q(map_id)}",
                    _transport(transport),
                    f"unit_id = {u.unit_id}",
                    'bus = "B1"                  # TODO: the bus where it measures voltage',
                    '# branch = "..."            # TODO: the branch whose current it measures',
                    '# classes = { p = "1", q = "2", v = "0.5", i = "0.5" }  # TODO: from its nameplate',
                ]
            )
        )
    out = [
        f"# Profile skeleton written by `benchwalk scan` from {transport.endpoint}:",
        f"# {len(found)} unit id(s) answered. Fill in every TODO, then run `benchwalk lint`.",
        "",
        "[bench]",
        f"name = {_q(bench_name)}",
        "frequency_hz = 50.0               # TODO",
        "s_base_va = 30000.0               # TODO: three-phase per-unit base on the bench",
        "",
        "[[zone]]",
        'id = "main"',
        "bench_v_ll = 400.0                # TODO",
        "network_v_ll = 400.0              # TODO",
        "",
        "[control]",
        "enabled = false                   # nothing is written to a device",
        "",
        "[[bus]]",
        'id = "B1"',
        'zone = "main"',
        "",
    ]
    for map_id, desc in maps.items():
        out += [
            f"[maps.{_q(map_id)}]",
            f"description = {_q(desc)}",
            'defaults = { kind = "holding", type = "float32", word_order = "big", byte_order = "big" }  # TODO',
            f'# TODO: the registers, here or as a CSV table: csv = "maps/{map_id}.csv"',
            f"[maps.{_q(map_id)}.registers]",
            "",
        ]
    out += [m + "\n" for m in meters]
    return "\n".join(out)
