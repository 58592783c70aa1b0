"""Per-unit bases and network-scale factors, defined once for the dataset and the console.

The core keeps primary bench-side SI values; these views are derived only at the edges. A
meter's bases come from the zone of its bus and the bench: voltages scale by the zone's
network/bench voltage ratio, powers by the bench power scale, currents by their ratio
(S = sqrt(3) V I). Per unit is on the bench's three-phase base ``s_base_va`` and the zone's
bench V_LL; a phase power is on ``s_base_va / 3`` so that a balanced phase and the total read
the same per-unit figure (common practice).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from .model import Profile
from .quantities import split_key

SQRT3 = math.sqrt(3.0)
VOLTAGES = frozenset({"v_ln", "v_ll"})
PHASE_POWERS = frozenset({"p", "q", "s"})  # the powers with a per-unit base
ENERGIES = frozenset({"e_imp", "e_exp"})
POWERS = PHASE_POWERS | ENERGIES  # everything scaled by the bench power scale


@dataclass(frozen=True)
class Bases:
    """The figures a meter's values scale by: its zone's voltages and the bench's power."""

    s_base_va: float
    power_scale: float  # network W per bench W
    bench_v_ll: float  # NaN when the meter's bus has no zone (a dataset of an odd profile)
    network_v_ll: float

    @property
    def voltage_scale(self) -> float:
        return self.network_v_ll / self.bench_v_ll


@dataclass(frozen=True)
class PerUnitBase:
    """A base kept as the fraction ``num / den`` it is defined by.

    Dividing by ``base`` and multiplying by ``factor`` each round once from the defining
    figures, so the dataset (which divides) and the console (which multiplies) keep their
    exact values.
    """

    num: float
    den: float = 1.0

    @property
    def base(self) -> float:
        return self.num / self.den

    @property
    def factor(self) -> float:
        return self.den / self.num


def bases_of(profile: Profile, bus: str) -> Bases:
    """The bases of a meter on ``bus`` of a validated profile."""
    zone = profile.zone_of_bus(bus)
    bench = profile.bench
    return Bases(bench.s_base_va, bench.power_scale, zone.bench_v_ll, zone.network_v_ll)


def bases_of_json(profile: Mapping[str, Any], bus: str) -> Bases:
    """The same from the profile's JSON form (as the journal keeps it); NaN where one is missing."""
    bench = profile["bench"]
    zones = {z["id"]: z for z in bench["zones"]}
    buses = {b["id"]: b for b in profile["buses"]}
    zone = zones.get(buses.get(bus, {}).get("zone"))
    s_base = float(bench.get("s_base_va") or math.nan)
    p_scale = float(bench.get("power_scale") or math.nan)
    if zone is None:
        return Bases(s_base, p_scale, math.nan, math.nan)
    return Bases(s_base, p_scale, float(zone["bench_v_ll"]), float(zone["network_v_ll"]))


def network_factor(bases: Bases, key: str) -> float:
    """Multiply a primary bench value by this for the network scale; 1.0 for PF, f, angles."""
    quantity = split_key(key)[0]
    if quantity in VOLTAGES:
        return bases.voltage_scale
    if quantity == "i":
        return bases.power_scale / bases.voltage_scale
    if quantity in POWERS:
        return bases.power_scale
    return 1.0


def per_unit_base(bases: Bases, key: str) -> PerUnitBase | None:
    """The per-unit base of a voltage, current or power; None for PF, f, angles and energies."""
    quantity, phase = split_key(key)
    if quantity == "v_ll":
        return PerUnitBase(bases.bench_v_ll)
    if quantity == "v_ln":
        return PerUnitBase(bases.bench_v_ll, SQRT3)
    if quantity == "i":
        return PerUnitBase(bases.s_base_va, SQRT3 * bases.bench_v_ll)
    if quantity in PHASE_POWERS:
        return PerUnitBase(bases.s_base_va if phase == "T" else bases.s_base_va / 3.0)
    return None


def energy_base(bases: Bases) -> PerUnitBase:
    """Energies in per-unit hours, on the three-phase base (the console shows them so)."""
    return PerUnitBase(bases.s_base_va)
