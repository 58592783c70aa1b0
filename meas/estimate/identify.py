"""Naming the fault: refit under each hypothesis and keep the one that explains the readings.

The linearized statistics of ``meas.estimate.diagnose`` say *that* something is wrong and which
meters to suspect, but a reversed CT or a swapped pair is far from linear: the fit bends the
state and the gains towards it, and the residual pattern then resembles a ratio error. So the
suspects are tested exactly: for each, the fit is repeated with the hypothesis built into the
model (the meter's current inputs permuted or reversed, or its gain freed from the class prior),
and the drop of the misfit J is the evidence (a likelihood-ratio test: ΔJ = T²).
Suspects are the meters with the largest statistics when the fit converged, or otherwise the
meters whose removal lowers J most. A rival on another meter whose refit explains the readings
as well (within ``MARGIN``) is a tie: both are named and neither is blamed.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

# chi2.ppf(p, k) = chdtri(k, 1 - p): scipy.stats costs a second to import
from scipy.special import chdtri

from .build import Problem
from .core import FArray, Prior, StepModel
from .diagnose import THRESHOLD, tests
from .offset_frozen import (
    Detail,
    candidates,
    frozen_change,
    frozen_from_data,
    offset_update,
    shift,
)
from .solver import Fit, solve


def dof(fit: Fit) -> int:
    """Degrees of freedom: rows of readings and Kirchhoff minus state unknowns (priors cancel)."""
    return int(sum(len(ev.r) for ev in fit.evals) - (fit.lay.n - fit.lay.ns))


SUSPECTS = 2
WIRING_KEEP = 6  # wiring hypotheses refitted per suspect (all six: the linear ranking misleads)
RIVAL_SHARE = 0.3  # suspects: meters whose statistic reaches this share of the largest
TRIAL_ITER = 15  # a hypothesis the fit cannot settle in this many iterations does not fit
RELEASED = 1e3  # a freed gain's prior is this many times wider
_PAIRS = ("AB", "BC", "CA")


def margin(j: float) -> float:
    """Two refits this close in J explain the readings equally well (our rule)."""
    return max(1.0, 0.02 * j)


@dataclass
class Trial:
    meter: str
    kind: str  # "vt_ratio", "ct_ratio", "ct_reversed", "phases_swapped", "offset", "frozen"
    arg: str
    fit: Fit
    steps: list[StepModel]
    priors: list[Prior]
    penalty: float = 0.0  # expected χ² of the rows the hypothesis leaves out (a frozen meter)
    detail: object = None  # what the sentence needs (``offset_frozen.Detail``)

    @property
    def score(self) -> float:
        """The misfit under the hypothesis, charged for the rows it leaves unexplained."""
        return self.fit.cost + self.penalty


def _wiring(kind: str, arg: str) -> FArray:
    w = np.eye(3)
    if kind == "ct_reversed":
        w["ABC".index(arg), "ABC".index(arg)] = -1.0
    else:
        a, b = ("ABC".index(c) for c in arg)
        w[[a, b]] = w[[b, a]]
    return w


def _hypotheses(meter: str, has_current: bool) -> list[tuple[str, str]]:
    out = [("vt_ratio", "")]
    if has_current:
        out.append(("ct_ratio", ""))
        out += [("ct_reversed", p) for p in "ABC"]
        out += [("phases_swapped", p) for p in _PAIRS]
    return out


def _apply(
    steps: Sequence[StepModel],
    priors: Sequence[Prior],
    pr: Problem,
    meter: str,
    kind: str,
    arg: str,
) -> tuple[list[StepModel], list[Prior]]:
    pri = list(priors)
    if kind in ("vt_ratio", "ct_ratio"):
        gi = pr.gains[(meter, "v" if kind == "vt_ratio" else "i")]
        pri[gi] = replace(pri[gi], std=pri[gi].std * RELEASED)
        return list(steps), pri
    w = _wiring(kind, arg)
    out = []
    for st in steps:
        ms = tuple(replace(mt, wiring=w) if mt.name == meter else mt for mt in st.meters)
        out.append(replace(st, meters=ms))
    return out, pri


GAIN_RANGE = (0.2, 5.0)  # a ratio set wrong by more than this is not a ratio error


def _plausible(f: Fit, pr: Problem, meter: str, kind: str) -> bool:
    if kind not in ("vt_ratio", "ct_ratio"):
        return True
    g = float(f.x[pr.gains[(meter, "v" if kind == "vt_ratio" else "i")]])
    return GAIN_RANGE[0] <= g <= GAIN_RANGE[1]


def _drop(steps: Sequence[StepModel], meter: str) -> list[StepModel]:
    return [replace(st, meters=tuple(m for m in st.meters if m.name != meter)) for st in steps]


def suspects(
    base: Fit,
    steps: Sequence[StepModel],
    keys: Sequence[Sequence[Sequence[str]]],
    priors: Sequence[Prior],
    pr: Problem,
    max_iter: int = TRIAL_ITER,
) -> list[str]:
    """The meters to test, most suspect first."""
    present = sorted({mt.name for st in steps for mt in st.meters})
    if base.converged:
        ts = tests(base, steps, keys, pr.gains)
        best: dict[str, float] = {}
        for h, hy in enumerate(ts.hyps):
            best[hy.meter] = max(best.get(hy.meter, 0.0), float(ts.t[h]))
        ranked = sorted(present, key=lambda m: (-best.get(m, 0.0), m))
        top = best.get(ranked[0], 0.0) if ranked else 0.0
        floor = max(THRESHOLD / 2, RIVAL_SHARE * top)
        return [m for m in ranked if best.get(m, 0.0) >= floor][:SUSPECTS]
    scores = []
    for m in present:
        f = solve(_drop(steps, m), priors, max_iter=max_iter)  # flat start, as in trials
        scores.append((f.cost if f.converged else math.inf, m))
    scores.sort()
    return [m for j, m in scores if math.isfinite(j)][:SUSPECTS]


def trials(
    base: Fit,
    steps: Sequence[StepModel],
    priors: Sequence[Prior],
    pr: Problem,
    meters: list[str],
    keys: Sequence[Sequence[Sequence[str]]] = (),
    max_iter: int = TRIAL_ITER,
    ratio_iter: int = 40,
) -> list[Trial]:
    """Every hypothesis on every suspect, refitted (only the converged ones are kept)."""
    has_current = {mt.name for st in steps for mt in st.meters if mt.current}
    out = []
    rank: dict[tuple[str, str, str], float] = {}
    if base.converged:
        ts = tests(base, steps, keys, pr.gains)
        rank = {(h.meter, h.kind, h.arg): float(t) for h, t in zip(ts.hyps, ts.t, strict=True)}
    for m in meters:
        hyps = _hypotheses(m, m in has_current)
        if rank:
            # the linear statistic cannot tell a wiring fault's kind reliably, but it ranks
            # them well enough to keep the refits to the likeliest few
            wiring = [h for h in hyps if h[0] not in ("vt_ratio", "ct_ratio")]
            wiring.sort(key=lambda h: -rank.get((m, *h), 0.0))
            hyps = [h for h in hyps if h[0] in ("vt_ratio", "ct_ratio")] + wiring[:WIRING_KEEP]
        clean: FArray | None = None  # the fit without the suspect: a start it has not bent
        if any(k not in ("vt_ratio", "ct_ratio") for k, _ in hyps):
            lomo = solve(_drop(steps, m), priors, max_iter=min(max_iter, TRIAL_ITER))
            clean = lomo.x if lomo.converged else None
        for kind, arg in hyps:
            st_h, pri_h = _apply(steps, priors, pr, m, kind, arg)
            # from a flat start: from the state the fault bent, damped Gauss-Newton crawls
            if kind in ("vt_ratio", "ct_ratio"):
                # from the converged fit: at a flat start the powers are zero and a freed gain
                # has nothing to hold it
                x0 = base.x if base.converged else None
                f = solve(st_h, pri_h, x0=x0, max_iter=ratio_iter)
            else:
                f = solve(st_h, pri_h, x0=clean, max_iter=min(max_iter, TRIAL_ITER))
                if not f.converged and clean is not None:
                    f = solve(st_h, pri_h, max_iter=min(max_iter, TRIAL_ITER))
            if f.converged and _plausible(f, pr, m, kind):
                out.append(Trial(m, kind, arg, f, st_h, pri_h))
    out += _more_trials(base, steps, keys, priors, pr, ratio_iter)
    return out


def _more_trials(
    base: Fit,
    steps: Sequence[StepModel],
    keys: Sequence[Sequence[Sequence[str]]],
    priors: Sequence[Prior],
    pr: Problem,
    max_iter: int,
) -> list[Trial]:
    """An offset reading or a frozen meter whose statistic passed: refitted from the base fit
    (the offset taken off the reading, or the repeated readings left out)."""
    if not keys:
        return []
    out = []
    found = frozen_from_data(steps, keys)  # the data single these out, whatever the fit did
    if base.converged:
        # a gross error bends the fit, and a frozen meter's linear statistic with it: the
        # data's candidates are refitted beside the statistic's
        linear = candidates(base, steps, keys, tests(base, steps, keys, pr.gains))
        seen = {(c.meter, c.kind) for c in linear}
        found = linear + [c for c in found if (c.meter, c.kind) not in seen]
    for c in found:
        f = solve(c.steps, priors, x0=base.x if base.converged else None, max_iter=max_iter)
        if not f.converged:
            continue
        d = c.detail
        if c.kind == "offset":
            f, d, st_o = _settle_offset(f, steps, c.steps, keys, priors, c.meter, d, max_iter)
            if not f.converged:
                continue
            out.append(Trial(c.meter, c.kind, c.arg, f, st_o, list(priors), 0.0, d))
            continue
        if c.kind == "frozen":
            d = frozen_change(f, steps, keys, c.meter, c.detail, c.later)
        out.append(Trial(c.meter, c.kind, c.arg, f, c.steps, list(priors), c.penalty, d))
    return out


OFFSET_ITER = 6  # refits of an offset hypothesis at most (it settles in three or four)


def _settle_offset(
    f: Fit,
    steps: Sequence[StepModel],
    st: list[StepModel],
    keys: Sequence[Sequence[Sequence[str]]],
    priors: Sequence[Prior],
    meter: str,
    d: Detail,
    max_iter: int,
) -> tuple[Fit, Detail, list[StepModel]]:
    """Refit with the offset taken off until what is left of it is under a tenth of its std
    (``st``: the steps of the refit ``f``)."""
    amount, u = d.amount, d.u
    for _ in range(OFFSET_ITER):
        inc, u_now = offset_update(f, st, keys, meter, d.key)
        if not math.isfinite(u_now):
            break
        u = u_now
        if abs(inc) <= 0.1 * u:
            break
        amount += inc
        st = shift(steps, keys, meter, d.key, amount)[0]
        f = solve(st, priors, x0=f.x, max_iter=max_iter)
        if not f.converged:
            break
    return f, replace(d, amount=amount, u=u), st


def best_trial(base: Fit, found: list[Trial]) -> tuple[Trial, list[Trial], list[Trial]] | None:
    """The best refit, its rivals on other meters, and equally good causes on the same meter."""
    if not found:
        return None
    found = sorted(found, key=lambda t: (t.score, t.meter, t.kind, t.arg))
    top = found[0]
    j0 = base.cost
    if j0 - top.score < THRESHOLD**2:
        return None
    if not base.converged and top.fit.cost > chdtri(max(dof(top.fit), 1), 0.01):
        return None  # without a converged reference, a hypothesis must explain the readings
    lim = top.score + margin(top.score)
    if top.kind == "offset":
        # one reading explains any one residual: a ratio or wiring cause of the same meter
        # that fits about as well stays the cause, the offset is said beside it
        alike = [t for t in found[1:] if t.meter == top.meter and t.kind in _GAIN_OR_WIRING]
        if alike and alike[0].score <= lim:
            top = alike[0]
            lim = max(lim, top.score + margin(top.score))
    rivals = [t for t in found if t is not top and t.meter != top.meter and t.score <= lim]
    same = [
        t
        for t in found
        if t is not top and t.meter == top.meter and t.kind != top.kind and t.score <= lim
    ]
    return top, rivals, same


_GAIN_OR_WIRING = ("vt_ratio", "ct_ratio", "ct_reversed", "phases_swapped")
