"""Two more named causes of a meter error: a reading offset by a constant, and a frozen meter.

Both are hypotheses with a known signature in the weighted residual space, tested with the same
statistic as ``meas.estimate.diagnose`` (T = |b̃ᵀr̃| / sqrt(b̃ᵀΩ̃b̃)):

- **offset** of one reading (meter, key such as ``i.B`` or ``p.T``) by an amount that holds
  over the session: b̃ is 1/σ on that reading's row in every step where it is measured, so the
  fitted amplitude is the offset in the reading's unit. For one step it is the classic largest
  normalized residual. Angles are left to the wiring hypotheses (a reversed CT is an angle of
  180 degrees on one phase, and more).
- **frozen**: a meter whose readings stop changing. Only across the steps of a joint estimate
  (within one capture the local check ``quality.frozen`` watches the polls). Only a meter whose
  readings in later steps stayed within their noise of those of an earlier step ``k0`` is a
  candidate (the data single it out: a meter that shows a change is not frozen). Its signature
  in each later step k is what the network says should have changed, b̃ = (h_k0 - h_k)/σ on the
  meter's magnitude rows; under the hypothesis the amplitude is one. Its refit leaves the repeated readings out, and its evidence
  is charged the expected χ² of the rows it leaves out (our rule), so it competes fairly with
  hypotheses that must explain those rows.

A single-reading hypothesis explains any one residual, so an offset must beat the ratio and
wiring refits of its own meter by the tie margin to be named: a ratio or wiring cause that fits
about as well stays the cause and the offset is mentioned beside it (``identify.best_trial``).
Ties with other meters follow the estimator's one rule (both named, neither blamed). The
sentences and coverage rows are ``meas.estimate.offset_frozen_words``'.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np
from scipy import sparse

from .core import FArray, StepModel
from .diagnose import CRITICAL, THRESHOLD, Hypothesis, Tests, weighted_residuals
from .measurement import evaluate
from .solver import Fit

if TYPE_CHECKING:
    pass

OFFSET_QUANTITIES = ("v_ln", "v_ll", "i", "p", "q")  # magnitudes and powers, not angles
SAME_SIGMA = 3.0  # readings of two steps this many σ apart or closer did not change (our rule)
# a frozen meter's amplitude is one, or off it where the fault bent the fit; beyond this range
# (or of the other sign) the misfit is not what freezing gives
FROZEN_ALPHA = (0.3, 3.0)
OFFSET_KEEP = 2  # offsets refitted per identification (the largest statistics)
FREED = 1e6  # a repeated reading's σ is this many times wider in the frozen refit: no weight
NAMES = {"offset": "reading offset", "frozen": "frozen meter"}


@dataclass
class More:
    """The offset and frozen hypotheses of one fit, with T, amplitude and correlations."""

    hyps: list[Hypothesis]  # offset: arg = reading key; frozen: arg = "" (see ``runs``)
    t: FArray
    alpha: FArray  # offset: in the reading's unit; frozen: 1 = the whole implied change
    q: FArray  # (H2 x H2) b̃ᵀΩ̃b̃
    cross: FArray  # (H2 x H1) b̃ᵀΩ̃b̃ against the wiring and ratio hypotheses
    bb: FArray
    runs: dict[int, tuple[int, tuple[int, ...]]]  # frozen hypothesis -> (k0, later steps)

    def rho(self, h: int, ts: Tests) -> tuple[FArray, FArray]:
        """|ρ| of hypothesis ``h`` with every other offset/frozen one and every one of ``ts``."""
        d2 = np.maximum(np.diag(self.q), 1e-300)
        d1 = np.maximum(ts.qd, 1e-300) if len(ts.hyps) else np.zeros(0)
        own = np.abs(self.q[h]) / np.sqrt(d2[h] * d2)
        other = np.abs(self.cross[h]) / np.sqrt(d2[h] * d1) if len(d1) else np.zeros(0)
        return own, other


def _frozen_runs(
    steps: Sequence[StepModel], keys: Sequence[Sequence[Sequence[str]]]
) -> list[tuple[str, int, tuple[int, ...]]]:
    """(meter, k0, later steps) where the meter's readings stayed within their noise of step
    k0's: every magnitude reading within ``SAME_SIGMA`` of its larger σ (at least two)."""
    seen: dict[str, list[tuple[int, dict[str, tuple[float, float]]]]] = {}
    for k, (st, ks) in enumerate(zip(steps, keys, strict=True)):
        for mt, kk in zip(st.meters, ks, strict=True):
            zs = {
                x: (float(z), float(s))
                for x, z, s in zip(kk, mt.z, mt.sigma, strict=True)
                if x.split(".")[0] in OFFSET_QUANTITIES
            }
            seen.setdefault(mt.name, []).append((k, zs))
    out = []
    for m, seq in sorted(seen.items()):
        at = 0
        while at < len(seq) - 1:
            k0, z0 = seq[at]
            run = []
            for k, z in seq[at + 1 :]:
                common = [x for x in z if x in z0]
                if len(common) < 2 or any(
                    abs(z[x][0] - z0[x][0]) > SAME_SIGMA * max(z[x][1], z0[x][1]) for x in common
                ):
                    break
                run.append(k)
            if run:
                out.append((m, k0, tuple(run)))
            at += len(run) + 1
    return out


