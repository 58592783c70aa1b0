"""The implicit-function Jacobian against forward differences of whole load flows.

Both differentiate the same model readings (the demo bench, every parameter, invented data);
the forward differences (step 1e-4 prior σ, ``meas.calib.problem.FD_STEP``) carry a truncation
error of order the step, so the two agree to about 1e-3 of a column's size, and the analytic
one must also match central differences far tighter. Central differences of the full load flow
at a single point are the reference (common practice for checking a derivative). The quick case
takes one parameter of each element kind; every parameter, per-step EMFs and an ideal source
whose own current is metered run with the slow tests.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from support.calib_bench import demo_profile, live_configs, random_as_built, synthesize

from meas.calib.predict import NetworkPredictor
from meas.calib.problem import Problem
from meas.calib.selection import select_parameters
from meas.model import Profile, SourceParams


def _ideal_source_metered(profile: Profile) -> Profile:
    """The demo with an ideal source (sc_va = inf: its bus held) and M1 reading the source's
    own current, whose derivative is the rest of its bus's KCL (invented variant)."""
    src = profile.branch("SRC")
    assert isinstance(src.model, SourceParams)
    branches = tuple(
        replace(b, model=replace(src.model, sc_va=math.inf)) if b.id == "SRC" else b
        for b in profile.branches
    )
    meters = tuple(replace(m, branch="SRC") if m.id == "M1" else m for m in profile.meters)
    return replace(profile, branches=branches, meters=meters)


def _problem(
    emf_per_step: bool, ideal: bool = False, names: tuple[str, ...] = ()
) -> tuple[Problem, np.ndarray]:
    profile = demo_profile()
    if ideal:
        profile = _ideal_source_metered(profile)
    params = select_parameters(profile, names)
    true = random_as_built(profile, np.random.default_rng(3), [p.name for p in params])
    obs, _ = synthesize(profile, true, live_configs(profile), seed=3)
    problem = Problem(
        profile, obs, NetworkPredictor(profile, obs), params, emf_per_step=emf_per_step
    )
    z = np.random.default_rng(4).normal(0.0, 0.5, len(problem.unknowns))  # away from the profile
    return problem, z


# one parameter of each element kind (line series and charging, source, load, shunt): quick
FEW = ("L2.r_ohm", "L3.b_us", "SRC.sc_va", "SRC.v_ll", "LD1.q_var", "SH1.q_var")


@pytest.mark.parametrize(
    ("emf_per_step", "ideal", "names"),
    [
        (False, False, FEW),
        pytest.param(False, False, (), marks=pytest.mark.slow),  # every parameter
        pytest.param(True, False, (), marks=pytest.mark.slow),
        pytest.param(True, True, (), marks=pytest.mark.slow),
    ],
)
def test_analytic_jacobian_matches_load_flow_differences(emf_per_step, ideal, names):
    problem, z = _problem(emf_per_step, ideal, names)
    if ideal:  # the source's own current is among the fitted readings
        assert any(
            problem.obs.meter[i] == "M1" and problem.obs.quantity[i] == "p"
            for i in range(len(problem.obs))
        )
    analytic = problem.analytic_jacobian(z)
    forward = problem.difference_jacobian(z)
    m, nm = len(problem.obs), problem.n_model
    a, f = analytic[:m, :nm], forward[:m, :nm]
    scale = np.maximum(np.abs(a).max(axis=0), 1e-9)
    assert np.all(np.abs(a - f).max(axis=0) / scale < 5e-3)
    # central differences of whole load flows on a few columns: far tighter (step 1e-3 σ:
    # truncation ~1e-6 of the column, and the load flow's 1e-13 pu tolerance stays below it)
    step = 1e-3
    for j in range(nm):
        zp, zm = z.copy(), z.copy()
        zp[j] += step
        zm[j] -= step
        central = (problem.data_residuals(zp) - problem.data_residuals(zm)) / (2 * step)
        assert np.max(np.abs(central - a[:, j])) <= 1e-5 * scale[j] + 1e-7, problem.unknowns[j].name
    # gains and priors are the same exact columns in both
    assert np.array_equal(analytic[:, nm:], forward[:, nm:])
    assert np.array_equal(analytic[m:], np.eye(len(problem.unknowns)))


def test_the_fit_uses_one_load_flow_per_step_for_a_jacobian():
    problem, z = _problem(False, names=FEW)
    before = problem.predictor.solves
    problem.jacobian(z)
    live = sum(1 for rows in problem.predictor._rows if rows)  # type: ignore[attr-defined]
    assert problem.predictor.solves - before == live
