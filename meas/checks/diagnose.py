"""Name the likely fault from the pattern of the readings.

Two sources of evidence:
- a meter's own per-phase complex powers S = P + jQ: on a healthy three-phase circuit their
  angles agree; a reversed CT turns one by 180 degrees, two swapped current inputs turn the
  pair by +-120 degrees (REFERENCES.md 2, wiring-fault signatures), a voltage/current phase
  mismatch turns all three alike (seen on loads, which must draw power);
- redundancy in the network (bus balances, branches metered at both ends): each candidate
  fault of each meter is fitted by weighted least squares and the one that removes most of
  the weighted squared residual wins; its square root is a normalized residual in the sense
  of Abur & Exposito (2004), ch. 5, largest-normalized-residual bad-data identification,
  applied to fault hypotheses instead of single measurements (our adaptation).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ..phasors import circular_spread_deg

_Floats = NDArray[np.float64]
_Complex = NDArray[np.complex128]

PH = "ABC"
# per-phase angle corrections that undo each wiring fault (degrees); "none" first
_HYP = [
    ("", (0.0, 0.0, 0.0)),
    ("ct_reversed:A", (180.0, 0.0, 0.0)),
    ("ct_reversed:B", (0.0, 180.0, 0.0)),
    ("ct_reversed:C", (0.0, 0.0, 180.0)),
    # inputs X and Y swapped, Y the phase after X: S_X turned by +120, S_Y by -120. The three
    # pairs differ only by a common 120-degree turn, so the pair is told apart by which one
    # brings the common power angle to where the branch's flow direction puts it.
    ("phases_swapped:A-B", (-120.0, 120.0, 0.0)),
    ("phases_swapped:B-C", (0.0, -120.0, 120.0)),
    ("phases_swapped:C-A", (120.0, 0.0, -120.0)),
]
HYP_CAUSES = tuple(h for h, _ in _HYP)
_OFF = np.array([o for _, o in _HYP])
_SWAPS = (4, 5, 6)
# whole-meter turns that undo an all-phase error on a load
_ALL = [
    ("", 0.0),
    ("ct_reversed:ABC", 180.0),
    ("vi_mismatch:+120", -120.0),
    ("vi_mismatch:-120", 120.0),
]

# expected power angle of a branch: 0 = P > 0 (towards loads), 1 = P < 0, 2 = either sign of P,
# 3 = reactive (a shunt: the angle sits near +-90 degrees)
FORWARD, BACKWARD, EITHER, REACTIVE = 0, 1, 2, 3


def _wrap(a: float) -> float:
    return (a + 180.0) % 360.0 - 180.0


def _misfit(angle: float, axis: int) -> float:
    """Degrees between a power angle and where the branch's flow direction expects it."""
    if axis == FORWARD:
        return abs(_wrap(angle))
    if axis == BACKWARD:
        return abs(_wrap(angle - 180.0))
    if axis == REACTIVE:
        return min(abs(_wrap(angle - 90.0)), abs(_wrap(angle + 90.0)))
    return min(abs(_wrap(angle)), abs(_wrap(angle - 180.0)))


@dataclass(frozen=True)
class Signature:
    cause: str  # "" = no wiring fault seen
    spread_deg: float  # spread of the per-phase power angles as measured
    corrected_deg: float  # spread after undoing the named fault
    angle_deg: float  # circular mean of the corrected angles


HEALTHY = Signature(
    "", math.nan, math.nan, math.nan
)  # signature_rows: no wiring fault (spread given apart)


def signature_rows(
    ang: _Floats,
    axis: NDArray[np.int_],
    is_load: NDArray[np.bool_],
    trip_deg: float,
    coherent_deg: float,
    want: NDArray[np.bool_],
) -> tuple[list[Signature | None], list[float]]:
    """Signatures from (m, 3) per-phase power angles (degrees) of the rows where ``want``
    (None elsewhere; ``HEALTHY`` for no fault seen), and every row's spread as measured (the
    phase.pf_spread figure).

    Only a row whose measured spread reaches ``trip_deg`` can name a per-phase fault, so the
    seven hypotheses are tried on those rows alone; the others need only the uncorrected
    spread and, on loads, the mean angle. Every figure is the same IEEE operation on the same
    memory layout as the all-hypotheses computation, so the results are identical to it.
    """
    ang0 = ang + 0.0  # hypothesis "none" (_OFF row 0), as in the stacked form
    spread0 = circular_spread_deg(ang0).tolist()
    out: list[Signature | None] = [None] * len(ang)
    want_l = np.asarray(want).tolist()
    axis_l, load_l = np.asarray(axis).tolist(), np.asarray(is_load).tolist()
    faulty = [k for k in range(len(ang)) if want_l[k] and spread0[k] >= trip_deg]
    loads = [k for k in range(len(ang)) if want_l[k] and load_l[k] and spread0[k] <= coherent_deg]
    mean0: dict[int, float] = {}
    if loads:
        sub = ang0[loads]
        mean0 = dict(
            zip(
                loads,
                np.rad2deg(np.angle(np.exp(1j * np.deg2rad(sub)).sum(axis=1))).tolist(),
                strict=True,
            )
        )
    full: dict[int, tuple[list[float], list[float]]] = {}
    if faulty:
        corr = ang[faulty][:, None, :] + _OFF[None, :, :]  # (f, h, 3)
        spread = circular_spread_deg(corr).tolist()  # (f, h)
        means = np.rad2deg(np.angle(np.exp(1j * np.deg2rad(corr)).sum(axis=2))).tolist()  # (f, h)
        full = {k: (spread[t], means[t]) for t, k in enumerate(faulty)}
    for k in range(len(ang)):
        if not want_l[k]:
            continue
        hit = full.get(k)
        if (
            hit is None
        ):  # below the trip spread: no per-phase fault, perhaps a whole-meter one on a load
            mean = mean0.get(k)
            if mean is None or _misfit(mean, FORWARD) <= 100.0:
                out[k] = HEALTHY
                continue
            sp = [spread0[k]]
            best, cause = 0, ""
        else:
            sp, mk = hit
            best = min(
                range(5), key=sp.__getitem__
            )  # first smallest, as np.argmin; the three swaps share one spread
            if best != 0 and sp[0] >= trip_deg and sp[best] <= coherent_deg:
                if best == 4:
                    best = min(_SWAPS, key=lambda h: (_misfit(mk[h], axis_l[k]), h))
                cause = HYP_CAUSES[best]
            else:
                best, cause = 0, ""
            mean = mk[best]
            if not (
                load_l[k]
                and not cause.startswith("phases")
                and sp[best] <= coherent_deg
                and _misfit(mean, FORWARD) > 100.0
            ):
                out[k] = Signature(cause, float(sp[0]), float(sp[best]), mean)
                continue
        _, tag, off = min((_misfit(mean + off, FORWARD), tag, off) for tag, off in _ALL)
        if tag:
            cause = tag if not cause else f"{cause},{tag}"
            mean = _wrap(mean + off)
        out[k] = HEALTHY if not cause else Signature(cause, float(sp[0]), float(sp[best]), mean)
    return out, spread0


