"""Meter-internal checks on hand-built snapshots (readings derived from phasors, see support)."""

from __future__ import annotations

import pytest
from support.check_inputs import balanced, block, demo, snapshot

from meas import phasors as ph
from meas.checks import CheckEngine
from meas.results import Status


@pytest.fixture(scope="module")
def engine():
    return CheckEngine(demo())


def _get(results, check, subject):
    (r,) = [r for r in results if r.check == check and r.subject == subject]
    return r


def _run(engine, blk):
    return engine.run(snapshot([blk]))


def test_consistent_meter_passes_every_internal_check(engine):
    v, i = balanced(230.0, 20.0, 25.0)
    res = _run(engine, block(engine.profile, "M1", v, i))
    for check in (
        "meter.p_sum",
        "meter.q_sum",
        "meter.s_total",
        "meter.pf",
        "meter.s_phase",
        "meter.frequency",
    ):
        assert _get(res, check, "M1").status is Status.PASS, check


def test_total_with_wrong_scale_fails_and_names_the_map(engine):
    v, i = balanced(230.0, 20.0, 25.0)
    good = block(engine.profile, "M1", v, i)
    bad = block(
        engine.profile, "M1", v, i, **{"p.T": good.values["p.T"] * 10}
    )  # a scale error of 10 in the map
    r = _get(_run(engine, bad), "meter.p_sum", "M1")
    assert r.status is Status.FAIL and r.cause == "register_map:p" and "lumen-f32" in r.message


def test_small_total_error_inside_class_passes(engine):
    v, i = balanced(230.0, 20.0, 25.0)
    good = block(engine.profile, "M1", v, i)
    # 0.2 % on p.T is inside class 0.5S (IEC 62053-22: 0.5 % [M]) taken RSS with the phases
    r = _get(
        _run(engine, block(engine.profile, "M1", v, i, **{"p.T": good.values["p.T"] * 1.002})),
        "meter.p_sum",
        "M1",
    )
    assert r.status is Status.PASS


def test_vector_definition_on_unbalanced_load(engine):
    # IEEE Std 1459-2010 [M]: for the vector definition S = sqrt(P^2 + Q^2); the arithmetic sum is larger
    v = ph.phasor([230.0] * 3, [0.0, -120.0, 120.0])
    i = ph.phasor([20.0, 10.0, 5.0], [-10.0, -120.0 - 60.0, 120.0 + 30.0])
    blk = block(engine.profile, "M1", v, i)  # lumen-f32 declares "vector"
    assert _get(_run(engine, blk), "meter.s_total", "M1").status is Status.PASS
    s_ar = sum(blk.values[f"s.{p}"] for p in "ABC")
    r = _get(
        _run(engine, block(engine.profile, "M1", v, i, **{"s.T": s_ar})), "meter.s_total", "M1"
    )
    assert r.status is Status.FAIL and r.cause == "s_definition"
    assert "vector" in r.message


def test_arithmetic_definition_meter(engine):
    v = ph.phasor([230.0] * 3, [0.0, -120.0, 120.0])
    i = ph.phasor([20.0, 10.0, 5.0], [-10.0, -180.0, 150.0])
    blk = block(engine.profile, "M3", v, i)  # corvid-i32 declares "arithmetic"
    assert _get(_run(engine, blk), "meter.s_total", "M3").status is Status.PASS


def test_pf_with_lead_lag_sign_is_named(engine):
    v, i = balanced(
        230.0, 20.0, -30.0
    )  # capacitive: IEC pf positive (sign of P), IEEE lead/lag would be negative
    blk = block(engine.profile, "M1", v, i)
    flipped = block(
        engine.profile,
        "M1",
        v,
        i,
        **{f"pf.{p}": -blk.values[f"pf.{p}"] for p in ("A", "B", "C", "T")},
    )
    r = _get(_run(engine, flipped), "meter.pf", "M1")
    assert r.status is Status.FAIL and r.cause == "pf_sign_convention"


def test_phase_s_against_v_times_i(engine):
    v, i = balanced(230.0, 20.0, 25.0)
    blk = block(engine.profile, "M1", v, i, **{"s.B": 230.0 * 20.0 * 1.05})  # 5 % off
    r = _get(_run(engine, blk), "meter.s_phase", "M1")
    assert r.status is Status.FAIL and "s.B" in r.message


def test_frequency_band(engine):
    v, i = balanced()
    # CheckSettings.frequency_band_hz = 0.5 (model default)
    assert (
        _get(
            _run(engine, block(engine.profile, "M1", v, i, f=50.2)), "meter.frequency", "M1"
        ).status
        is Status.PASS
    )
    assert (
        _get(
            _run(engine, block(engine.profile, "M1", v, i, f=50.4)), "meter.frequency", "M1"
        ).status
        is Status.WARN
    )
    assert (
        _get(
            _run(engine, block(engine.profile, "M1", v, i, f=50.6)), "meter.frequency", "M1"
        ).status
        is Status.FAIL
    )
    # a dead meter has no frequency to judge
    assert (
        _get(
            _run(engine, block(engine.profile, "M1", v * 0, i * 0, f=0.0)), "meter.frequency", "M1"
        ).status
        is Status.NA
    )


def test_bad_accuracy_class_is_one_line_naming_the_meter():
    import dataclasses

    from meas.errors import BenchwalkError
    from meas.model import AccuracyClasses

    prof = demo()
    m = dataclasses.replace(prof.meters[0], classes=AccuracyClasses(p="gold"))
    with pytest.raises(BenchwalkError) as exc:
        CheckEngine(dataclasses.replace(prof, meters=(m, *prof.meters[1:])))
    assert "meter M1" in str(exc.value) and "\n" not in str(exc.value)
