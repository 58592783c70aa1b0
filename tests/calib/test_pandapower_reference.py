"""The fit's optimum with benchwalk's load flow equals the one with pandapower's ``runpp`` in
the loop (pandapower 3.5.6, the reference library; CALIBRATION_NOTES.md §4.3 [C]: the same
optimum to a relative 1.5e-7). One small balanced case keeps it fast: two steps of the demo
bench with load bank 2 balanced, four parameters, gains on."""

from __future__ import annotations

import numpy as np
import pytest
from support.calib_bench import DEMO, as_built, live_configs, synthesize
from support.calib_pandapower import (
    PandapowerPredictor,
    balanced_demo,
    small_case_params,
    small_case_steps,
)

from meas.calib.predict import NetworkPredictor
from meas.calib.run import Options, calibrate
from meas.profile import load_profile

pytestmark = pytest.mark.long  # minutes: pytest -m long (DEVELOPERS.md)


@pytest.fixture(scope="module")
def case():
    profile = balanced_demo(load_profile(DEMO))
    configs = [c for c in live_configs(profile) if c.id in small_case_steps()]
    true = as_built(profile, {"L1.r_ohm": 0.9, "L2.x_ohm": 1.1, "LD1.p_w": 1.03, "SRC.v_ll": 1.01})
    obs, _ = synthesize(profile, true, configs, seed=11)
    return profile, obs


def test_readings_agree_with_pandapower(case):
    profile, obs = case
    ours = NetworkPredictor(profile, obs).predict({"L1.r_ohm": 0.15})
    theirs = PandapowerPredictor(profile, obs).predict({"L1.r_ohm": 0.15})
    assert np.max(np.abs(ours - theirs) / np.abs(theirs)) < 1e-9  # §4.1: agree to 1.9e-10 abs


@pytest.mark.slow
def test_optimum_equals_pandapower_in_the_loop_to_1e_6(case):
    profile, obs = case
    options = Options(params=tuple(small_case_params()), method="lm", tol=1e-14)
    own = calibrate(profile, obs, options)
    ref = calibrate(profile, obs, options, predictor=PandapowerPredictor(profile, obs))
    assert own.fit.converged and ref.fit.converged
    a = np.array([e.value for e in own.estimates])
    b = np.array([e.value for e in ref.estimates])
    # relative to each value: a model parameter to its own size (or its prior width near 0);
    # a meter gain g is a reading (1 + g)·model (meas.calib.problem), so relative to 1 + g
    scale = np.array(
        [
            max(abs(e.value), e.prior_u) if e.kind == "parameter" else abs(1.0 + e.value)
            for e in ref.estimates
        ]
    )
    assert np.max(np.abs(a - b) / scale) < 1e-6
    assert own.fit.chi2 == pytest.approx(ref.fit.chi2, rel=1e-8)
