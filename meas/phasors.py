"""Pure three-phase phasor math: symmetrical components, unbalance, apparent power.

Every function takes numpy arrays whose last axis is the phase (A, B, C), so one call
covers many meters at once. Angles are degrees, positive sequence = B lags A by 120 degrees
(the project convention); the phase-a reference of Fortescue (AIEE Trans. 37, 1918) is used.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

A_OP = np.exp(2j * np.pi / 3)  # the operator a = 1 at 120 degrees
# rows: zero, positive, negative sequence; V012 = F @ Vabc
# (complex128 either way: the dtype is spelt out for the type checker)
_F = np.array([[1, 1, 1], [1, A_OP, A_OP**2], [1, A_OP**2, A_OP]], np.complex128) / 3.0
_F_INV = np.array([[1, 1, 1], [1, A_OP**2, A_OP], [1, A_OP, A_OP**2]], np.complex128)


def phasor(mag: ArrayLike, ang_deg: ArrayLike) -> NDArray[np.complex128]:
    """Complex phasor from magnitude and angle in degrees."""
    return np.asarray(mag, float) * np.exp(1j * np.deg2rad(np.asarray(ang_deg, float)))


def _apply(m: NDArray[np.complex128], x: NDArray[np.complex128]) -> NDArray[np.complex128]:
    """``x @ m.T`` written out element by element.

    A matrix product goes to BLAS, whose kernel (chosen per processor, or by
    OPENBLAS_CORETYPE) changes the last bits of the result; the checks must give the same
    bits on every machine, since an exported dataset's re-check is compared bit for bit.
    """
    a, b, c = x[..., 0, None], x[..., 1, None], x[..., 2, None]
    out: NDArray[np.complex128] = a * m[:, 0] + b * m[:, 1] + c * m[:, 2]
    return out


def sequence(abc: ArrayLike) -> NDArray[np.complex128]:
    """Zero, positive and negative sequence components (last axis abc -> 012)."""
    return _apply(_F, np.asarray(abc, complex))


def from_sequence(s012: ArrayLike) -> NDArray[np.complex128]:
    """Phase quantities from sequence components (inverse of ``sequence``)."""
    return _apply(_F_INV, np.asarray(s012, complex))


def _ratio(num: NDArray[np.float64], den: NDArray[np.float64]) -> NDArray[np.float64]:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.where(num > 0, np.inf, 0.0))


def unbalance_u2(abc: ArrayLike) -> NDArray[np.float64]:
    """Negative-sequence unbalance |X2|/|X1| in % (IEC TR 61000-3-13 "voltage unbalance factor").

    Works for L-N or L-L phasors alike (both give the same ratio); inf when X1 is zero.
    """
    s = sequence(abc)
    return 100.0 * _ratio(np.abs(s[..., 2]), np.abs(s[..., 1]))


def unbalance_u0(abc: ArrayLike) -> NDArray[np.float64]:
    """Zero-sequence unbalance |X0|/|X1| in % (IEC 61000-4-30 style)."""
    s = sequence(abc)
    return 100.0 * _ratio(np.abs(s[..., 0]), np.abs(s[..., 1]))


def unbalance_iec_ll(u_ll: ArrayLike) -> NDArray[np.float64]:
    """u2 in % from three line-to-line magnitudes only (IEC 61000-4-30 magnitude form).

    u2 = sqrt((1 - sqrt(3 - 6b)) / (1 + sqrt(3 - 6b))), b = sum U^4 / (sum U^2)^2. Exact for
    fundamental L-L magnitudes because L-L phasors have no zero sequence. Magnitudes that
    cannot close a triangle give NaN.
    """
    u = np.asarray(u_ll, float)
    u2 = u * u
    with np.errstate(divide="ignore", invalid="ignore"):
        b = np.sum(u2 * u2, axis=-1) / np.sum(u2, axis=-1) ** 2
        r = np.sqrt(np.clip(3.0 - 6.0 * b, 0.0, None))
        out = 100.0 * np.sqrt((1.0 - r) / (1.0 + r))
    return np.where(3.0 - 6.0 * b < -1e-12, np.nan, out)


def lvur(u_ll: ArrayLike) -> NDArray[np.float64]:
    """NEMA MG-1 line voltage unbalance rate in %: max deviation from the mean / mean."""
    u = np.asarray(u_ll, float)
    avg = u.mean(axis=-1)
    dev = np.max(np.abs(u - avg[..., None]), axis=-1)
    return 100.0 * _ratio(dev, np.abs(avg))


def sequence_sign(ang_deg: ArrayLike) -> NDArray[np.int8]:
    """+1 for positive sequence (A-B-C), -1 for negative (A-C-B), 0 when undecidable.

    Uses unit phasors at the given angles: the larger of |X1| and |X2| wins; a tie
    (for instance two equal angles) returns 0.
    """
    s = sequence(np.exp(1j * np.deg2rad(np.asarray(ang_deg, float))))
    p, n = np.abs(s[..., 1]), np.abs(s[..., 2])
    out = np.where(p > n + 1e-9, 1, np.where(n > p + 1e-9, -1, 0))
    return np.where(np.isnan(p) | np.isnan(n), 0, out).astype(np.int8)


def wrap_deg(x: ArrayLike) -> NDArray[np.float64]:
    """Angle wrapped into (-180, 180]."""
    y = np.mod(np.asarray(x, float) + 180.0, 360.0) - 180.0
    return np.where(y == -180.0, 180.0, y)


def pf_angle_deg(p: ArrayLike, q: ArrayLike) -> NDArray[np.float64]:
    """Angle of the complex power P + jQ in degrees (the V-to-I displacement, lagging positive)."""
    return np.rad2deg(np.arctan2(np.asarray(q, float), np.asarray(p, float)))


def circular_spread_deg(ang_deg: ArrayLike) -> NDArray[np.float64]:
    """Largest pairwise angular distance among the last-axis angles, in degrees (0..180)."""
    a = np.asarray(ang_deg, float)
    if a.shape[-1] == 3:  # the common case, three phases: three pairs
        d = a[..., [0, 1, 2]] - a[..., [1, 2, 0]]
        return np.max(np.abs(np.mod(d + 180.0, 360.0) - 180.0), axis=-1)
    d = np.abs(np.mod(a[..., :, None] - a[..., None, :] + 180.0, 360.0) - 180.0)
    return np.max(d, axis=(-1, -2))


def apparent_arithmetic(s_phase: ArrayLike) -> NDArray[np.float64]:
    """IEEE 1459 arithmetic apparent power: sum of the phase apparent powers (VA)."""
    return np.sum(np.abs(np.asarray(s_phase)), axis=-1)


def apparent_vector(p_phase: ArrayLike, q_phase: ArrayLike) -> NDArray[np.float64]:
    """IEEE 1459 vector apparent power: |sum of complex phase powers| = sqrt(P^2 + Q^2)."""
    return np.abs(np.sum(np.asarray(p_phase, float) + 1j * np.asarray(q_phase, float), axis=-1))


def apparent_effective(
    v_ln: ArrayLike, i_ph: ArrayLike, i_n: ArrayLike | None = None, v_ll: ArrayLike | None = None
) -> NDArray[np.float64]:
    """IEEE 1459 effective apparent power Se = 3 Ve Ie for a four-wire system.

    Ie = sqrt((Ia^2 + Ib^2 + Ic^2 + In^2) / 3); Ve = sqrt((3 (Va^2 + Vb^2 + Vc^2) +
    (Vab^2 + Vbc^2 + Vca^2)) / 18). Without In or L-L values, In = 0 and Vll are left out
    (Ve = sqrt(sum Vln^2 / 3)), which is the three-wire-like simplification.
    """
    v = np.asarray(v_ln, float)
    i = np.asarray(i_ph, float)
    i_n2 = 0.0 if i_n is None else np.asarray(i_n, float) ** 2
    ie = np.sqrt((np.sum(i * i, axis=-1) + i_n2) / 3.0)
    if v_ll is None:
        ve = np.sqrt(np.sum(v * v, axis=-1) / 3.0)
    else:
        vl = np.asarray(v_ll, float)
        ve = np.sqrt((3.0 * np.sum(v * v, axis=-1) + np.sum(vl * vl, axis=-1)) / 18.0)
    return 3.0 * ve * ie


def phase_powers(v: ArrayLike, i: ArrayLike) -> NDArray[np.complex128]:
    """Complex phase powers S = V conj(I) from phasors."""
    return np.asarray(v, complex) * np.conj(np.asarray(i, complex))
