"""How the report writes one value: numbers to a readable precision, empty cells as blanks."""

from __future__ import annotations

import math

import pandas as pd


def fmt(x: float | None, digits: int = 4) -> str:
    """A number at ``digits`` significant digits, thousands grouped, tiny or huge in e-notation."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    ax = abs(x)
    if ax != 0 and (ax >= 1e6 or ax < 1e-3):
        return f"{x:.3e}"
    return f"{x:.{digits}g}" if ax < 1000 else f"{x:,.0f}"


# Display resolution per unit: what a bench meter face shows (common practice); a report
# value is rounded to it, so a residual of 2e-8 W reads 0 W, not 2.190e-08 W.
RESOLUTION: dict[str, float] = {
    "V": 0.1,
    "A": 0.001,
    "W": 1.0,
    "var": 1.0,
    "VA": 1.0,
    "Hz": 0.001,
    "deg": 0.1,
    "%": 0.01,
    "pu": 0.0001,
    "1": 0.001,
    "": 0.001,
    "s": 0.01,
}


def fmt_res(x: float | None, unit: str | None) -> str:
    """``x`` rounded to the display resolution of ``unit`` (see ``RESOLUTION``), with the
    decimals that resolution has, thousands grouped; no signed zero, no e-notation."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    res = RESOLUTION.get(unit or "", 0.001)
    decimals = max(0, -math.floor(math.log10(res) + 1e-9))
    v = round(round(float(x) / res) * res, decimals) + 0.0
    return f"{v:,.{decimals}f}"


def plain(x: object) -> str:
    """A cell's text; an empty optional value (None, NaN, NaT) is the empty string."""
    return "" if x is None or (isinstance(x, float) and math.isnan(x)) or x is pd.NaT else str(x)
