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


def plain(x: object) -> str:
    """A cell's text; an empty optional value (None, NaN, NaT) is the empty string."""
    return "" if x is None or (isinstance(x, float) and math.isnan(x)) or x is pd.NaT else str(x)
