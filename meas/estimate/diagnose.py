"""Bad data after the fit: which meter, which cause, and what this bench could ever detect.

Every suspicion is a *hypothesis* with a known signature in the weighted residual space:
- a VT or CT ratio set wrong is a meter's voltage or current gain far from 1, so its signature
  is the gain's prior row (its normalized residual is the classic one);
- a reversed CT on one phase or a swapped pair of current inputs changes the meter's readings
  by a known vector, computed from the estimated phasors.
With Ω̃ = I - J G⁻¹ Jᵀ (the weighted residual covariance), the test statistic of a signature b̃
is T = |b̃ᵀ r̃| / sqrt(b̃ᵀ Ω̃ b̃): the largest normalized residual generalised to a structured error
(Abur & Expósito 2004, ch. 5; for a single reading it is exactly r_N). Two hypotheses whose
signatures have |ρ| = |b̃₁ᵀΩ̃b̃₂| / sqrt(b̃₁ᵀΩ̃b̃₁ · b̃₂ᵀΩ̃b̃₂) near 1 cannot be told apart by any
data from this configuration: the estimator says so and names both, sorted by id, never picking
one by profile order. A hypothesis with b̃ᵀΩ̃b̃ near 0 is undetectable (a critical reading).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import sparse

from .core import CArray, FArray, IArray, StepModel
from .measurement import measured
from .plan import plan_of
from .solver import Fit, meter_phasors, omega_diag
from .solver import cols_of as _cols

THRESHOLD = 4.0  # normalized statistic above which a hypothesis is bad data (see docs/estimator.md)
POWER_Z = 0.84  # one-sided z for 80 % power: the smallest detectable error (Baarda's MDB idea)
TIE_RHO = 0.95  # |correlation| at or above which two hypotheses cannot be told apart
TIE_T = 0.9  # a rival within this share of the best statistic is as likely
CRITICAL = 1e-3  # b̃ᵀΩ̃b̃ / b̃ᵀb̃ below this: the error cannot show in the residuals

KINDS = ("vt_ratio", "ct_ratio", "ct_reversed", "phases_swapped")
_PAIRS = ("AB", "BC", "CA")


@dataclass(frozen=True)
class Hypothesis:
    meter: str
    kind: str
    arg: str  # phase, pair or ""


@dataclass
class Tests:
    """Every hypothesis with its statistic, amplitude and signature correlations."""

    hyps: list[Hypothesis]
    t: FArray  # statistic T
    alpha: FArray  # fitted amplitude (1 = the whole signature)
    q: FArray  # b̃ᵀΩ̃b̃ (H x H)
    bb: FArray  # b̃ᵀb̃ per hypothesis
    gain_index: dict[tuple[str, str], int]
    b: sparse.csc_matrix | None = None  # the signatures b̃ (rows x H), for other causes' ρ
    u: FArray | None = None  # (Jᵀ b̃)ᵀ, (H x n)


def weighted_residuals(fit: Fit) -> tuple[FArray, FArray]:
    """All weighted residuals (steps, then priors) and the weighted Jacobian with those rows."""
    r = np.concatenate([ev.r for ev in fit.evals] + [fit.prior_r])
    m = len(r)
    j = np.zeros((m, fit.lay.n))
    at = 0
    for k, ev in enumerate(fit.evals):
        rows = ev.j.shape[0]
        j[at : at + rows, _cols(fit, k)] = ev.j
        at += rows
    ns = fit.lay.ns
    j[at + np.arange(ns), np.arange(ns)] = 1.0 / fit.prior_std
    return r, j


_FLIPS: tuple[tuple[str, str], ...] = tuple(
    [("ct_reversed", a) for a in "ABC"] + [("phases_swapped", a) for a in _PAIRS]
)


def _flip(i: CArray, kind: str, arg: str) -> CArray:
    """Every meter's currents (M, p) as the wiring fault would show them."""
    out = i.copy()
    if kind == "ct_reversed":
        out[:, "ABC".index(arg)] *= -1
    else:
        a, b = ("ABC".index(c) for c in arg)
        out[:, a], out[:, b] = i[:, b], i[:, a]
    return out


def tests(
    fit: Fit,
    steps: Sequence[StepModel],
    keys: Sequence[Sequence[Sequence[str]]],
    gains: dict[tuple[str, str], int],
) -> Tests:
    """Build every hypothesis for every meter present, with T, amplitude and correlations.

    Memoized on the fit (the identification asks for the same tests more than once).
    """
    memo_key = ("tests", tuple(id(st) for st in steps), id(gains))
    hit = fit.memo.get(memo_key)
    if isinstance(hit, Tests):
        return hit
    out = _tests(fit, steps, gains)
    fit.memo[memo_key] = out
    return out