def more_tests(
    fit: Fit, steps: Sequence[StepModel], keys: Sequence[Sequence[Sequence[str]]], ts: Tests
) -> More:
    """Every offset and frozen hypothesis of the fit (memoized on the fit)."""
    memo_key = ("more", tuple(id(st) for st in steps), id(ts))
    hit = fit.memo.get(memo_key)
    if isinstance(hit, More):
        return hit
    out = _more(fit, steps, keys, ts)
    fit.memo[memo_key] = out
    return out


def _more(
    fit: Fit, steps: Sequence[StepModel], keys: Sequence[Sequence[Sequence[str]]], ts: Tests
) -> More:
    r, j = weighted_residuals(fit)
    starts = np.cumsum([0] + [len(ev.r) for ev in fit.evals])
    hyps: list[Hypothesis] = []
    col: dict[tuple[str, str], int] = {}
    rows: list[int] = []
    cols: list[int] = []
    vals: list[float] = []
    for k, (st, ks, ev) in enumerate(zip(steps, keys, fit.evals, strict=True)):
        for mi, (mt, kk) in enumerate(zip(st.meters, ks, strict=True)):
            lo = int(starts[k]) + ev.meter_rows[mi].start
            for n, key in enumerate(kk):
                if key.split(".")[0] not in OFFSET_QUANTITIES:
                    continue
                h = col.setdefault((mt.name, key), len(hyps))
                if h == len(hyps):
                    hyps.append(Hypothesis(mt.name, "offset", key))
                rows.append(lo + n)
                cols.append(h)
                vals.append(1.0 / float(mt.sigma[n]))
    runs: dict[int, tuple[int, tuple[int, ...]]] = {}
    for m, k0, later in _frozen_runs(steps, keys):
        h = len(hyps)
        hyps.append(Hypothesis(m, "frozen", ""))
        runs[h] = (k0, later)
        mi0 = [mt.name for mt in steps[k0].meters].index(m)
        sl0 = fit.evals[k0].meter_rows[mi0]
        h0 = dict(zip(keys[k0][mi0], fit.evals[k0].h[sl0], strict=True))
        for k in later:
            mi = [mt.name for mt in steps[k].meters].index(m)
            sl = fit.evals[k].meter_rows[mi]
            hk = fit.evals[k].h[sl]
            sig = steps[k].meters[mi].sigma
            for n, key in enumerate(keys[k][mi]):
                if key.split(".")[0] in OFFSET_QUANTITIES and key in h0:
                    rows.append(int(starts[k]) + sl.start + n)
                    cols.append(h)
                    vals.append((h0[key] - float(hk[n])) / float(sig[n]))
    h_n = len(hyps)
    b = sparse.csc_matrix(
        (np.array(vals, float), (np.array(rows, np.int64), np.array(cols, np.int64))),
        shape=(len(r), h_n),
    )
    bt = b.T.tocsr()
    u = np.asarray(bt @ j)
    q = np.asarray((bt @ b).todense()) - u @ fit.ginv @ u.T
    if ts.b is not None and ts.u is not None and len(ts.hyps):
        cross = np.asarray((bt @ ts.b).todense()) - u @ fit.ginv @ ts.u.T
    else:
        cross = np.zeros((h_n, len(ts.hyps)))
    br = np.asarray(bt @ r).reshape(-1)
    dq = np.maximum(np.diag(q).copy(), 0.0)
    bb = np.asarray(b.multiply(b).sum(axis=0)).reshape(-1)
    ok = dq > CRITICAL * np.maximum(bb, 1e-300)
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.where(ok, np.abs(br) / np.sqrt(dq), 0.0)
        alpha = np.where(ok, br / dq, 0.0)
    for h in runs:
        if not FROZEN_ALPHA[0] < alpha[h] < FROZEN_ALPHA[1]:
            t[h] = 0.0  # the readings repeat, but the misfit is not what freezing would give
    return More(hyps, t, alpha, q, cross, bb, runs)


