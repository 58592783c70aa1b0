"""The waveform plot of a fault validation as a self-contained SVG (no plotting dependency).

Per faulted phase: the recorded fault current, the envelope of the fit (DC component plus and
minus the AC amplitude) and, as horizontal lines, the predicted exact peak and the IEC ip.
"""

from __future__ import annotations

import math
from html import escape

import numpy as np

from .compare import Comparison
from .waveform import Analysis

_W, _H, _PAD = 900, 420, 60
_COLOURS = ("#1f5fa8", "#b8452a", "#2e8b57")


def _path(xs: np.ndarray, ys: np.ndarray) -> str:
    pts = " ".join(f"{x:.1f},{y:.1f}" for x, y in zip(xs, ys, strict=True))
    return f"M {pts}" if len(xs) else ""


def waveform_svg(analysis: Analysis, comparison: Comparison, title: str) -> str:
    t = analysis.t
    f = analysis.frequency_hz
    t0 = analysis.inception_s
    lo = max(t0 - 1.0 / f, float(t[0]))
    hi = min(t0 + 8.0 / f, float(t[-1]))
    sel = (t >= lo) & (t <= hi)
    step = max(1, int(sel.sum() // 1500))
    tt = t[sel][::step]
    pk_pred = max(comparison.predicted_peak_by_phase.values(), default=math.nan)
    ip = next(fig.predicted for fig in comparison.figures if fig.key == "ip")
    envelopes = []
    for k, ph in enumerate(analysis.phases):
        if ph.faulted:
            te = tt[tt >= ph.inception_s]
            phi = math.atan2(1.0, ph.r_x)
            amp = math.sqrt(2) * ph.ik_fit_a
            dc = (
                -amp
                * math.sin(math.radians(ph.alpha_deg) - phi)
                * np.exp(-(te - ph.inception_s) / ph.tau_s)
            )
            envelopes.append((k, ph, te, dc, amp))
    reach = [float(np.abs(dc).max()) + amp for _, _, te, dc, amp in envelopes if len(te)]
    ymax = 1.05 * max([float(np.abs(analysis.fault_component[:, sel]).max()), pk_pred, ip, *reach])

    def x(v: np.ndarray | float) -> np.ndarray:
        return _PAD + (np.asarray(v) - lo) / (hi - lo) * (_W - 2 * _PAD)

    def y(v: np.ndarray | float) -> np.ndarray:
        return _H / 2 - np.asarray(v) / ymax * (_H / 2 - _PAD / 2)

    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{_W}" height="{_H}" viewBox="0 0 {_W} {_H}" font-family="sans-serif" font-size="12">',
        f'<rect width="{_W}" height="{_H}" fill="white"/>',
        f'<text x="{_PAD}" y="20" font-size="14">{escape(title)}</text>',
        f'<line x1="{_PAD}" y1="{_H / 2}" x2="{_W - _PAD}" y2="{_H / 2}" stroke="#999"/>',
        f'<line x1="{x(t0):.1f}" y1="{_PAD / 2}" x2="{x(t0):.1f}" y2="{_H - _PAD / 2}" stroke="#999" stroke-dasharray="4 3"/>',
        f'<text x="{x(t0) + 4:.1f}" y="{_H - _PAD / 2 - 4}" fill="#555">inception {t0 * 1e3:.3f} ms</text>',
    ]
    for k, ph, te, dc, amp in envelopes:
        c = _COLOURS[k % 3]
        parts.append(
            f'<path d="{_path(x(tt), y(analysis.fault_component[k][sel][::step]))}" fill="none" stroke="{c}" stroke-width="1.2"/>'
        )
        for sign in (1.0, -1.0):
            parts.append(
                f'<path d="{_path(x(te), y(dc + sign * amp))}" fill="none" stroke="{c}" stroke-width="0.8" stroke-dasharray="5 3"/>'
            )
        parts.append(
            f'<text x="{_W - _PAD + 4}" y="{40 + 16 * k}" fill="{c}">{escape(ph.name)}</text>'
        )
    # both labels sit just above their positive line, one at each end, so close values never overlap
    for val, label, colour, anchor in (
        (pk_pred, "predicted peak (exact RL at the measured angle)", "#000", "start"),
        (ip, "IEC ip at c = U_pre/Un", "#555", "end"),
    ):
        if math.isfinite(val):
            for sign in (1.0, -1.0):
                parts.append(
                    f'<line x1="{_PAD}" y1="{float(y(sign * val)):.1f}" x2="{_W - _PAD}" y2="{float(y(sign * val)):.1f}" stroke="{colour}" stroke-width="0.8"/>'
                )
            tx = _PAD + 4 if anchor == "start" else _W - _PAD - 4
            parts.append(
                f'<text x="{tx}" y="{float(y(val)) - 4:.1f}" fill="{colour}" text-anchor="{anchor}">{escape(label)}: {val:.4g} A</text>'
            )
    parts.append(
        f'<text x="{_PAD}" y="{_H - 8}" fill="#555">time {lo * 1e3:.1f} to {hi * 1e3:.1f} ms; solid: recorded fault current; dashed: fitted envelope; current axis \u00b1{ymax:.4g} A</text>'
    )
    parts.append("</svg>")
    return "\n".join(parts) + "\n"