def _tests(fit: Fit, steps: Sequence[StepModel], gains: dict[tuple[str, str], int]) -> Tests:
    r, j = weighted_residuals(fit)
    m = len(r)
    shared = fit.x[: fit.lay.ns]
    starts = np.cumsum([0] + [len(ev.r) for ev in fit.evals])
    prior0 = int(starts[-1])
    present = sorted({mt.name for st in steps for mt in st.meters})
    has_current = {mt.name for st in steps for mt in st.meters if mt.gi >= 0}
    hyps: list[Hypothesis] = []
    col_of: dict[tuple[str, str, str], int] = {}
    rows: list[IArray] = []
    cols: list[IArray] = []
    vals: list[FArray] = []
    for mid in present:
        for kind, g in (("vt_ratio", "v"), ("ct_ratio", "i")):
            gi = gains.get((mid, g), -1)
            if gi < 0 or (g == "i" and mid not in has_current):
                continue
            rows.append(np.array([prior0 + gi]))
            cols.append(np.array([len(hyps)]))
            vals.append(np.ones(1))
            hyps.append(Hypothesis(mid, kind, ""))
        if mid not in has_current:
            continue
        for kind, arg in _FLIPS:
            col_of[(mid, kind, arg)] = len(hyps)
            hyps.append(Hypothesis(mid, kind, arg))
    for k, st in enumerate(steps):
        pl = plan_of(st)
        with_current = [
            mi
            for mi, mt in enumerate(st.meters)
            if mt.current and (mt.name, "ct_reversed", "A") in col_of
        ]
        if not with_current:
            continue
        v, i = meter_phasors(fit, steps, k)
        base = measured(pl, v, i, shared)
        keep = np.isin(pl.meter_of_row, with_current)
        lo = int(starts[k])
        rr = r[lo : lo + len(base)]
        first = np.array([col_of.get((mt.name, *_FLIPS[0]), -1) for mt in st.meters])
        for fk, (kind, arg) in enumerate(_FLIPS):
            d = measured(pl, v, _flip(i, kind, arg), shared) - base
            a = pl.angle
            w = d[a] - 2 * math.pi * np.round(d[a] / (2 * math.pi))
            half = np.abs(w) > 0.9 * math.pi  # a half turn: take the residual's side
            w[half] = math.pi * np.where(rr[a][half] >= 0, 1.0, -1.0)
            d[a] = w
            idx = np.nonzero(keep)[0]
            hcol = first[pl.meter_of_row[idx]] + fk  # a meter's six flips are adjacent
            rows.append(lo + idx)
            cols.append(hcol)
            vals.append(d[idx] / pl.sigma[idx])
    h_n = len(hyps)
    bm = sparse.csc_matrix(
        (
            np.concatenate(vals) if vals else np.zeros(0),
            (
                np.concatenate(rows) if rows else np.zeros(0, np.int64),
                np.concatenate(cols) if cols else np.zeros(0, np.int64),
            ),
        ),
        shape=(m, h_n),
    )
    bt = bm.T.tocsr()
    ut = np.asarray(bt @ j)  # (H, n) = (Jᵀ B)ᵀ
    q = np.asarray((bt @ bm).todense()) - ut @ fit.ginv @ ut.T
    br = np.asarray(bt @ r).reshape(-1)
    dq = np.maximum(np.diag(q).copy(), 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.where(dq > 0, np.abs(br) / np.sqrt(dq), 0.0)
        alpha = np.where(dq > 0, br / dq, 0.0)
    wiring = np.array([hy.kind in ("ct_reversed", "phases_swapped") for hy in hyps], bool)
    if h_n:
        # the data do not move that way: a sign flip has amplitude one
        t[wiring & ~((alpha > 0.3) & (alpha < 2.0))] = 0.0
    bb = np.asarray(bm.multiply(bm).sum(axis=0)).reshape(-1)
    return Tests(hyps, t, alpha, q, bb, dict(gains), bm, ut)


def meters_tied(
    close: NDArray[np.bool_], row_meter: IArray, col_meter: IArray, meters: Sequence[str]
) -> list[list[str]]:
    """Per row hypothesis, the meters (sorted, its own left out) owning a column hypothesis it
    is ``close`` to (cannot be told apart from); ``*_meter`` index into sorted ``meters``."""
    hit = np.zeros((len(row_meter), len(meters)), bool)
    if close.shape[1]:
        order = np.argsort(col_meter, kind="stable")  # columns grouped by meter, one OR each
        owners, starts = np.unique(col_meter[order], return_index=True)
        hit[:, owners] = np.logical_or.reduceat(close[:, order], starts, axis=1)
    hit[np.arange(len(row_meter)), row_meter] = False  # another meter's hypotheses only
    out: list[list[str]] = [[] for _ in range(len(row_meter))]
    for h, k in zip(*np.nonzero(hit), strict=True):
        out[h].append(meters[k])  # row-major: each row's meters in sorted order
    return out


def rivals(ts: Tests, h: int) -> list[int]:
    """Hypotheses that explain the data as well as ``h`` (other meters only)."""
    out = []
    qh = ts.q[h, h]
    for g, hy in enumerate(ts.hyps):
        if g == h or hy.meter == ts.hyps[h].meter or ts.t[g] <= 0:
            continue
        rho = abs(ts.q[h, g]) / math.sqrt(max(qh * ts.q[g, g], 1e-300))
        if rho >= TIE_RHO or ts.t[g] >= TIE_T * ts.t[h]:
            out.append(g)
    return out


def gain_from_data(fit: Fit, index: int, omega: float) -> tuple[float, float]:
    """The gain the data alone imply (the estimate with its prior row removed) and its std."""
    g = float(fit.x[index])
    if omega <= CRITICAL:
        return math.nan, math.nan
    var = float(fit.ginv[index, index])
    return 1.0 + (g - 1.0) / omega, math.sqrt(var / omega)


def normalized_residuals(fit: Fit) -> list[FArray]:
    """|r̃_i| / sqrt(Ω̃_ii) of every row of every step (NaN for a critical row, Ω̃_ii ≈ 0)."""
    om, _ = omega_diag(fit)
    out = []
    for ev, o in zip(fit.evals, om, strict=True):
        with np.errstate(invalid="ignore", divide="ignore"):
            out.append(np.where(o > CRITICAL, np.abs(ev.r) / np.sqrt(np.maximum(o, 0.0)), np.nan))
    return out
