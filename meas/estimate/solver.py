"""The estimator's solve: damped Gauss-Newton over the terms of ``meas.estimate.core``.

Gauss-Newton with Levenberg-Marquardt damping and the analytic Jacobian of ``core.evaluate``,
written here rather than ``scipy.optimize.least_squares`` because (1) the bad-data tests need
the gain matrix G = JᵀWJ at the solution anyway, (2) the Jacobian has a block structure (state
per step, gains and parameters shared) that the normal equations exploit, and (3) per-call
overhead matters at a capture every few hundred milliseconds. Both reach the same optimum on
the textbook cases (tests/estimate).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.linalg import lapack

from .core import (
    CArray,
    FArray,
    IArray,
    Prior,
    StepEval,
    StepModel,
    _Layout,
    initial,
    layout,
    reset_admittances,
    structure_key,
)
from .measurement import evaluate, phasors, reading_residuals
from .plan import SMOOTH_OK, plan_of


@dataclass
class Fit:
    x: FArray
    cost: float  # J = sum of squared weighted residuals, priors included
    iterations: int
    converged: bool
    why: str
    evals: list[StepEval]
    prior_r: FArray  # weighted prior residuals
    g: FArray  # gain matrix JᵀWJ at the solution
    ginv: FArray
    lay: _Layout
    prior_std: FArray
    memo: dict[object, object] = field(default_factory=dict)  # derived statistics of this fit


def _assemble(
    lay: _Layout, evals: list[StepEval], prior: tuple[FArray, FArray], x: FArray
) -> tuple[float, FArray, FArray, FArray]:
    """The gain matrix JᵀJ and JᵀR̃ from each step's compact and gain parts (``StepEval``):
    a meter's rows depend on its own two gains only, so the gain blocks are sums over each
    meter's rows, and the dense Jacobian (mostly gain columns at 32 meters) is never formed.
    ``prior``: the priors' means and standard deviations."""
    n, ns = lay.n, lay.ns
    g = np.zeros((n, n))
    b = np.zeros(n)
    cost = 0.0
    for ev, off in zip(evals, lay.offsets, strict=True):
        jc, r = ev.jc, ev.r
        glob = np.where(ev.cc < ns, ev.cc, off + ev.cc - ns)
        g[np.ix_(glob, glob)] += jc.T @ jc
        b[glob] += jc.T @ r
        cost += float(r @ r)
        if not ev.meter_rows:
            continue
        m_end = ev.meter_rows[-1].stop
        starts = ev.starts
        gv = ev.gval[:m_end]
        jm, rm = jc[:m_end], r[:m_end]
        cross = np.zeros((ns, len(glob)))  # the gain rows against the compact columns
        for s in range(2):
            has = ev.gains[:, s] >= 0
            if not has.any():
                continue
            col = ev.gains[has, s]
            cross[col] += np.add.reduceat(gv[:, s, None] * jm, starts, axis=0)[has]
            b[col] += np.add.reduceat(gv[:, s] * rm, starts)[has]
            g[col, col] += np.add.reduceat(gv[:, s] ** 2, starts)[has]
        g[:ns, glob] += cross
        g[glob, :ns] += cross.T
        both = (ev.gains >= 0).all(axis=1)
        if both.any():
            vi = np.add.reduceat(gv[:, 0] * gv[:, 1], starts)[both]
            cv, ci = ev.gains[both, 0], ev.gains[both, 1]
            g[cv, ci] += vi
            g[ci, cv] += vi
    mean, std = prior
    k = len(mean)
    pr = (mean - x[:k]) / std
    g[np.arange(k), np.arange(k)] += 1.0 / std**2
    b[:k] += pr / std
    cost += float(pr @ pr) if len(pr) else 0.0
    return cost, g, b, pr


def _spd_solve(a: FArray, b: FArray) -> FArray:
    """a⁻¹b for the gain matrix (symmetric, positive definite where the readings and priors
    determine every unknown) by Cholesky, half the work of LU; LU where Cholesky fails."""
    _, x, info = lapack.dposv(a, b, lower=1)
    if info != 0:
        return np.asarray(np.linalg.solve(a, b))
    return np.asarray(x)


