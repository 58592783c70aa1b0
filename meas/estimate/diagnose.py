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

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import sparse

from .core import CArray, FArray, IArray, StepModel
from .measurement import measured_variants
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
    """Every hypothesis with its statistic, amplitude and signature correlations.

    q = b̃ᵀΩ̃b̃ (H x H) = b̃ᵀb̃ - U G⁻¹ Uᵀ is formed when first asked for, or by the rows asked
    for (``q_rows``): the per-capture check needs its diagonal and the ratio hypotheses' rows,
    a quarter of it at 32 meters.
    """

    hyps: list[Hypothesis]
    t: FArray  # statistic T
    alpha: FArray  # fitted amplitude (1 = the whole signature)
    qd: FArray  # the diagonal of q: b̃ᵀΩ̃b̃ of each hypothesis
    bb: FArray  # b̃ᵀb̃ per hypothesis
    gain_index: dict[tuple[str, str], int]
    parts: tuple[IArray, IArray, FArray, int] | None = None  # (rows, columns, values, rows in all)
    u: FArray | None = None  # (Jᵀ b̃)ᵀ, (H x n)
    btb: FArray | None = None  # b̃ᵀb̃ (H x H)
    uw: FArray | None = None  # U G⁻¹ (H x n)
    q_whole: FArray | None = None  # q given whole (then the three above are not needed)

    @functools.cached_property
    def q(self) -> FArray:
        """b̃ᵀΩ̃b̃ (H x H)."""
        if self.q_whole is not None:
            return self.q_whole
        assert self.btb is not None and self.uw is not None and self.u is not None
        return self.btb - self.uw @ self.u.T

    def q_rows(self, rows: IArray) -> FArray:
        """Rows of q, without forming the rest."""
        if self.q_whole is not None or "q" in self.__dict__:
            return self.q[rows]
        assert self.btb is not None and self.uw is not None and self.u is not None
        return self.btb[rows] - self.uw[rows] @ self.u.T

    @functools.cached_property
    def b(self) -> sparse.csc_matrix | None:
        """The signatures b̃ (rows x H), for other causes' ρ (built when first asked for)."""
        if self.parts is None:
            return None
        rows, cols, vals, m = self.parts
        return sparse.csc_matrix((vals, (rows, cols)), shape=(m, len(self.hyps)))


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


@dataclass(frozen=True)
class _Layout:
    """The hypotheses of a set of meters: built once per set (every capture of a switch state
    has the same), in the order the statistics are reported."""

    hyps: list[Hypothesis]
    ratio_h: IArray  # each ratio hypothesis ...
    ratio_g: IArray  # ... and the shared index of its gain
    flip0: dict[str, int]  # meter -> its first wiring hypothesis (the six are adjacent)
    wiring: NDArray[np.bool_]


_LAYOUTS: dict[tuple[object, ...], _Layout] = {}


def _layout(steps: Sequence[StepModel], gains: dict[tuple[str, str], int]) -> _Layout:
    present = sorted({mt.name for st in steps for mt in st.meters})
    has_current = {mt.name for st in steps for mt in st.meters if mt.gi >= 0}
    key = (
        tuple(present),
        tuple(m in has_current for m in present),
        tuple(gains.get((m, g), -1) for m in present for g in "vi"),
    )
    hit = _LAYOUTS.get(key)
    if hit is not None:
        return hit
    hyps: list[Hypothesis] = []
    ratio_h, ratio_g = [], []
    flip0: dict[str, int] = {}
    for mid in present:
        for kind, g in (("vt_ratio", "v"), ("ct_ratio", "i")):
            gi = gains.get((mid, g), -1)
            if gi < 0 or (g == "i" and mid not in has_current):
                continue
            ratio_h.append(len(hyps))
            ratio_g.append(gi)
            hyps.append(Hypothesis(mid, kind, ""))
        if mid not in has_current:
            continue
        flip0[mid] = len(hyps)
        hyps.extend(Hypothesis(mid, kind, arg) for kind, arg in _FLIPS)
    out = _Layout(
        hyps,
        np.array(ratio_h, np.int64),
        np.array(ratio_g, np.int64),
        flip0,
        np.array([hy.kind in ("ct_reversed", "phases_swapped") for hy in hyps], bool),
    )
    while len(_LAYOUTS) >= 64:  # oldest first: memory stays flat over a long day
        _LAYOUTS.pop(next(iter(_LAYOUTS)))
    _LAYOUTS[key] = out
    return out


