"""Values as the technician wants to read them: bench SI, network scale or per unit.

The core keeps primary bench-side SI values (DEVELOPERS.md); the scaled views are derived
here, at the edge, and nowhere else in the console. Pure functions, no textual import.
"""

from __future__ import annotations

import math
from typing import Literal

from meas.model import Profile
from meas.quantities import split_key, unit_of

UnitMode = Literal["bench", "network", "pu"]
UNIT_MODES: tuple[UnitMode, ...] = ("bench", "network", "pu")
UNIT_MODE_LABEL = {"bench": "bench SI", "network": "network scale", "pu": "per unit"}

_SQRT3 = math.sqrt(3.0)
_PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"))


def scale_factor(profile: Profile, bus: str, key: str, mode: UnitMode) -> float:
    """Multiply a primary bench value by this to show it in ``mode``; 1.0 for PF, f, angles.

    Network scale: voltages by the zone's voltage ratio, powers by the bench power scale and
    currents by power/voltage ratio (S = sqrt(3) V I). Per unit: on the bench's three-phase
    base S_base and the zone's bench V_LL; phase powers on S_base/3 so that a balanced
    phase and the total read the same per-unit figure (common practice).
    """
    quantity, phase = split_key(key)
    if mode == "bench" or quantity in ("pf", "f", "v_ang", "i_ang"):
        return 1.0
    zone = profile.zone_of_bus(bus)
    bench = profile.bench
    if mode == "network":
        if quantity in ("v_ln", "v_ll"):
            return zone.voltage_scale
        if quantity == "i":
            return bench.power_scale / zone.voltage_scale
        return bench.power_scale  # p, q, s, energies
    # per unit
    if quantity == "v_ll":
        return 1.0 / zone.bench_v_ll
    if quantity == "v_ln":
        return _SQRT3 / zone.bench_v_ll
    if quantity == "i":
        return _SQRT3 * zone.bench_v_ll / bench.s_base_va
    if quantity in ("p", "q", "s"):
        base = bench.s_base_va if phase == "T" else bench.s_base_va / 3.0
        return 1.0 / base
    return 1.0 / bench.s_base_va  # energies in pu-hours


def unit_label(key: str, mode: UnitMode) -> str:
    if mode == "pu" and split_key(key)[0] in ("v_ln", "v_ll", "i", "p", "q", "s"):
        return "pu"
    u = unit_of(key)
    return "" if u == "1" else u


def eng(value: float, unit: str, width: int = 9) -> str:
    """Right-aligned engineering notation with an SI prefix, fixed width; NaN as '--'.

    Three significant figures after scaling is what a meter face shows; a fixed width keeps
    columns still while the numbers move (no jitter at 5 updates per second).
    """
    if value is None or not math.isfinite(value):
        return "--".rjust(width)
    if unit in ("", "pu", "Hz", "deg"):
        text = f"{value:.3f}" if unit != "deg" else f"{value:.1f}"
        return (f"{text} {unit}".rstrip()).rjust(width)
    mag = abs(value)
    factor, prefix = next(((f, p) for f, p in _PREFIXES if mag >= f * 0.9995), _PREFIXES[-1])
    if mag == 0:
        factor, prefix = 1.0, ""
    scaled = value / factor
    digits = 2 if abs(scaled) < 9.995 else 1 if abs(scaled) < 99.95 else 0
    return f"{scaled:.{digits}f} {prefix}{unit}".rjust(width)
