"""Steady-state gate: an exact exponential (analytic settling time) and the simulated bench's
real transients after a switching operation."""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.check_inputs import balanced, block, demo, snapshot

from meas.checks import SettleDetector
from meas.model import SettleCriterion
from meas.sim.bench import SimulatedBench


def test_first_order_decay_settles_when_the_window_spread_drops_below_the_criterion():
    # P(t) = P_f (1 + d e^{-t/tau}); the spread of a window [t - W, t] is P_f d e^{-(t-W)/tau} (1 - e^{-W/tau}),
    # judged against S (here S = P at PF 1). Steady once that is <= rel: t* = W + tau ln(d (1 - e^{-W/tau}) / rel)
    # (first-order step response, common practice).
    prof = demo()
    crit = SettleCriterion(window_s=1.0, rel_spread=0.005, timeout_s=30.0)
    det = SettleDetector(prof, crit)
    tau, d, dt = 0.8, 0.5, 0.05
    det.restart(0.0)
    t_expected = crit.window_s + tau * math.log(
        d * (1 - math.exp(-crit.window_s / tau)) / crit.rel_spread
    )
    seen = None
    for k in range(400):
        t = k * dt
        v, i = balanced(230.0, 20.0 * (1 + d * math.exp(-t / tau)), 0.0)
        st = det.feed(snapshot([block(prof, "M1", v, i)], t=t))
        if st.settled:
            seen = t
            break
    assert seen is not None
    assert seen == pytest.approx(t_expected, abs=2 * dt)
    assert st.settle_time_s == pytest.approx(seen - crit.window_s, abs=2 * dt)


def test_timeout_is_reported():
    prof = demo()
    det = SettleDetector(prof, SettleCriterion(window_s=0.5, rel_spread=0.005, timeout_s=2.0))
    det.restart(0.0)
    st = None
    for k in range(60):
        t = k * 0.1
        v, i = balanced(230.0, 10.0 + 5.0 * math.sin(2 * math.pi * t / 1.3), 0.0)  # never steady
        st = det.feed(snapshot([block(prof, "M1", v, i)], t=t))
    assert not st.settled and st.timed_out and st.worst.startswith("M1:")


def test_simulated_switching_transient():
    # The simulated bench (meas.sim.bench, noise on) after opening load bank 2: the gate must close
    # at once and open again before the profile's timeout, and stay open in steady state.
    prof = demo()
    now = [0.0]
    bench = SimulatedBench(prof, seed=11, clock=lambda: now[0])
    det = SettleDetector(
        prof, prof.steps[0].capture.settle if prof.steps and prof.steps[0].capture else None
    )
    prev = None
    steady_flags = []
    for k in range(25):
        now[0] = 0.2 * k
        prev = bench.snapshot(now[0], k, prev)
        steady_flags.append(det.feed(prev).settled)
    assert all(steady_flags[-10:])  # healthy noise stays inside rel_spread
    t0 = now[0] + 0.2
    now[0] = t0
    bench.operate_by_hand("LB2", "open")
    det.restart(t0)
    flags, settled_at = [], None
    for k in range(1, 200):
        now[0] = t0 + 0.2 * k
        prev = bench.snapshot(now[0], 100 + k, prev)
        st = det.feed(prev)
        flags.append(st.settled)
        if st.settled and settled_at is None:
            settled_at = st.elapsed_s
            break
    assert not any(flags[:5])  # right after the operation the bench is moving
    assert settled_at is not None and settled_at < det.c.timeout_s
    assert np.isfinite(st.settle_time_s)