def peak(
    fit: Fit,
    steps: Sequence[StepModel],
    keys: Sequence[Sequence[Sequence[str]]],
    ts: Tests,
    exact: bool,
) -> float:
    """The largest statistic of any hypothesis; offsets and frozen meters only when ``exact``
    (the check family's linearized identification names neither)."""
    top = float(np.max(ts.t)) if len(ts.t) else 0.0
    if not exact:
        return top
    mo = more_tests(fit, steps, keys, ts)
    return max(top, float(np.max(mo.t)) if len(mo.t) else 0.0)


# ---------------------------------------------------------------------------- refits


@dataclass(frozen=True)
class Detail:
    """What a sentence needs: the offset ± u, or the largest change a frozen meter missed."""

    key: str
    amount: float
    u: float
    first: int  # frozen: index of the first step that repeated; offset: steps measured
    repeats: int  # frozen: index of the step repeated


@dataclass(frozen=True)
class Candidate:
    meter: str
    kind: str
    arg: str
    steps: list[StepModel]
    penalty: float  # expected χ² of the rows the hypothesis leaves out
    detail: Detail
    later: tuple[int, ...] = ()  # frozen: the steps whose readings repeat


def shift(
    steps: Sequence[StepModel],
    keys: Sequence[Sequence[Sequence[str]]],
    meter: str,
    key: str,
    amount: float,
) -> tuple[list[StepModel], int]:
    """The steps with ``amount`` taken off the reading wherever it is measured."""
    out, n = [], 0
    for st, ks in zip(steps, keys, strict=True):
        ms = list(st.meters)
        for mi, (mt, kk) in enumerate(zip(st.meters, ks, strict=True)):
            if mt.name == meter and key in kk:
                z = mt.z.copy()
                z[list(kk).index(key)] -= amount
                ms[mi] = replace(mt, z=z)
                n += 1
        out.append(replace(st, meters=tuple(ms)))
    return out, n


def offset_update(
    fit: Fit, steps: Sequence[StepModel], keys: Sequence[Sequence[Sequence[str]]], m: str, key: str
) -> tuple[float, float]:
    """(the offset the residuals of ``fit`` still hold on the reading, its std): what a refit
    with the offset taken off leaves; iterated until it is small, since the fit the fault bent
    is far from the fit without it and one linear step overshoots (our rule)."""
    r, j = weighted_residuals(fit)
    b = np.zeros(len(r))
    at = 0
    for st, ks, ev in zip(steps, keys, fit.evals, strict=True):
        for mi, (mt, kk) in enumerate(zip(st.meters, ks, strict=True)):
            if mt.name == m and key in kk:
                n = list(kk).index(key)
                b[at + ev.meter_rows[mi].start + n] = 1.0 / float(mt.sigma[n])
        at += len(ev.r)
    ub = j.T @ b
    q = float(b @ b - ub @ fit.ginv @ ub)
    if q <= CRITICAL * float(b @ b):
        return 0.0, math.nan
    return float(b @ r) / q, 1.0 / math.sqrt(q)