def _tests(fit: Fit, steps: Sequence[StepModel], gains: dict[tuple[str, str], int]) -> Tests:
    """The statistics as dense arrays: a signature lives on one meter's rows, so b̃ᵀb̃ is
    block diagonal by meter and Jᵀb̃ a sum over those rows; nothing here needs the whole
    Jacobian or a sparse matrix (``Tests.b`` is built only for the other causes)."""
    lay = _layout(steps, gains)
    hyps, h_n = lay.hyps, len(lay.hyps)
    r = np.concatenate([ev.r for ev in fit.evals] + [fit.prior_r])
    shared = fit.x[: fit.lay.ns]
    starts = np.cumsum([0] + [len(ev.r) for ev in fit.evals])
    prior0 = int(starts[-1])
    ut = np.zeros((h_n, fit.lay.n))
    btb = np.zeros((h_n, h_n))
    br = np.zeros(h_n)
    rh, rg = lay.ratio_h, lay.ratio_g
    ut[rh, rg] = 1.0 / fit.prior_std[rg]  # a ratio's signature is its gain's prior row
    btb[rh, rh] = 1.0
    br[rh] = r[prior0 + rg]
    rows: list[IArray] = [prior0 + rg]
    cols: list[IArray] = [rh]
    vals: list[FArray] = [np.ones(len(rh))]
    six = np.arange(len(_FLIPS))
    for k, st in enumerate(steps):
        first = np.array([lay.flip0.get(mt.name, -1) if mt.current else -1 for mt in st.meters])
        if not len(first) or not (first >= 0).any():
            continue
        pl = plan_of(st)
        v, i = meter_phasors(fit, steps, k)
        variants = np.stack([i] + [_flip(i, kind, arg) for kind, arg in _FLIPS])
        model = measured_variants(pl, v, variants, shared)
        d = model[1:] - model[0]  # (6, R)
        lo = int(starts[k])
        a = pl.angle
        rr = r[lo : lo + model.shape[1]]
        w = d[:, a] - 2 * math.pi * np.round(d[:, a] / (2 * math.pi))
        # a half turn: take the residual's side
        d[:, a] = np.where(np.abs(w) > 0.9 * math.pi, math.pi * np.where(rr[a] >= 0, 1.0, -1.0), w)
        idx = np.nonzero(first[pl.meter_of_row] >= 0)[0]
        if not len(idx):
            continue
        dv = d[:, idx] / pl.sigma[idx]  # (6, rows of meters with flips)
        owner = first[pl.meter_of_row[idx]]
        grp = np.r_[0, np.nonzero(np.diff(owner))[0] + 1]  # rows are meter by meter
        h0 = owner[grp]  # each group's first flip hypothesis
        hh = h0[None, :] + six[:, None]  # (6, G)
        # Jᵀb̃ of every (flip, meter): one sparse product, a row per pair over its meter's rows
        ev = fit.evals[k]
        nr = len(idx)
        ptr = np.r_[(six[:, None] * nr + grp[None, :]).reshape(-1), len(six) * nr]
        c = sparse.csr_matrix(
            (dv.reshape(-1), np.tile(idx, len(six)), ptr), (ptr.size - 1, len(ev.r))
        )
        ck = _cols(fit, k)[ev.cc]  # the compact columns' places in x
        pairs = hh.reshape(-1)
        ut[np.ix_(pairs, ck)] += c @ ev.jc
        gm = ev.gains[pl.meter_of_row[idx[grp]]]  # each group's meter's two gain columns
        for s in range(2):
            has = gm[:, s] >= 0
            by_gain = np.add.reduceat(dv * ev.gval[idx, s], grp, axis=1)  # (6, G)
            ut[hh[:, has], gm[has, s]] += by_gain[:, has]
        blocks = np.add.reduceat(dv[:, None, :] * dv[None, :, :], grp, axis=2)  # (6, 6, G)
        btb[hh[:, None, :], hh[None, :, :]] += blocks
        br[hh] += np.add.reduceat(dv * rr[idx], grp, axis=1)
        rows.append(np.tile(lo + idx, len(six)))
        cols.append((owner[None, :] + six[:, None]).reshape(-1))
        vals.append(dv.reshape(-1))
    uw = ut @ fit.ginv
    bb = btb.diagonal().copy()
    qd = bb - np.einsum("ij,ij->i", uw, ut)
    dq = np.maximum(qd, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.where(dq > 0, np.abs(br) / np.sqrt(dq), 0.0)
        alpha = np.where(dq > 0, br / dq, 0.0)
    if h_n:
        # the data do not move that way: a sign flip has amplitude one
        t[lay.wiring & ~((alpha > 0.3) & (alpha < 2.0))] = 0.0
    parts = (np.concatenate(rows), np.concatenate(cols), np.concatenate(vals), len(r))
    return Tests(list(hyps), t, alpha, qd, bb, dict(gains), parts, ut, btb, uw)


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
    qh = ts.qd[h]
    row = ts.q_rows(np.array([h]))[0]
    for g, hy in enumerate(ts.hyps):
        if g == h or hy.meter == ts.hyps[h].meter or ts.t[g] <= 0:
            continue
        rho = abs(row[g]) / math.sqrt(max(qh * ts.qd[g], 1e-300))
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
