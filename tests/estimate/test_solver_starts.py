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