def candidates(
    fit: Fit, steps: Sequence[StepModel], keys: Sequence[Sequence[Sequence[str]]], ts: Tests
) -> list[Candidate]:
    """The offsets and frozen meters worth a refit: statistic above the threshold."""
    mo = more_tests(fit, steps, keys, ts)
    order = sorted(
        (h for h in range(len(mo.hyps)) if mo.t[h] >= THRESHOLD),
        key=lambda h: (-mo.t[h], mo.hyps[h].meter, mo.hyps[h].arg),
    )
    out: list[Candidate] = []
    offsets = 0
    for h in order:
        hy = mo.hyps[h]
        if hy.kind == "offset":
            if offsets >= OFFSET_KEEP:
                continue
            offsets += 1
            a = float(mo.alpha[h])
            st_h, n = shift(steps, keys, hy.meter, hy.arg, a)
            u = 1.0 / math.sqrt(max(float(mo.q[h, h]), 1e-300))
            out.append(
                Candidate(hy.meter, "offset", hy.arg, st_h, 0.0, Detail(hy.arg, a, u, n, -1))
            )
            continue
        out.append(_frozen(steps, hy.meter, *mo.runs[h]))
    return out


def frozen_from_data(
    steps: Sequence[StepModel], keys: Sequence[Sequence[Sequence[str]]]
) -> list[Candidate]:
    """Every meter whose readings did not change, for a base fit that did not converge (no
    statistic to rank them: each is refitted and must explain the readings)."""
    return [_frozen(steps, m, k0, later) for m, k0, later in _frozen_runs(steps, keys)]


def _frozen(steps: Sequence[StepModel], meter: str, k0: int, later: tuple[int, ...]) -> Candidate:
    """The steps with the meter's readings in ``later`` weightless: repeated, they say nothing."""
    rows = 0
    st_f = list(steps)
    for k in later:
        ms = []
        for mt in steps[k].meters:
            if mt.name == meter:
                rows += len(mt.z)
                mt = replace(mt, sigma=mt.sigma * FREED)
            ms.append(mt)
        st_f[k] = replace(steps[k], meters=tuple(ms))
    d = Detail("", math.nan, math.nan, later[0], k0)
    return Candidate(meter, "frozen", "", st_f, float(rows), d, later)


def frozen_change(
    fit: Fit,
    steps: Sequence[StepModel],
    keys: Sequence[Sequence[Sequence[str]]],
    meter: str,
    d: Detail,
    later: Sequence[int],
) -> Detail:
    """The reading the network implies changed most (in σ) at the refit, and by how much."""
    best = (0.0, "", 0.0)
    mi0 = [mt.name for mt in steps[d.repeats].meters].index(meter)
    z0 = dict(zip(keys[d.repeats][mi0], steps[d.repeats].meters[mi0].z, strict=True))
    shared = fit.x[: fit.lay.ns]
    for k in later:
        tc, off = fit.lay.tcs[k], fit.lay.offsets[k]
        ev = evaluate(steps[k], tc, fit.x[off : off + tc.shape[1]], shared)
        mi = [mt.name for mt in steps[k].meters].index(meter)
        sl = ev.meter_rows[mi]
        sig = steps[k].meters[mi].sigma
        for n, key in enumerate(keys[k][mi]):
            if key.split(".")[0] not in OFFSET_QUANTITIES or key not in z0:
                continue
            chg = float(ev.h[sl][n]) - float(z0[key])
            if abs(chg) / float(sig[n]) > best[0]:
                best = (abs(chg) / float(sig[n]), key, chg)
    return replace(d, key=best[1], amount=best[2])


__all__ = ["NAMES", "candidates", "frozen_change", "frozen_from_data", "more_tests", "peak"]
