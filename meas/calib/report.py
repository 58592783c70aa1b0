"""The calibration report as one self-contained HTML page with inline SVG plots.

Three plots: the largest |deviation| per step and meter before and after against the
acceptance limit; each parameter's change with its 95 % interval inside its prior band; the
normalized residual of every reading against 3.
"""

from __future__ import annotations

import html
from typing import Any

import numpy as np
import pandas as pd

from .identify import Z95
from .run import Calibration
from .tables import (
    correlations_table,
    deviations_table,
    gains_table,
    identifiability_table,
    parameters_table,
)

_STYLE = """body{font-family:system-ui,sans-serif;margin:2em;max-width:72em;color:#222}
table{border-collapse:collapse;margin:1em 0}td,th{border:1px solid #ccc;padding:2px 6px;font-size:90%}
td.n{text-align:right;font-variant-numeric:tabular-nums}.bad{color:#b3261e;font-weight:600}
svg text{font-size:11px}.ok{color:#2e6b3a;font-weight:600}"""


def _e(x: object) -> str:
    return html.escape(str(x))


def _num(x: object) -> str:
    if isinstance(x, bool | np.bool_):
        return "yes" if x else "no"
    if isinstance(x, float | np.floating):
        return f"{float(x):.5g}"
    return _e(x)


def _table(df: pd.DataFrame, limit: int | None = None) -> str:
    if df.empty:
        return "<p>none</p>"
    rows = df if limit is None else df.head(limit)
    head = "".join(f"<th>{_e(c)}</th>" for c in rows.columns)
    body = []
    for r in rows.itertuples(index=False):
        cells = []
        for v in r:
            cls = ' class="n"' if isinstance(v, float | int | np.number) else ""
            cells.append(f"<td{cls}>{_num(v)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    more = f"<p>{len(df) - limit} more rows in the CSV.</p>" if limit and len(df) > limit else ""
    return f"<table><tr>{head}</tr>{''.join(body)}</table>{more}"


def _svg(width: int, height: int, title: str, parts: list[str]) -> str:
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" role="img" width="{width}" height="{height}" '
        f'viewBox="0 0 {width} {height}"><title>{_e(title)}</title>' + "".join(parts) + "</svg>"
    )


def deviation_svg(dev: pd.DataFrame) -> str:
    """Per step and meter: max |dev|/limit before (grey) and after (blue); 1 is the limit."""
    g = (
        dev.assign(
            rb=dev["dev_before_pct"].abs() / dev["limit_before_pct"],
            ra=dev["dev_after_pct"].abs() / dev["limit_after_pct"],
        )
        .groupby(["step", "meter"], sort=False)[["rb", "ra"]]
        .max()
    )
    if g.empty:
        return ""
    left, bar, top, width = 220, 7, 20, 720
    height = top + len(g) * (2 * bar + 4) + 30
    vmax = max(1.5, float(np.nanmax(g.to_numpy())) * 1.05)
    vmax = min(vmax, 20.0)
    span = width - left - 20
    parts = []
    x1 = left + span / vmax
    parts.append(
        f'<line x1="{x1:.1f}" y1="{top - 10}" x2="{x1:.1f}" y2="{height - 20}" stroke="#b3261e"/>'
    )
    parts.append(f'<text x="{x1 + 3:.1f}" y="{top - 8}">limit</text>')
    for n, (key, rb, ra) in enumerate(zip(g.index, g["rb"], g["ra"], strict=True)):
        step, meter = key
        y = top + n * (2 * bar + 4)
        parts.append(
            f'<text x="{left - 6}" y="{y + 2 * bar - 2}" text-anchor="end">{_e(step)} {_e(meter)}</text>'
        )
        for k, (val, colour) in enumerate(((rb, "#999"), (ra, "#2b5fad"))):
            w = span * min(float(val), vmax) / vmax
            parts.append(
                f'<rect x="{left}" y="{y + k * bar}" width="{w:.1f}" height="{bar - 1}" fill="{colour}"/>'
            )
    parts.append(
        f'<text x="{left}" y="{height - 6}">|deviation| / limit, grey before, blue after (clipped at {vmax:.3g})</text>'
    )
    return _svg(width, height, "deviations before and after", parts)


