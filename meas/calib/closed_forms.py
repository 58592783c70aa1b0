"""Closed-form local estimators: starting values and sanity checks for the full fit.

Magnitudes and powers only, per phase, balanced: benchwalk's meters share no angle reference,
so phasor (PMU) estimators do not apply. Inputs are line-to-line voltages and three-phase
totals as meters show them.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

SQRT3 = math.sqrt(3.0)


@dataclass(frozen=True)
class Thevenin:
    r_ohm: float
    x_ohm: float
    e_ll: float  # EMF, line-to-line


def source_thevenin(
    v_ll: Sequence[float], p_w: Sequence[float], q_var: Sequence[float], i_a: Sequence[float]
) -> Thevenin:
    """Source R, X and |E| from one meter at the source over load steps (E constant).

    Per phase |E|² = V² + 2(R·P + X·Q) + |Z|²·I², linear in (|E|², R, X, |Z|²): least squares
    over at least four steps with different P/Q mixes (network-impedance measurement by load
    switching, common practice).
    """
    v = np.asarray(v_ll, float) / SQRT3
    p = np.asarray(p_w, float) / 3.0
    q = np.asarray(q_var, float) / 3.0
    i = np.asarray(i_a, float)
    if len(v) < 4:
        raise ValueError("the source Thevenin needs at least four load steps")
    a = np.column_stack([np.ones_like(v), -2.0 * p, -2.0 * q, -(i**2)])
    scale = np.max(np.abs(a), axis=0)
    sol, *_ = np.linalg.lstsq(a / scale, v**2, rcond=None)
    e2, r, x, _ = sol / scale
    return Thevenin(float(r), float(x), float(SQRT3 * math.sqrt(e2)))


@dataclass(frozen=True)
class SeriesBranch:
    r_ohm: float
    x_ohm: float
    loss_w: float  # three-phase series loss


def line_from_both_ends(
    v_from_ll: float,
    p_from_w: float,
    q_from_var: float,
    v_to_ll: float,
    p_to_w: float,
    q_to_var: float,
    b_us: float,
) -> SeriesBranch:
    """A pi-section line's series R and X from |V|, P and Q at both ends, with B known.

    Powers are into the line at each end. Per phase: S_s = S_from + j(B/2)V_f² is the power
    into the series branch, |I_s|² = |S_s|²/V_f², R = Re(S_from + S_to)/|I_s|²,
    X = (Im(S_from + S_to) + (B/2)(V_f² + V_t²))/|I_s|².
    """
    vf2, vt2 = (v_from_ll / SQRT3) ** 2, (v_to_ll / SQRT3) ** 2
    s_from = complex(p_from_w, q_from_var) / 3.0
    s_to = complex(p_to_w, q_to_var) / 3.0
    half_b = b_us * 1e-6 / 2.0
    s_series = s_from + 1j * half_b * vf2
    i2 = abs(s_series) ** 2 / vf2
    total = s_from + s_to
    return SeriesBranch(total.real / i2, (total.imag + half_b * (vf2 + vt2)) / i2, 3.0 * total.real)


@dataclass(frozen=True)
class TransformerImpedance:
    r_ohm: float  # referred to the side whose current is given
    x_ohm: float
    ur_pct: float
    uk_pct: float


def transformer_from_two_sides(
    p_1_w: float,
    q_1_var: float,
    p_2_w: float,
    q_2_var: float,
    i_a: float,
    v_rated_ll: float,
    s_rated_va: float,
    p0_w: float = 0.0,
    q0_var: float = 0.0,
) -> TransformerImpedance:
    """Series impedance and uk/ur from both sides' P and Q (short-circuit-test relations).

    Powers into the transformer at each side; ``i_a`` and ``v_rated_ll`` belong to the same side
    (the one the impedance is referred to). The no-load P0, Q0 (an open-circuit step) are
    subtracted first. R = P_loss/(3I²), X = Q_loss/(3I²), ur = 100·R/Z_b, uk = 100·|Z|/Z_b
    with Z_b = V²/S (IEC 60076-1 relations, from memory).
    """
    p_loss = p_1_w + p_2_w - p0_w
    q_loss = q_1_var + q_2_var - q0_var
    r = p_loss / (3.0 * i_a**2)
    x = q_loss / (3.0 * i_a**2)
    z_b = v_rated_ll**2 / s_rated_va
    return TransformerImpedance(r, x, 100.0 * r / z_b, 100.0 * math.hypot(r, x) / z_b)
