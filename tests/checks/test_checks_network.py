"""Network checks on hand-built snapshots: Kirchhoff at a bus against the GUM budget, switching,
energization, and naming the wrong meter from the redundancy."""

from __future__ import annotations

import numpy as np
import pytest
from support.check_inputs import balanced, block, demo, one_bus_profile, snapshot

from meas import phasors as ph
from meas.checks import CheckEngine
from meas.results import Status


def _get(results, check, subject):
    (r,) = [r for r in results if r.check == check and r.subject == subject]
    return r


def _feed(profile, mid, p_w, phi_deg=0.0, sign=1.0, scale=1.0):
    """A meter block carrying p_w (three-phase) at the given angle; sign -1 = power into the bus."""
    i_mag = abs(p_w) / 3.0 / 230.0 / np.cos(np.radians(phi_deg))
    v, i = balanced(230.0, i_mag, phi_deg)
    return block(profile, mid, v, sign * i * scale)


@pytest.fixture(scope="module")
def gum_bus():
    # REFERENCES.md 3 worked bus [C]: incomer (class 0.5S) 10.0 and feeders (class 1) 4.0, 3.5, 2.45,
    # here in kW on the bench; CT 50 A keeps every current in the main range of its class table
    return one_bus_profile(demo(), [("F1", "1"), ("F2", "1"), ("F3", "1")], ct_a=50.0)


def test_gum_worked_bus_passes_with_the_published_budget(gum_bus):
    eng = CheckEngine(gum_bus)
    blocks = [
        _feed(gum_bus, "IN", 10000.0, sign=-1.0),
        _feed(gum_bus, "F1", 4000.0),
        _feed(gum_bus, "F2", 3500.0),
        _feed(gum_bus, "F3", 2450.0),
    ]
    res = eng.run(snapshot(blocks))
    r = _get(res, "network.p_balance", "B1")
    # residual 0.05 MW -> 50 W here; U(k=2) = 0.08888 MW -> 88.88 W (REFERENCES.md 3 [C])
    assert r.value == pytest.approx(-50.0, abs=1e-6)
    assert r.limit == pytest.approx(88.88, rel=1e-3)
    assert r.status is Status.PASS
    assert _get(res, "network.p_balance", "B0").status is Status.NA  # the source is not metered


def test_bus_imbalance_beyond_the_budget_fails(gum_bus):
    eng = CheckEngine(gum_bus)
    blocks = [
        _feed(gum_bus, "IN", 10050.0, sign=-1.0),
        _feed(gum_bus, "F1", 4000.0),
        _feed(gum_bus, "F2", 3500.0),
        _feed(gum_bus, "F3", 2450.0),
    ]
    r = _get(eng.run(snapshot(blocks)), "network.p_balance", "B1")
    assert r.status is Status.FAIL and r.value == pytest.approx(-100.0, abs=1e-6)


def test_ct_ratio_error_is_traced_to_its_meter(gum_bus):
    eng = CheckEngine(gum_bus)
    # feeders with different power factors, so each one's power points its own way
    blocks = [
        _feed(gum_bus, "F1", 4000.0, 25.0),
        _feed(gum_bus, "F2", 3500.0, 0.0, scale=1.1),
        _feed(gum_bus, "F3", 2450.0, -30.0),
    ]
    s_in = -sum(b.values["p.T"] + 1j * b.values["q.T"] for b in blocks) + (0.1 / 1.1) * (
        blocks[1].values["p.T"] + 1j * blocks[1].values["q.T"]
    )
    v = ph.phasor([230.0] * 3, [0.0, -120.0, 120.0])
    i_in = np.conj(s_in / 3.0 / v)
    blocks.append(block(gum_bus, "IN", v, i_in))
    res = eng.run(snapshot(blocks))
    assert _get(res, "network.p_balance", "B1").status is Status.FAIL
    r = _get(res, "network.bad_data", "F2")
    assert r.status is Status.FAIL
    kind, k = r.cause.split(":")
    assert kind == "ct_ratio" and float(k) == pytest.approx(1.1, rel=0.02)


def test_open_switch_carrying_current_fails():
    prof = demo()
    eng = CheckEngine(prof)
    sw = {
        s.id: s.normal for s in prof.switches
    }  # RX (reactor contactor, branch SH1) is normally open
    v, i = balanced(230.0, 4.0, 89.0)
    res = eng.run(snapshot([block(prof, "M6", v, i)], sw))
    r = _get(res, "network.open_switch", "RX")
    assert r.status is Status.FAIL and r.cause == "switch_status:RX" and "M6" in r.message
    v0, i0 = balanced(230.0, 0.0, 0.0)
    assert (
        _get(eng.run(snapshot([block(prof, "M6", v0, i0)], sw)), "network.open_switch", "RX").status
        is Status.PASS
    )


def test_live_bus_without_voltage_and_dead_bus_with_voltage():
    prof = demo()
    eng = CheckEngine(prof)
    sw = {s.id: s.normal for s in prof.switches}
    dead_v, dead_i = balanced(0.0, 0.0, 0.0)
    r = _get(
        eng.run(snapshot([block(prof, "M5", dead_v, dead_i, f=0.0)], sw)),
        "network.energization",
        "B3",
    )
    assert r.status is Status.FAIL and r.cause == "energization:B3"
    sw_open = dict(sw, CB1="open")  # nothing is fed: every bus must be dead
    v, i = balanced(230.0, 5.0, 20.0)
    r = _get(eng.run(snapshot([block(prof, "M5", v, i)], sw_open)), "network.energization", "B3")
    assert r.status is Status.FAIL
    assert (
        _get(eng.run(snapshot([block(prof, "M5", v, i)], sw)), "network.energization", "B3").status
        is Status.PASS
    )


def test_voltages_on_one_bus_agree_and_an_outlier_is_named():
    prof = demo()
    eng = CheckEngine(prof)
    v, i = balanced(228.0, 8.0, 20.0)
    ok = [block(prof, m, v, i) for m in ("M4", "M6", "M7", "M8")]  # all on B2
    assert _get(eng.run(snapshot(ok)), "network.v_agree", "B2").status is Status.PASS
    off = ok[:3] + [block(prof, "M8", v * 1.1, i)]
    res = eng.run(snapshot(off))
    r = _get(res, "network.v_agree", "B2")
    assert (
        r.status is Status.FAIL
        and "M8" in r.message
        and float(r.cause.split(":")[1]) == pytest.approx(1.1, rel=1e-3)
    )
