"""The two additions to meas.network the fit relies on: the per-phase reading core shared with
``meter_values``, and the warm start of the load flow (same solution, fewer iterations). The
reference is benchwalk's own cold-started load flow and full meter derivation."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from support.calib_bench import demo_profile

from meas.network.admittance import build_network
from meas.network.elements import element_models
from meas.network.loadflow import solve
from meas.network.parameters import with_values
from meas.network.readings import meter_phasors, meter_values, phase_values

MESHED = {
    "CB1": "closed",
    "SW2": "closed",
    "SW3": "closed",
    "TIE": "closed",
    "RX": "closed",
    "LB2": "closed",
}


def test_phase_values_are_meter_values_per_phase():
    p = demo_profile()
    sol = solve(build_network(p, MESHED))
    for m in p.meters:
        v, i = meter_phasors(p, m, sol)
        full = meter_values(v, i, apparent_power="vector", frequency_hz=50.0)
        vm, im, pp, qq = phase_values(v, i)
        got = np.r_[vm, im, pp, qq]
        want = [full[f"{q}.{ph}"] for q in ("v_ln", "i", "p", "q") for ph in "ABC"]
        assert np.allclose(got, want, rtol=1e-14, atol=1e-12)  # equal up to rounding


def test_warm_start_reaches_the_same_solution_in_fewer_iterations():
    p = demo_profile()
    base = solve(build_network(p, MESHED))
    q = replace(p, branches=with_values(p.branches, {"L2.r_ohm": 0.1201, "LD1.p_w": 6010.0}))
    net = build_network(q, MESHED, element_models(q))
    cold = solve(net, tol_pu=1e-13)
    warm = solve(net, tol_pu=1e-13, start=base)
    assert warm.iterations < cold.iterations
    for bus in cold.v:
        assert np.max(np.abs(warm.v[bus] - cold.v[bus])) < 1e-9
