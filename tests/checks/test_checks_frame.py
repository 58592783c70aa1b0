"""The engine's fused per-reading limits agree with the reference functions of meas.tolerance."""

from __future__ import annotations

import math

import numpy as np
from support.check_inputs import demo

from meas.checks import CheckEngine
from meas.checks.columns import COL, I_PH, P4, Q4, S4, V_LN
from meas.sim.meters import snapshot_from_sim
from meas.sim.readings import ideal_readings
from meas.tolerance import class_spec, magnitude_limit, power_limit, resolution_limit, rss, std_rect


def test_fused_limits_match_tolerance_functions():
    prof = demo()
    eng = CheckEngine(prof)
    sw = {s.id: s.normal for s in prof.switches} | {"RX": "closed"}
    snap = snapshot_from_sim(
        prof, sw, [], np.random.default_rng(2), 1, ideal=ideal_readings(prof, sw), t_mono=0.0
    )
    fr = eng.frame(snap)
    lay = eng.layout
    checked = 0
    for mi, m in enumerate(prof.meters):
        x = fr.x[mi]
        i_n, v_n = lay.i_n[mi], lay.v_n[mi]
        i_frac = np.r_[x[I_PH] / i_n, np.mean(x[I_PH] / i_n)]
        rated = np.r_[[v_n * i_n] * 3, 3 * v_n * i_n]
        s_ref = x[S4]
        for sl, kind in ((P4, "p"), (Q4, "q")):
            a = power_limit(class_spec(kind, getattr(m.classes, kind)), x[sl], s_ref, i_frac, rated)
            res = resolution_limit(lay.scale[mi, sl], x[sl], lay.is_float[mi, sl])
            np.testing.assert_allclose(
                fr.u[mi, sl], rss(std_rect(a), std_rect(res)), rtol=1e-12, err_msg=f"{m.id} {kind}"
            )
            checked += 4
        a = magnitude_limit(class_spec("v", m.classes.v), x[V_LN], v_n)
        res = resolution_limit(lay.scale[mi, V_LN], x[V_LN], lay.is_float[mi, V_LN])
        np.testing.assert_allclose(fr.u[mi, V_LN], rss(std_rect(a), std_rect(res)), rtol=1e-12)
        checked += 3
        c = COL["f.T"]
        assert math.isclose(
            fr.u[mi, c],
            float(
                rss(
                    std_rect(0.01),
                    std_rect(resolution_limit(lay.scale[mi, c], x[c], lay.is_float[mi, c])),
                )
            ),
        )
    assert checked == 8 * 11