@dataclass(frozen=True)
class Equation:
    """A set of meters whose per-phase complex powers should sum to zero."""

    name: str  # bus or branch id
    members: tuple[int, ...]
    sig_p: _Floats  # (3,) standard uncertainty of the P residual per phase
    sig_q: _Floats


@dataclass(frozen=True)
class Suspect:
    meter: int
    cause: str  # "scale", "ct_reversed:X", "phases_swapped:X-Y"
    k: float  # fitted scale factor (reading / true) for "scale", else nan
    lnr: float  # sqrt of the removed weighted squared residual
    rest: float  # weighted squared residual left after the correction, per equation
    others: tuple[int, ...]  # meters that explain the data almost as well


_ROT = {
    "phases_swapped:A-B": (0, 1),
    "phases_swapped:B-C": (1, 2),
    "phases_swapped:C-A": (2, 0),
}


def _deltas(s: _Complex) -> list[tuple[str, _Complex]]:
    """Change of the meter's reading that each non-scale fault would have made."""
    out: list[tuple[str, _Complex]] = []
    for x in range(3):
        d = np.zeros(3, complex)
        d[x] = 2.0 * s[x]
        out.append((f"ct_reversed:{PH[x]}", d))
    turn = np.exp(2j * np.pi / 3)
    for tag, (x, y) in _ROT.items():
        d = np.zeros(3, complex)
        d[x] = s[x] - s[x] / turn  # reading S_X' = S_X at +120
        d[y] = s[y] - s[y] * turn  # reading S_Y' = S_Y at -120
        out.append((tag, d))
    return out


def _wss(r: _Complex, sp: _Floats, sq: _Floats) -> float:
    return float(np.sum((r.real / sp) ** 2 + (r.imag / sq) ** 2))


def _scores(
    m: int, s: _Complex, idx: list[int], res: list[_Complex], eqs: list[Equation]
) -> list[tuple[float, int, str, float, float]]:
    """Every fault hypothesis for meter ``m`` (a scale, or a per-phase fault): the weighted
    squared residual it removes from the equations ``idx`` it sits in, and what it leaves."""
    out: list[tuple[float, int, str, float, float]] = []
    j0 = sum(_wss(res[j], eqs[j].sig_p, eqs[j].sig_q) for j in idx)
    num = sum(
        float(
            np.sum(
                s.real * res[j].real / eqs[j].sig_p ** 2 + s.imag * res[j].imag / eqs[j].sig_q ** 2
            )
        )
        for j in idx
    )
    den = sum(
        float(np.sum(s.real**2 / eqs[j].sig_p ** 2 + s.imag**2 / eqs[j].sig_q ** 2)) for j in idx
    )
    if den > 0:
        c = num / den
        jh = sum(_wss(res[j] - c * s, eqs[j].sig_p, eqs[j].sig_q) for j in idx)
        k = 1.0 / (1.0 - c) if c < 1.0 else math.inf
        out.append((j0 - jh, m, "scale", k, jh / len(idx)))
    for tag, d in _deltas(s):
        jh = sum(_wss(res[j] - d, eqs[j].sig_p, eqs[j].sig_q) for j in idx)
        out.append((j0 - jh, m, tag, math.nan, jh / len(idx)))
    return out


def suspects(eqs: list[Equation], s_ph: _Complex, ambiguity: float = 0.8) -> Suspect | None:
    """The single-meter fault that best explains the residuals of the equations (or None)."""
    if not eqs:
        return None
    res = [sum((s_ph[m] for m in e.members), np.zeros(3, complex)) for e in eqs]
    members = sorted({m for e in eqs for m in e.members})
    scored: list[tuple[float, int, str, float, float]] = []
    for m in members:
        idx = [j for j, e in enumerate(eqs) if m in e.members]
        s = s_ph[m]
        if np.isnan(s).any():
            continue
        scored.extend(_scores(m, s, idx, res, eqs))
    if not scored:
        return None
    scored.sort(key=lambda t: (-t[0], t[1], t[2]))
    gain, m, tag, k, rest = scored[0]
    if gain <= 0:
        return None
    others = tuple(sorted({t[1] for t in scored[1:] if t[1] != m and t[0] >= ambiguity * gain}))
    return Suspect(m, tag, k, math.sqrt(gain), rest, others)
