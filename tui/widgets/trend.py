"""A trend of one quantity of the selected meter, with the settle window marked.

Bars are drawn with block characters (8 levels per row); the columns inside the settle window
sit above a bracket on the axis line, and the window's spread is printed beside it, the same
(max - min) / |mean| figure the settle gate judges.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from rich.text import Text
from textual.widgets import Static

from meas.model import Profile

from ..keys import display_key, key_of
from ..units import UnitMode, eng, scale_factor, unit_label
from .palette import DEFAULT, Palette, palette_of

TREND_KEYS = ("p.T", "q.T", "v_ll.AB", "i.A", "pf.T", "f.T")
TREND_KEY = key_of("trend_key")
# as the trend's title names them: ".T" is the three-phase total, not the T key
TREND_LABEL = {
    "p.T": "P total",
    "q.T": "Q total",
    "v_ll.AB": "V AB",
    "i.A": "I A",
    "pf.T": "PF total",
    "f.T": "f",
}
_BLOCKS = " \u2581\u2582\u2583\u2584\u2585\u2586\u2587\u2588"


def trend_rows(values: Sequence[float], height: int) -> list[str]:
    """Bar chart rows, top row first; NaN columns drawn as '?' on the bottom row."""
    finite = [v for v in values if math.isfinite(v)]
    if not finite:
        return [" " * len(values)] * height
    lo, hi = min(finite), max(finite)
    span = hi - lo
    rows = [[" "] * len(values) for _ in range(height)]
    for x, v in enumerate(values):
        if not math.isfinite(v):
            rows[-1][x] = "?"
            continue
        level = 1 + round((v - lo) / span * (height * 8 - 1)) if span > 0 else height * 4
        for r in range(height):
            fill = min(max(level - 8 * r, 0), 8)
            rows[height - 1 - r][x] = _BLOCKS[fill]
    return ["".join(r) for r in rows]


def window_spread(values: Sequence[float]) -> float:
    finite = [v for v in values if math.isfinite(v)]
    if len(finite) < 2:
        return math.nan
    mean = sum(finite) / len(finite)
    return (max(finite) - min(finite)) / abs(mean) if mean else math.nan


def trend_text(
    profile: Profile,
    meter_id: str,
    key: str,
    samples: Sequence[tuple[float, float]],
    window_s: float,
    mode: UnitMode,
    width: int = 48,
    height: int = 4,
    pal: Palette = DEFAULT,
) -> Text:
    """``samples`` are (t_mono, primary value), oldest first."""
    out = Text()
    bus = profile.meter(meter_id).bus
    k = scale_factor(profile, bus, key, mode)
    unit = unit_label(key, mode)
    shown = list(samples)[-width:]
    values = [v * k for _, v in shown]
    out.append(f"trend {meter_id} {TREND_LABEL.get(key, key)}", style="bold")
    out.append(f"  ({display_key(TREND_KEY)} = next)", style=pal.style("muted"))
    if not shown:
        out.append("  (no samples yet)\n", style=pal.style("muted"))
        return out
    t_end = shown[-1][0]
    in_window = [t >= t_end - window_s for t, _ in shown]
    win_vals = [v for v, w in zip(values, in_window, strict=True) if w]
    spread = window_spread(win_vals)
    last = values[-1]
    out.append(f"\n{eng(last, unit, 0).strip()}", style="bold")
    finite = [v for v in values if math.isfinite(v)]
    if finite:
        out.append(
            f"  lo {eng(min(finite), unit, 0).strip()}  hi {eng(max(finite), unit, 0).strip()}"
        )
    out.append("\n")
    for row in trend_rows(values, height):
        out.append(row + "\n", style=pal.style("accent"))
    first_win = in_window.index(True) if any(in_window) else len(shown)
    n_win = len(shown) - first_win
    axis = "\u2500" * first_win + (
        "\u2514" + "\u2500" * max(n_win - 2, 0) + "\u2518" if n_win >= 2 else "\u2502" * n_win
    )
    out.append(axis, style=pal.style("muted"))
    pct = "--" if not math.isfinite(spread) else f"{spread * 100:.2f} %"
    out.append(f"\n\u2514\u2518 settle window {window_s:g} s: spread {pct}\n", style="bold")
    return out


class TrendView(Static):
    DEFAULT_CSS = "TrendView { height: auto; }"

    def __init__(self, profile: Profile, **kw) -> None:
        super().__init__("", **kw)
        self.profile = profile
        self._last: tuple[str, str] | None = None

    def show(
        self, meter_id: str, key: str, samples, window_s: float, mode: UnitMode, width: int = 48
    ) -> None:
        pal = palette_of(self.app)
        text = trend_text(
            self.profile, meter_id, key, samples, window_s, mode, width=max(width, 8), pal=pal
        )
        if (text.plain, pal.name) != self._last:
            self._last = (text.plain, pal.name)
            self.update(text)
