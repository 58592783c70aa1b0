"""Data-quality checks: communication, range, frozen values and excess noise."""

from __future__ import annotations

import numpy as np
import pytest
from support.check_inputs import balanced, block, demo, snapshot

from meas.checks import CheckEngine
from meas.results import Status
from meas.sim.faults import parse_fault
from meas.sim.meters import snapshot_from_sim
from meas.sim.readings import ideal_readings
from meas.snapshot import CommState, MeterBlock, Quality


@pytest.fixture(scope="module")
def engine():
    return CheckEngine(demo())


def _get(results, check, subject):
    (r,) = [r for r in results if r.check == check and r.subject == subject]
    return r


def test_missing_failing_and_partial_meters(engine):
    prof = engine.profile
    v, i = balanced()
    good = block(prof, "M1", v, i)
    res = engine.run(snapshot([good]))
    assert _get(res, "quality.comm", "M1").status is Status.PASS
    assert _get(res, "quality.comm", "M2").cause == "missing"
    keys = list(good.values)
    dead = MeterBlock(
        "M1",
        dict.fromkeys(keys, float("nan")),
        dict.fromkeys(keys, Quality.TIMEOUT),
        CommState.FAILING,
        error="M1: no answer within 0.5 s",
    )
    r = _get(engine.run(snapshot([dead])), "quality.comm", "M1")
    assert r.status is Status.FAIL and "no answer" in r.message
    q = dict(good.quality)
    q["p.B"] = Quality.DECODE
    part = MeterBlock("M1", good.values, q, CommState.DEGRADED)
    r = _get(engine.run(snapshot([part])), "quality.comm", "M1")
    assert r.status is Status.WARN and "p.B" in r.message
    # a bad value never enters the arithmetic as a number: p_sum is n/a, not a failure
    assert _get(engine.run(snapshot([part])), "meter.p_sum", "M1").status is Status.NA


def test_out_of_range_values(engine):
    prof = engine.profile
    v, i = balanced(
        230.94 * 1.2, 10.0, 20.0
    )  # 20 % over the 400 V zone; CheckSettings.voltage_band = 0.15
    r = _get(engine.run(snapshot([block(prof, "M1", v, i)])), "quality.v_range", "M1")
    assert r.status is Status.FAIL and r.value == pytest.approx(20.0, abs=0.01)
    v, i = balanced(
        230.94, 100.0, 20.0
    )  # M1 CT rated 80 A: 125 %, beyond the 120 % extended rating
    r = _get(engine.run(snapshot([block(prof, "M1", v, i)])), "quality.i_range", "M1")
    assert r.status is Status.FAIL and r.value == pytest.approx(125.0)


def _series(prof, faults, n, seed=5):
    sw = {s.id: s.normal for s in prof.switches}
    ideal = ideal_readings(prof, sw)
    rng = np.random.default_rng(seed)
    out, prev = [], None
    for k in range(n):
        prev = snapshot_from_sim(
            prof, sw, faults, rng, k, ideal=ideal, t_mono=0.2 * k, previous=prev
        )
        out.append(prev)
    return out


def test_frozen_meter_is_found_only_with_enough_history(engine):
    prof = engine.profile
    snaps = _series(prof, [parse_fault("frozen:M2")], 14)
    n = prof.checks.frozen_cycles
    short = engine.run(snaps[n - 2], snaps[: n - 2])
    assert _get(short, "quality.frozen", "M2").status is Status.NA
    res = engine.run(snaps[-1], snaps[:-1])
    assert _get(res, "quality.frozen", "M2").status is Status.FAIL
    assert (
        _get(res, "quality.frozen", "M1").status is Status.PASS
    )  # a healthy meter moves in its last digits


def test_noisy_meter(engine):
    prof = engine.profile
    snaps = _series(prof, [parse_fault("noisy:M8:5")], 12)
    res = engine.run(snaps[-1], snaps[:-1])
    assert _get(res, "quality.noise", "M8").status is Status.FAIL
    assert _get(res, "quality.noise", "M1").status is Status.PASS