def _smooth(step: StepModel) -> StepModel:
    """The step without current magnitudes and angles: both are ill-posed at a flat start
    (zero currents have no direction), a known trouble of state estimation from flat start."""
    out = []
    table = SMOOTH_OK[step.phases]
    for mt in step.meters:
        ok = table[np.asarray(mt.slots, np.int64)]
        out.append(replace(mt, slots=mt.slots[ok], z=mt.z[ok], sigma=mt.sigma[ok]))
    return replace(step, meters=tuple(out))


LAM0 = 1e-12  # Gauss-Newton until a step fails: damping only where it is needed
DECREMENT = 1e-9  # converged once the predicted decrease of the misfit is below this
GROSS = 25.0  # misfit per row above which the readings hold a gross error (rms 5 sigma)
GROSS_LAM0 = 1e-6  # once a step fails at such a misfit: damp from here up ...
GROSS_REL = 1e-7  # ... and stop once a step lowers the misfit by less than this share
START_REL = 1e-4  # passes that only find a start (the final pass converges to DECREMENT)


@dataclass(frozen=True)
class _Start:
    two_ports: tuple[object, ...]  # held: its id, in the structure key, stays unique
    x: FArray
    ev: StepEval  # the step's evaluation at ``x``
    sigma: FArray  # the reading uncertainties it was weighted with


class Starts:
    """Where earlier solves of a step with the same structure ended: the next one starts there.

    A step's structure is its topology (the builder caches one per switch state, so its
    two-ports tuple is the same object) and its meters with their measured slots. Consecutive
    captures of one switch state differ only by noise, so the previous optimum is a start a
    few Gauss-Newton steps from the next, where a flat start needs a first pass of its own.
    The model values and Jacobian there are the previous solve's last evaluation, reweighted
    by the new readings' uncertainties (``reweigh``): the first step costs no evaluation.
    The final pass converges to ``DECREMENT`` from any start, so the result does not depend
    on the start (tests/estimate/test_solver_starts.py). Oldest first out, as the other memos.
    """

    MAX = 64

    def __init__(self) -> None:
        self._at: dict[tuple[object, ...], _Start] = {}

    def get(self, step: StepModel, n: int) -> tuple[FArray, StepEval] | None:
        hit = self._at.get(structure_key(step))
        if hit is None or hit.two_ports[0] is not step.two_ports or len(hit.x) != n:
            return None
        return hit.x.copy(), reweigh(hit.ev, hit.sigma, step)

    def put(self, step: StepModel, fit: Fit) -> None:
        while len(self._at) >= self.MAX:
            self._at.pop(next(iter(self._at)))
        sigma = plan_of(step).sigma
        self._at[structure_key(step)] = _Start((step.two_ports,), fit.x.copy(), fit.evals[0], sigma)


def reweigh(ev: StepEval, sigma: FArray, step: StepModel) -> StepEval:
    """``ev``, an evaluation at some point of a step with the same structure and readings
    weighted by ``sigma``, as the evaluation of ``step`` at that point: the model values and
    Kirchhoff rows are the same; the readings' residuals and rows take the new values and
    uncertainties."""
    pl = plan_of(step)
    k0 = len(pl.rows)
    scale = (sigma / pl.sigma)[:, None]
    jc = ev.jc.copy()
    jc[:k0] *= scale
    gval = ev.gval.copy()
    gval[:k0] *= scale
    r = ev.r.copy()
    r[:k0] = reading_residuals(pl, ev.h[:k0])
    return StepEval(r, ev.h, ev.meter_rows, ev.kcl_rows, jc, ev.cc, ev.gains, gval, ev.ncols)


def _gross(cost: float, evals: Sequence[StepEval], priors: Sequence[Prior]) -> bool:
    """A misfit above ``GROSS`` per row: the readings hold a gross error."""
    rows = sum(len(ev.r) for ev in evals) + len(priors)
    return cost > GROSS * max(rows, 1)