def parameter_svg(par: pd.DataFrame) -> str:
    """Change of each parameter (%) with its 95 % interval, inside its 95 % prior band."""
    p = par[par["profile_value"] != 0]
    if p.empty:
        return ""
    left, row, top, width = 140, 18, 20, 720
    height = top + len(p) * row + 30
    prior = Z95 * 100.0 * p["prior_u"] / p["profile_value"].abs()
    lo = 100.0 * (p["low95"] / p["profile_value"] - 1.0)
    hi = 100.0 * (p["high95"] / p["profile_value"] - 1.0)
    vmax = (
        float(np.nanmax(np.r_[prior.to_numpy(), lo.abs().to_numpy(), hi.abs().to_numpy()])) * 1.05
    )
    vmax = max(vmax, 1.0)
    span = (width - left - 20) / 2
    mid = left + span
    x = lambda v: mid + span * max(-vmax, min(vmax, v)) / vmax  # noqa: E731
    parts = [f'<line x1="{mid}" y1="{top - 8}" x2="{mid}" y2="{height - 22}" stroke="#444"/>']
    rows = zip(
        p["parameter"],
        p["calibrated_value"].to_numpy(float),
        p["profile_value"].to_numpy(float),
        prior.to_numpy(float),
        lo.to_numpy(float),
        hi.to_numpy(float),
        strict=True,
    )
    for n, (name, value, nominal, pb, l_, h_) in enumerate(rows):
        y = top + n * row
        c = 100.0 * (value / nominal - 1.0)
        parts.append(f'<text x="{left - 6}" y="{y + 10}" text-anchor="end">{_e(name)}</text>')
        parts.append(
            f'<rect x="{x(-pb):.1f}" y="{y}" width="{x(pb) - x(-pb):.1f}" height="{row - 4}" fill="#e6e6e6"/>'
        )
        parts.append(
            f'<line x1="{x(l_):.1f}" y1="{y + 7}" x2="{x(h_):.1f}" y2="{y + 7}" stroke="#2b5fad" stroke-width="2"/>'
        )
        parts.append(f'<circle cx="{x(c):.1f}" cy="{y + 7}" r="3" fill="#2b5fad"/>')
    parts.append(
        f'<text x="{left}" y="{height - 6}">change from the profile value, % (axis ±{vmax:.3g} %); grey: 95 % prior band; blue: calibrated with its 95 % interval</text>'
    )
    return _svg(width, height, "parameters against their priors", parts)


def residual_svg(dev: pd.DataFrame) -> str:
    """Normalized residual of every reading, in row order, with the line at 3."""
    r = dev["r_norm"].to_numpy(float)
    if len(r) == 0:
        return ""
    width, height, left, top = 720, 180, 40, 10
    vmax = max(4.0, float(np.nanmax(r)) * 1.05)
    xs = lambda i: left + (width - left - 10) * i / max(1, len(r) - 1)  # noqa: E731
    ys = lambda v: top + (height - top - 25) * (1 - min(v, vmax) / vmax)  # noqa: E731
    parts = [
        f'<line x1="{left}" y1="{ys(3):.1f}" x2="{width - 10}" y2="{ys(3):.1f}" stroke="#b3261e"/>'
    ]
    parts += [
        f'<circle cx="{xs(i):.1f}" cy="{ys(v):.1f}" r="1.6" fill="{"#b3261e" if v > 3 else "#2b5fad"}"/>'
        for i, v in enumerate(r)
    ]
    parts.append(
        f'<text x="{left}" y="{height - 5}">normalized residual per reading (steps in order); red line at 3</text>'
    )
    return _svg(width, height, "normalized residuals", parts)


def render(c: Calibration, summary: dict[str, Any], title: str) -> str:
    par, dev, gains = parameters_table(c), deviations_table(c), gains_table(c)
    verdict = (
        '<p class="ok">Accepted.</p>'
        if c.verdict.accepted
        else f'<p class="bad">Not accepted: {_e(c.verdict.reason)}</p>'
    )
    stats = (
        f"<p>χ² = {c.fit.chi2:.2f} for {c.fit.dof} degrees of freedom (p = {c.fit.p_value:.3g}); "
        f"largest normalized residual {c.fit.max_normalized:.2f}; {len(c.obs)} readings over "
        f"{len(c.obs.steps)} steps; {c.fit.nfev} function evaluations, {c.fit.solves} load flows, "
        f"{c.fit.seconds:.2f} s. Readings within max(1.5 %, k·u): "
        f"{summary['readings_passing_before']} before, {summary['readings_passing_after']} after.</p>"
    )
    notes = "".join(f"<li>{_e(n)}</li>" for n in c.notes)
    beyond = gains[gains["beyond_class"]] if not gains.empty else gains
    return f"""<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">
<title>{_e(title)}</title><style>{_STYLE}</style></head><body>
<h1>{_e(title)}</h1>{verdict}{stats}<ul>{notes}</ul>
<h2>Parameters</h2>{parameter_svg(par)}{_table(par)}
<h2>Identifiability</h2><p>Singular values of the weighted data Jacobian, in units of the prior
(below 1: the data know that combination less well than the prior), weakest first.</p>
{_table(identifiability_table(c), 12)}
<h3>Correlations above 0.9</h3>{_table(correlations_table(c), 30)}
<h2>Deviations</h2>{deviation_svg(dev)}{residual_svg(dev)}
{_table(dev.sort_values("r_norm", ascending=False), 40)}
<h2>Meter gains</h2><p>{len(beyond)} beyond their class.</p>{_table(gains)}
</body></html>
"""
