"""What every network check shares: the per-profile grid structures and the per-snapshot
columns they read.

Sign convention (DEVELOPERS.md): a meter's positive P/Q flows from its bus into its branch, so
at a bus the readings of all its branches sum to zero (per phase as well: every meter there
sees the same phase voltage and KCL holds per conductor).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TypedDict

from ..layout import Layout


class Cols(TypedDict):
    """Per meter, the figures the network checks read, as Python lists (cheap to index)."""

    p: list[float]  # P total
    q: list[float]  # Q total
    up: list[float]  # standard uncertainty of P total
    uq: list[float]
    v: list[float]  # mean L-N voltage
    vu: list[float]
    live: list[bool]  # energized
    f: list[float]
    uf: list[float]


@dataclass(frozen=True)
class Grid:
    """Which meters sit where on the network, built once per profile."""

    ids: list[str]  # meter ids, in meter order
    two_end: list[tuple[str, int, int]]  # branch, meter at from end, meter at to end
    on_bus: dict[str, list[int]]  # bus -> meters measuring there
    vn: list[float]  # per meter, nominal L-N voltage
    plain: bool  # no limit overrides: Limits.apply returns its input

    @classmethod
    def build(cls, lay: Layout) -> Grid:
        p = lay.profile
        two_end: list[tuple[str, int, int]] = []
        for br in p.branches:
            if br.to_bus is None:
                continue
            a = [i for i, m in enumerate(p.meters) if m.branch == br.id and m.bus == br.from_bus]
            b = [i for i, m in enumerate(p.meters) if m.branch == br.id and m.bus == br.to_bus]
            if a and b:
                two_end.append((br.id, a[0], b[0]))
        on_bus: dict[str, list[int]] = {
            b.id: [i for i, m in enumerate(p.meters) if m.bus == b.id] for b in p.buses
        }
        return cls(
            ids=[m.id for m in p.meters],
            two_end=two_end,
            on_bus=on_bus,
            vn=lay.v_n.tolist(),
            plain=not lay.profile.checks.overrides,
        )
