"""The report's SVG chart: bus balance residuals against their limits, drawn inline."""

from __future__ import annotations

import html
import math

import numpy as np
import pandas as pd

from .rows import balance_rows
from .text import fmt, plain


def balance_svg(
    rows: pd.DataFrame,
    width: int = 640,
    title: str = "bus balance residuals against their limits",
) -> str:
    """Horizontal bars of |value| / limit per check and subject; the limit is the line at 1."""
    if rows.empty:
        return ""
    bar_h, gap, left, right, top = 18, 8, 210, 60, 24
    height = top + len(rows) * (bar_h + gap) + 24
    vmax = max(1.5, float(np.nanmax(rows["residual"].to_numpy(float))) * 1.1)
    span = width - left - right
    x = lambda v: left + span * min(v, vmax) / vmax  # noqa: E731
    colour = {"fail": "#b3261e", "warn": "#b26a00", "pass": "#2e6b3a"}
    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" role="img" width="{width}" height="{height}" '
        f'viewBox="0 0 {width} {height}" class="chart">',
        f"<title>{html.escape(title)}</title>",
    ]
    for tick in np.linspace(0, vmax, 4):
        parts.append(
            f'<line x1="{x(tick):.1f}" y1="{top - 6}" x2="{x(tick):.1f}" y2="{height - 18}" class="grid"/>'
        )
        parts.append(f'<text x="{x(tick):.1f}" y="{height - 4}" class="tick">{_tick(tick)}</text>')
    for n, r in enumerate(balance_rows(rows)):
        y = top + n * (bar_h + gap)
        res = float(r.residual)
        w = max(1.0, x(res) - left) if math.isfinite(res) else 0.0
        label = html.escape(f"{r.subject} {r.check}")
        parts.append(f'<text x="{left - 6}" y="{y + bar_h - 5}" class="label">{label}</text>')
        parts.append(
            f'<rect x="{left}" y="{y}" width="{w:.1f}" height="{bar_h}" fill="{colour.get(r.worst, "#555")}"/>'
        )
        parts.append(
            f'<text x="{left + w + 4:.1f}" y="{y + bar_h - 5}" class="val">'
            f"{html.escape(fmt(r.value))} / {html.escape(fmt(r.limit))} {html.escape(plain(r.unit))}</text>"
        )
    parts.append(
        f'<line x1="{x(1.0):.1f}" y1="{top - 10}" x2="{x(1.0):.1f}" y2="{height - 18}" class="limit"/>'
    )
    parts.append(f'<text x="{x(1.0) + 3:.1f}" y="{top - 12}" class="tick">limit</text>')
    parts.append("</svg>")
    return "\n".join(parts)


def _tick(v: float) -> str:
    """A tick label with two significant digits and no e-notation (a client reads 120, not
    1.2e+02)."""
    if v == 0 or not math.isfinite(v):
        return "0" if v == 0 else ""
    digits = max(0, 1 - math.floor(math.log10(abs(v))))
    return f"{round(v, digits):.{digits}f}"
