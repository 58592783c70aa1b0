"""Values as the technician wants to read them: bench SI, network scale or per unit.

The core keeps primary bench-side SI values (DEVELOPERS.md); the scaled views are derived
here, at the edge, and nowhere else in the console. Pure functions, no textual import.
"""

from __future__ import annotations

import math
from typing import Literal

from meas.bases import bases_of, energy_base, network_factor, per_unit_base
from meas.model import Profile
from meas.quantities import split_key, unit_of

UnitMode = Literal["bench", "network", "pu"]
UNIT_MODES: tuple[UnitMode, ...] = ("bench", "network", "pu")
UNIT_MODE_LABEL = {"bench": "bench SI", "network": "network scale", "pu": "per unit"}

_AS_READ = ("pf", "f", "v_ang", "i_ang")  # no scale and no per-unit base
_PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"))


def scale_factor(profile: Profile, bus: str, key: str, mode: UnitMode) -> float:
    """Multiply a primary bench value by this to show it in ``mode``; 1.0 for PF, f, angles.

    The factors are ``meas.bases``'s (the dataset's too); energies show in per-unit hours.
    """
    if mode == "bench" or split_key(key)[0] in _AS_READ:
        return 1.0
    bases = bases_of(profile, bus)
    if mode == "network":
        return network_factor(bases, key)
    return (per_unit_base(bases, key) or energy_base(bases)).factor


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
        digits = 1 if unit == "deg" else 3
        text = f"{round(value, digits) + 0.0:.{digits}f}"  # + 0.0: never a signed zero
        return (f"{text} {unit}".rstrip()).rjust(width)
    mag = abs(value)
    if mag < 0.9995e-3:  # below the smallest prefix shown: a plain zero, no sign, no prefix
        return f"0 {unit}".rjust(width)
    factor, prefix = next(((f, p) for f, p in _PREFIXES if mag >= f * 0.9995), _PREFIXES[-1])
    scaled = value / factor
    digits = 2 if abs(scaled) < 9.995 else 1 if abs(scaled) < 99.95 else 0
    return f"{scaled:.{digits}f} {prefix}{unit}".rjust(width)
