"""The exact current of a series RL circuit switched onto a sinusoidal source.

With e(t) = sqrt(2) E sin(w t + alpha) switched at t = 0 onto R + jX (zero initial current):
i(t) = sqrt(2) I [sin(w t + alpha - phi) - sin(alpha - phi) e^(-t/tau)], I = E/|Z|,
phi = atan(X/R), tau = X/(w R) (any circuits textbook; e.g. Grainger & Stevenson, Power System
Analysis, 1994, §10.1). The peak at a given angle and the worst case over all angles (the
exact kappa that IEC 60909's formula approximates, CALIBRATION_NOTES §6.9) follow from it.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import minimize_scalar


def rl_current(
    t: NDArray[np.float64], i_rms: float, r_x: float, f_hz: float, alpha_rad: float
) -> NDArray[np.float64]:
    """i(t) for t >= 0 after switching at voltage angle ``alpha_rad`` (0 for t < 0)."""
    w = 2 * math.pi * f_hz
    phi = math.atan2(1.0, r_x)
    tau = 1.0 / (w * r_x) if r_x > 0 else math.inf
    ts = np.clip(t, 0.0, None)
    i = (
        math.sqrt(2)
        * i_rms
        * (np.sin(w * ts + alpha_rad - phi) - math.sin(alpha_rad - phi) * np.exp(-ts / tau))
    )
    return np.where(t >= 0, i, 0.0)


def peak_factor(r_x: float, alpha_rad: float) -> float:
    """max |i| / (sqrt(2) I) after switching at ``alpha_rad``: the exact peak at that angle.

    The first extremum lies within the first cycle; it is located by a bounded search on a
    fine grid refined with Brent's method (to better than 1e-9 relative).
    """
    phi = math.atan2(1.0, r_x)
    w_tau = 1.0 / r_x if r_x > 0 else math.inf
    s = math.sin(alpha_rad - phi)

    def g(x: float) -> float:  # x = w t, the normalised current
        return math.sin(x + alpha_rad - phi) - s * math.exp(-x / w_tau)

    xs = np.linspace(0.0, 2 * math.pi, 721)
    vals = np.abs(np.sin(xs + alpha_rad - phi) - s * np.exp(-xs / w_tau))
    k = int(np.argmax(vals))
    lo, hi = xs[max(k - 1, 0)], xs[min(k + 1, len(xs) - 1)]
    res = minimize_scalar(
        lambda x: -abs(g(x)), bounds=(lo, hi), method="bounded", options={"xatol": 1e-12}
    )
    return max(float(-res.fun), float(vals[k]))


def kappa_exact(r_x: float) -> tuple[float, float]:
    """(worst-case peak factor, the switching angle in rad that gives it) over all angles."""
    grid = np.radians(np.arange(0.0, 180.0, 1.0))
    vals = [peak_factor(r_x, a) for a in grid]
    k = int(np.argmax(vals))
    res = minimize_scalar(
        lambda a: -peak_factor(r_x, a),
        bounds=(grid[k] - math.radians(1), grid[k] + math.radians(1)),
        method="bounded",
        options={"xatol": 1e-10},
    )
    if -res.fun >= vals[k]:
        return float(-res.fun), float(res.x)
    return float(vals[k]), float(grid[k])
