"""The solve lands on the same optimum from any start, so its speed-ups cannot change results.

An estimator keeps where each step structure's last solve ended (``solver.Starts``) and reuses
a step's index arrays for the next capture of the same structure (``plan.plan_of``). Both are
only worth having if the result is what a cold solve with an exact Jacobian gives: the final
pass stops once the predicted decrease of the misfit is below ``DECREMENT``, which bounds the
distance to the optimum by sqrt(DECREMENT) along any direction in the gain matrix's metric
(the Gauss-Newton decrement; Nocedal & Wright, Numerical Optimization, 2nd ed., §10.3).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.estimate_bench import as_built, capture, demo, meter_gains

import meas.estimate.core as core
import meas.estimate.solver as solver
from meas.estimate import Estimator
from meas.estimate.measurement import evaluate
from meas.estimate.plan import build_plan, plan_of
from meas.estimate.solver import DECREMENT, Starts, solve

STATE = {"CB1": "closed", "SW2": "closed", "SW3": "closed", "TIE": "open", "RX": "closed"}


@pytest.fixture(scope="module")
def problems():
    prof = demo()
    state = {**{s.id: "closed" for s in prof.switches}, **STATE}
    true = as_built(prof, 5)
    gains = meter_gains(prof, 5)
    est = Estimator(prof)
    caps = [capture(true, state, (), np.random.default_rng(40 + k), gains) for k in range(3)]
    return [est.builder.problem([c]) for c in caps]


def _exact(pr, monkeypatch) -> np.ndarray:
    """The optimum with a Jacobian refreshed at every step and no decrement stop."""
    with monkeypatch.context() as m:
        m.setattr(core, "DY_REFRESH", 0.0)
        m.setattr(solver, "DECREMENT", 0.0)
        fit = solve(pr.steps, pr.priors, rel=0.0, tol=1e-13, max_iter=60)
    return fit.x


def test_warm_and_cold_solves_land_on_the_exact_optimum(problems, monkeypatch):
    starts = Starts()
    first = solve(problems[0].steps, problems[0].priors, starts=starts)
    assert first.converged
    calls = [0]
    real = solver.evaluate

    def counted(*a, **k):
        calls[0] += 1
        return real(*a, **k)

    monkeypatch.setattr(solver, "evaluate", counted)
    for pr in problems[1:]:
        calls[0] = 0
        cold = solve(pr.steps, pr.priors)
        cold_evals, calls[0] = calls[0], 0
        warm = solve(pr.steps, pr.priors, starts=starts)
        warm_evals = calls[0]
        assert cold.converged and warm.converged
        exact = _exact(pr, monkeypatch)
        # distance in the fit's own metric: sqrt(dx' G dx) <= sqrt(DECREMENT) at a GN stop,
        # with room for the forward-difference dY/dθ the production solve uses
        for fit in (cold, warm):
            dx = fit.x - exact
            assert math.sqrt(abs(dx @ fit.g @ dx)) < 10 * math.sqrt(DECREMENT)
        # and the start saved work: a previous optimum is a few Gauss-Newton steps away,
        # where a flat start needs a first pass of its own
        assert warm_evals <= 5 < cold_evals


def test_a_start_from_another_structure_is_not_used(problems):
    starts = Starts()
    pr = problems[0]
    solve(pr.steps, pr.priors, starts=starts)
    st = pr.steps[0]
    fewer = core.StepModel(
        st.nodes, st.vn, st.v0, st.ref, st.two_ports, st.loads, st.meters[:-1], st.kcl
    )
    assert starts.get(fewer, solver.layout(len(pr.priors), [fewer]).n) is None
    assert starts.get(st, solver.layout(len(pr.priors), [st]).n) is not None


def test_a_reused_plan_evaluates_exactly_as_a_fresh_one(problems):
    a, b = problems[0].steps[0], problems[1].steps[0]
    assert core.structure_key(a) == core.structure_key(b)
    plan_of(a)
    reused, fresh = plan_of(b), build_plan(b)
    assert reused is not fresh
    np.testing.assert_array_equal(reused.z, fresh.z)
    np.testing.assert_array_equal(reused.sigma, fresh.sigma)
    lay = solver.layout(len(problems[1].priors), [b])
    x = solver.initial(lay, [b], np.array([p.mean for p in problems[1].priors]))
    ev = evaluate(b, lay.tcs[0], x[lay.ns :], x[: lay.ns])
    assert np.isfinite(ev.r).all() and len(ev.r) == len(fresh.z) + len(fresh.k_sigma)
    # the residuals are those of b's own readings, not a's (angle rows wrap at ±π)
    n = len(fresh.z)
    back = ev.r[:n] * fresh.sigma + ev.h[:n] - np.concatenate([mt.z for mt in b.meters])
    np.testing.assert_allclose(np.angle(np.exp(1j * back)), 0.0, atol=1e-9)
    assert not np.array_equal(reused.z, plan_of(a).z)


def test_a_start_is_evaluated_as_a_fresh_evaluation_there(problems):
    """A warm solve's first step uses the previous solve's last evaluation, reweighted by the
    new capture's uncertainties (``solver.reweigh``): it must equal evaluating the new capture
    at that point, to rounding, or the first step would go somewhere else."""
    first, second = problems[0], problems[1]
    starts = Starts()
    fit = solve(first.steps, first.priors, starts=starts)
    st = second.steps[0]
    got = starts.get(st, fit.lay.n)
    assert got is not None
    x, ev = got
    np.testing.assert_array_equal(x, fit.x)
    lay = solver.layout(len(second.priors), [st])
    core.reset_admittances()
    fresh = evaluate(st, lay.tcs[0], x[lay.ns :], x[: lay.ns])
    # the readings differ between the captures, so the reweighting does something
    assert not np.allclose(plan_of(st).sigma, plan_of(first.steps[0]).sigma, rtol=1e-6)
    np.testing.assert_allclose(ev.r, fresh.r, rtol=1e-9, atol=1e-9)
    np.testing.assert_array_equal(ev.h, fresh.h)
    # the state and gain columns exactly; the model parameters' columns carry dY/dθ from the
    # solve's last refresh (within DY_REFRESH of the point, as every step of a solve does)
    par = plan_of(st).par_cols
    other = np.setdiff1d(np.arange(fresh.ncols), par)
    np.testing.assert_allclose(ev.j[:, other], fresh.j[:, other], rtol=1e-9, atol=1e-12)
    scale = np.abs(fresh.j[:, par]).max(axis=0)
    assert np.all(np.abs(ev.j[:, par] - fresh.j[:, par]) <= 1e-3 * scale)


def test_a_warm_solve_does_not_evaluate_at_its_start(problems, monkeypatch):
    starts = Starts()
    solve(problems[0].steps, problems[0].priors, starts=starts)
    at = []
    real = solver.evaluate

    def recorded(step, tc, xs, shared):
        at.append(np.r_[shared, xs])
        return real(step, tc, xs, shared)

    monkeypatch.setattr(solver, "evaluate", recorded)
    x0 = starts._at[core.structure_key(problems[1].steps[0])].x.copy()
    fit = solve(problems[1].steps, problems[1].priors, starts=starts)
    # the start's model values and Jacobian come from the last solve: evaluations only at
    # the points the steps reach
    assert fit.converged and at
    assert all(not np.array_equal(x, x0) for x in at)
