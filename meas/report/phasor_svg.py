"""Phasor diagrams per meter and step for the report: what a reversed CT or swapped inputs
look like at a glance (the per-phase table gives the numbers).

Each meter's angles are referred to its own V_A (meters share no time base). Voltages and
currents have separate scales, each to its longest phasor, said under the figure. A current
below 1 % of the meter's largest current in the session is not drawn (its angle means
nothing), nor is a meter whose voltage is below 1 % of its largest (dead).
"""

from __future__ import annotations

import html
import math

import pandas as pd

COLOURS = {"A": "#b5651d", "B": "#222222", "C": "#7a7a7a"}  # phase colours, invented
SIZE = 120
R = 48.0


def _line(angle_deg: float, length: float, colour: str, dashed: bool, label: str) -> str:
    a = math.radians(angle_deg)
    c = SIZE / 2
    x, y = c + length * math.cos(a), c - length * math.sin(a)
    dash = ' stroke-dasharray="4 2"' if dashed else ""
    lx, ly = c + (length + 8) * math.cos(a), c - (length + 8) * math.sin(a)
    return (
        f'<line x1="{c}" y1="{c}" x2="{x:.1f}" y2="{y:.1f}" stroke="{colour}" '
        f'stroke-width="2"{dash}/>'
        f'<text x="{lx:.1f}" y="{ly + 3:.1f}" font-size="8" text-anchor="middle" '
        f'fill="{colour}">{html.escape(label)}</text>'
    )


def phasor_svg(values: dict[str, float], i_floor: float, v_floor: float) -> str:
    """One meter's V (solid) and I (dashed) phasors from ``{"v_ln.A": .., "v_ang.A": ..,
    "i.A": .., "i_ang.A": ..}``; empty when the meter has no angles or is dead."""
    vs = {p: values.get(f"v_ln.{p}", math.nan) for p in "ABC"}
    if not all(math.isfinite(v) for v in vs.values()) or max(vs.values()) <= v_floor:
        return ""
    if not any(math.isfinite(values.get(f"v_ang.{p}", math.nan)) for p in "ABC"):
        return ""
    vmax = max(vs.values())
    parts = []
    for p in "ABC":
        ang = values.get(f"v_ang.{p}", 0.0 if p == "A" else math.nan)
        if math.isfinite(ang):
            parts.append(_line(ang, R * vs[p] / vmax, COLOURS[p], False, f"V{p}"))
    cur = {p: values.get(f"i.{p}", math.nan) for p in "ABC"}
    shown = {p: i for p, i in cur.items() if math.isfinite(i) and i > i_floor}
    if shown:
        imax = max(shown.values())
        for p, i in shown.items():
            ang = values.get(f"i_ang.{p}", math.nan)
            if math.isfinite(ang):
                parts.append(_line(ang, 0.8 * R * i / imax, COLOURS[p], True, f"I{p}"))
    c = SIZE / 2
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{SIZE}" height="{SIZE}" '
        f'viewBox="0 0 {SIZE} {SIZE}"><circle cx="{c}" cy="{c}" r="{R}" fill="none" '
        f'stroke="#ddd"/>{"".join(parts)}</svg>'
    )


def phasor_figures(phases: pd.DataFrame, step_id: str) -> str:
    """A row of phasor diagrams, one per meter with angle readings in the step."""
    if phases.empty:
        return ""
    peak = phases[phases["key"].str.startswith(("i.", "v_ln."))].copy()
    peak["q"] = peak["key"].str.split(".").str[0]
    largest = peak.groupby(["meter", "q"])["value"].max().to_dict()
    sub = phases[phases["step"] == step_id]
    figures = []
    for meter, g in sub.groupby("meter", sort=False):
        values = dict(zip(g["key"].astype(str), g["value"].astype(float), strict=True))
        svg = phasor_svg(
            values,
            0.01 * float(largest.get((meter, "i"), 0.0)),
            0.01 * float(largest.get((meter, "v_ln"), 0.0)),
        )
        if svg:
            figures.append(
                f'<figure class="phasor">{svg}<figcaption>{html.escape(str(meter))}</figcaption></figure>'
            )
    if not figures:
        return ""
    return (
        '<div class="phasors">' + "".join(figures) + "</div><p><small>Phasors referred to "
        "each meter's own V<sub>A</sub>; voltages solid, currents dashed, each scaled to its "
        "longest; currents under 1 % of the meter's largest are not drawn.</small></p>"
    )