def solve(
    steps: Sequence[StepModel],
    priors: Sequence[Prior],
    *,
    tol: float = 1e-8,
    max_iter: int = 40,
    x0: FArray | None = None,
    rel: float = 1e-9,
    starts: Starts | None = None,
    ev0: StepEval | None = None,
) -> Fit:
    """Minimise the weighted sum of squares; every shared unknown has a prior (index order).

    From a flat start, a first pass leaves out current magnitudes and angles (``_smooth``) and
    the full problem starts from its solution. ``rel``: converged once a step lowers the misfit
    by less than this share; the passes that only find a start use ``START_REL``. ``starts``:
    a step solved before with the same structure starts where that solve ended (``Starts``);
    ``ev0``: the one step's evaluation at ``x0``, when known.
    """
    lay = layout(len(priors), steps)
    reset_admittances()  # the result must not depend on what was solved before (re-checks)
    if x0 is None and len(steps) == 1 and starts is not None:
        # only where the readings fit: there the optimum is unique and reached from either
        # start; a gross misfit's fit can depend on its start, so it always starts flat (the
        # same result as a fresh estimator's, whatever was solved before)
        warm = starts.get(steps[0], lay.n)
        if warm is not None:
            x_w, ev_w = warm
            fit = solve(steps, priors, tol=tol, max_iter=max_iter, x0=x_w, rel=rel, ev0=ev_w)
            if fit.converged and not _gross(fit.cost, fit.evals, priors):
                starts.put(steps[0], fit)
                return fit
        fit = solve(steps, priors, tol=tol, max_iter=max_iter, rel=rel)
        if fit.converged and not _gross(fit.cost, fit.evals, priors):
            starts.put(steps[0], fit)
        return fit
    if x0 is None and len(steps) > 1:
        # several steps: start each step's state from its own fit (robust and cheap), the
        # shared unknowns from the mean of theirs; a joint flat start lets every step's
        # flat-start misfit push the shared gains and parameters at once
        x = initial(lay, steps, np.array([p.mean for p in priors], float))
        shared = []
        for k, st in enumerate(steps):
            one = solve([st], priors, tol=1e-6, max_iter=max_iter, rel=START_REL, starts=starts)
            if one.converged:
                off = lay.offsets[k]
                x[off : off + lay.tcs[k].shape[1]] = one.x[one.lay.ns :]
                shared.append(one.x[: one.lay.ns])
        if shared:
            x[: lay.ns] = np.mean(shared, axis=0)
    elif x0 is None:
        x = initial(lay, steps, np.array([p.mean for p in priors], float))
        # a start only: the final pass converges to DECREMENT from wherever it starts
        first = solve(
            [_smooth(s) for s in steps], priors, tol=1e-6, max_iter=max_iter, x0=x, rel=START_REL
        )
        if np.all(np.isfinite(first.x)):
            x = first.x
    else:
        x = x0.copy()

    prior = (np.array([p.mean for p in priors], float), np.array([p.std for p in priors], float))

    def run(xx: FArray) -> tuple[list[StepEval], float, FArray, FArray, FArray]:
        shared = xx[: lay.ns]
        evals = [
            evaluate(st, tc, xx[off : off + tc.shape[1]], shared)
            for st, tc, off in zip(steps, lay.tcs, lay.offsets, strict=True)
        ]
        cost, g, b, pr = _assemble(lay, evals, prior, xx)
        return evals, cost, g, b, pr

    if ev0 is not None and len(steps) == 1:
        evals = [ev0]
        cost, g, b, pr = _assemble(lay, evals, prior, x)
    else:
        evals, cost, g, b, pr = run(x)
    # Levenberg-Marquardt with Nielsen's damping update (Madsen, Nielsen & Tingleff, Methods
    # for non-linear least squares problems, 2004, §3.2): the damping follows the ratio of the
    # actual to the predicted decrease, so a nearly flat direction (a freed gain against a load
    # multiplier) does not make every other step overshoot
    # Gauss-Newton ignores the residuals' own curvature, which is small where the readings fit
    # (Nocedal & Wright, Numerical Optimization, 2006, §10.3): there it converges in a few
    # undamped steps. A step that fails while the misfit is far above what noise explains (a
    # fault in the readings) is where it overshoots: from then on the solve is damped from
    # GROSS_LAM0 up and stops at the looser GROSS_REL
    gross = False
    lam, nu, it, converged, why = LAM0, 2.0, 0, False, ""
    for step_no in range(1, max_iter + 1):
        it = step_no
        d = np.diag(g).copy()
        d[d <= 0] = 1.0
        try:
            dx = _spd_solve(g + lam * np.diag(d), b)
        except np.linalg.LinAlgError:
            why = "the gain matrix is singular: some state has no reading and no prior"
            break
        if not np.all(np.isfinite(dx)):
            why = "the step became infinite: the readings do not determine the state"
            break
        pred = float(2 * dx @ b - dx @ g @ dx)
        if lam <= 1e-9 and 0.0 <= pred <= DECREMENT and rel < START_REL:
            # the undamped step would lower the misfit by less than DECREMENT: x is the
            # optimum to within sqrt(DECREMENT) standard deviations along any direction, so
            # the result does not depend on where the solve started
            converged = True
            break
        trial = run(x + dx)
        step_small = float(np.max(np.abs(dx))) < tol
        if trial[1] <= cost:
            flat = cost - trial[1] <= rel * max(cost, 1.0)
            rho = (cost - trial[1]) / pred if pred > 0 else 1.0
            x = x + dx
            evals, cost, g, b, pr = trial
            lam = max(lam * max(1 / 3, 1 - (2 * rho - 1) ** 3), 1e-12)
            nu = 2.0
            if step_small or flat:
                converged = True
                break
        else:
            if not gross and _gross(cost, evals, priors):
                gross, rel, lam = True, GROSS_REL, max(lam, GROSS_LAM0)
            if step_small or trial[1] - cost <= rel * max(cost, 1.0):
                converged = True  # at the optimum to rounding
                break
            lam *= nu
            nu *= 2
            if lam > 1e8:
                why = "no step lowers the misfit (a local minimum)"
                break
    else:
        why = f"no convergence in {max_iter} iterations"
    try:
        ginv = np.linalg.inv(g)
    except np.linalg.LinAlgError:
        ginv = np.linalg.pinv(g)
        converged, why = False, why or "the gain matrix is singular"
    if converged and not np.all(np.isfinite(x)):
        converged, why = False, "the estimate is not finite"
    return Fit(
        x,
        cost,
        it,
        converged,
        why,
        evals,
        pr,
        g,
        np.asarray(ginv, dtype=np.float64),
        lay,
        np.array([p.std for p in priors], float),
    )


