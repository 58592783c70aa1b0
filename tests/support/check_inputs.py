"""Hand-built snapshots for the check tests: every reading derived from V and I phasors.

Independent of the simulator: values follow the textbook definitions (S = V I*, IEEE 1459 S
totals, IEC PF sign of P), so a test can state exactly what it injects.
"""

from __future__ import annotations

import dataclasses
import math
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from meas import phasors as ph
from meas.model import (
    AccuracyClasses,
    Branch,
    Bus,
    LineParams,
    LoadParams,
    Meter,
    Profile,
    SourceParams,
    TcpTransport,
)
from meas.profile import load_profile
from meas.snapshot import CommState, MeterBlock, Quality, Snapshot

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"
T0 = datetime(2026, 1, 1, tzinfo=UTC)


def demo() -> Profile:
    return load_profile(DEMO)


def values(v: np.ndarray, i: np.ndarray, vector: bool, f: float = 50.0) -> dict[str, float]:
    """Every quantity of a three-phase meter from phase-to-neutral V and current I phasors."""
    v, i = np.asarray(v, complex), np.asarray(i, complex)
    s = ph.phase_powers(v, i)
    out: dict[str, float] = {}
    ref = np.angle(v[0]) if abs(v[0]) > 0 else 0.0
    for k, p in enumerate("ABC"):
        out[f"v_ln.{p}"] = abs(v[k])
        out[f"i.{p}"] = abs(i[k])
        out[f"p.{p}"], out[f"q.{p}"], out[f"s.{p}"] = s[k].real, s[k].imag, abs(s[k])
        out[f"pf.{p}"] = s[k].real / abs(s[k]) if abs(s[k]) > 0 else 0.0
        out[f"v_ang.{p}"] = float(ph.wrap_deg(math.degrees(np.angle(v[k]) - ref)))
        out[f"i_ang.{p}"] = (
            float(ph.wrap_deg(math.degrees(np.angle(i[k]) - ref))) if abs(i[k]) > 0 else 0.0
        )
    for pair, (a, b) in (("AB", (0, 1)), ("BC", (1, 2)), ("CA", (2, 0))):
        out[f"v_ll.{pair}"] = abs(v[a] - v[b])
    out["i.N"] = abs(i.sum())
    out["p.T"], out["q.T"] = float(s.real.sum()), float(s.imag.sum())
    out["s.T"] = float(ph.apparent_vector(s.real, s.imag) if vector else ph.apparent_arithmetic(s))
    out["pf.T"] = out["p.T"] / out["s.T"] if out["s.T"] > 0 else 0.0
    out["f.T"] = f if np.abs(v).max() > 0 else 0.0
    out["e_imp.T"] = out["e_exp.T"] = 0.0
    return out


def balanced(
    v_ln: float = 230.0, i: float = 10.0, phi_deg: float = 20.0, rot: float = 0.0
) -> tuple[np.ndarray, np.ndarray]:
    ang = np.array([0.0, -120.0, 120.0]) + rot
    return ph.phasor([v_ln] * 3, ang), ph.phasor([i] * 3, ang - phi_deg)


def block(
    profile: Profile,
    meter_id: str,
    v: np.ndarray,
    i: np.ndarray,
    f: float = 50.0,
    **override: float,
) -> MeterBlock:
    rmap = profile.meter_map(meter_id)
    vals = values(v, i, rmap.apparent_power == "vector", f)
    vals.update(override)
    keys = [r.key for r in rmap.registers]
    return MeterBlock(
        meter_id, {k: float(vals[k]) for k in keys}, dict.fromkeys(keys, Quality.OK), CommState.OK
    )


def snapshot(
    blocks: list[MeterBlock], switches: dict[str, str] | None = None, seq: int = 1, t: float = 0.0
) -> Snapshot:
    return Snapshot(seq, T0, t, {b.meter: b for b in blocks}, switches or {})


def one_bus_profile(base: Profile, feeders: list[tuple[str, str]], ct_a: float = 100.0) -> Profile:
    """Bus B1 fed by line L0 (metered at B1 by meter IN) and one load branch per (meter id, class p)."""
    zone = base.buses[0].zone
    buses = (Bus("B0", zone), Bus("B1", zone))
    branches = [Branch("SRC", "source", "B0"), Branch("L0", "line", "B0", "B1")]
    meters = [
        Meter(
            "IN",
            "incomer",
            TcpTransport("127.0.0.1", 1),
            1,
            "lumen-f32",
            "B1",
            "L0",
            ct_primary_a=ct_a,
            classes=AccuracyClasses("0.5S", "2", "0.5", "0.5"),
        )
    ]
    for mid, cls in feeders:
        branches.append(Branch(f"F{mid}", "load", "B1"))
        meters.append(
            Meter(
                mid,
                mid,
                TcpTransport("127.0.0.1", 1),
                1,
                "lumen-f32",
                "B1",
                f"F{mid}",
                ct_primary_a=ct_a,
                classes=AccuracyClasses(cls, "2", "0.5", "0.5"),
            )
        )
    return dataclasses.replace(
        base,
        meters=tuple(meters),
        buses=buses,
        branches=tuple(branches),
        switches=(),
        plcs=(),
        steps=(),
    )


def radial_bench(base: Profile, n_meters: int = 32) -> Profile:
    """An invented radial bench of ``n_meters``: a chain of buses, lines metered at both ends, a
    metered load at every bus. The check benchmark times it and the golden check results pin
    it, so a change here shows as a golden failure."""
    buses = [Bus("B0", base.buses[0].zone)]
    branches = [Branch("SRC", "source", "B0", model=SourceParams(408.0, 2.0e6, 8.0))]
    meters: list[Meter] = []
    maps = ["lumen-f32", "corvid-i32", "wren-i16"]

    def meter(bus: str, branch: str, map_id: str) -> None:
        k = len(meters) + 1
        extra = (
            {"reports": "secondary", "ct_ratio": 10.0, "vt_ratio": 4.0}
            if map_id == "corvid-i32"
            else {}
        )
        meters.append(
            Meter(
                f"X{k}",
                f"synthetic meter {k}",
                TcpTransport("127.0.0.1", 15100 + k),
                1,
                map_id,
                bus,
                branch,
                ct_primary_a=100.0,
                classes=AccuracyClasses("0.5S", "2", "0.5", "0.5"),
                **extra,
            )
        )

    i = 0
    while len(meters) < n_meters:
        i += 1
        prev, bus = f"B{i - 1}", f"B{i}"
        buses.append(Bus(bus, base.buses[0].zone))
        branches.append(Branch(f"L{i}", "line", prev, bus, model=LineParams(0.02, 0.03, 10.0)))
        meter(prev, f"L{i}", maps[i % 3])
        meter(bus, f"L{i}", maps[(i + 1) % 3])
        branches.append(Branch(f"LD{i}", "load", bus, model=LoadParams(1500.0, 500.0, "pq")))
        if len(meters) < n_meters:
            meter(bus, f"LD{i}", maps[(i + 2) % 3])
    return dataclasses.replace(
        base,
        path="<synthetic>",
        meters=tuple(meters[:n_meters]),
        buses=tuple(buses),
        branches=tuple(branches),
        switches=(),
        plcs=(),
        steps=(),
    )
