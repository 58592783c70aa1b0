"""Secondary-to-primary conversion, the one place CT and VT ratios are applied.

The poller turns what a meter reports into primary values with ``to_primary``; the simulated
bench turns primary values into what a secondary-reporting meter holds with ``to_secondary``.
"""

from __future__ import annotations

from .model import Meter
from .quantities import split_key

_VOLTAGE = {"v_ln", "v_ll"}
_CURRENT = {"i"}
_POWER = {"p", "q", "s", "e_imp", "e_exp"}


def ratio(meter: Meter, key: str) -> float:
    """Factor from the meter's reported value to the primary value for this key."""
    if meter.reports != "secondary":
        return 1.0
    quantity, _ = split_key(key)
    if quantity in _VOLTAGE:
        return meter.vt_ratio
    if quantity in _CURRENT:
        return meter.ct_ratio
    if quantity in _POWER:
        return meter.ct_ratio * meter.vt_ratio
    return 1.0  # pf, f and angles are ratio-free


def to_primary(meter: Meter, key: str, value: float) -> float:
    return value * ratio(meter, key)


def to_secondary(meter: Meter, key: str, value: float) -> float:
    return value / ratio(meter, key)