def cols_of(fit: Fit, k: int) -> IArray:
    ns = fit.lay.ns
    off = fit.lay.offsets[k]
    return np.r_[np.arange(ns), np.arange(off, off + fit.evals[k].ncols - ns)]


def omega_diag(fit: Fit) -> tuple[list[FArray], FArray]:
    """Diagonal of the weighted residual covariance Ω̃ = I - J G⁻¹ Jᵀ, per step and for priors.

    Ω̃_ii near 0 marks a critical reading (its error can never show in the residuals);
    the normalized residual is |r̃_i| / sqrt(Ω̃_ii) (Abur & Expósito 2004, ch. 5).
    """
    out = []
    for k, ev in enumerate(fit.evals):
        c = cols_of(fit, k)
        jj = ev.j
        out.append(1.0 - np.sum((jj @ fit.ginv[np.ix_(c, c)]) * jj, axis=1))
    return out, omega_prior(fit)


def omega_prior(fit: Fit) -> FArray:
    """Ω̃ of the prior rows alone (the shared unknowns): 1 - G⁻¹_kk / σ_k²."""
    ns = fit.lay.ns
    return 1.0 - np.diag(fit.ginv)[:ns] / fit.prior_std**2


def meter_phasors(fit: Fit, steps: Sequence[StepModel], k: int) -> tuple[CArray, CArray]:
    """Each meter's (V, I) phasors at the solution of step ``k``, (M, p) each (gains, wiring
    not applied)."""
    st, tc, off = steps[k], fit.lay.tcs[k], fit.lay.offsets[k]
    shared = fit.x[: fit.lay.ns]
    return phasors(st, plan_of(st), tc, fit.x[off : off + tc.shape[1]], shared)
