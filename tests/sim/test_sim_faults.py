"""Simulated meters, faults, noise, PLC and transients: pure parts, no sockets.

Ideal readings here are hand-made balanced sets (a positive-sequence 230.94 V system, 10 A
per phase at a chosen power factor) whose derived values are computed in the test from
the textbook definitions, so every expected number has its own derivation beside it.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from meas.errors import BenchwalkError
from meas.modbus.codec import decode, encode
from meas.profile import load_profile
from meas.sim.bench import SimulatedBench
from meas.sim.faults import Fault, parse_fault, validate_faults
from meas.sim.meters import (
    apply_wiring,
    class_limit,
    meter_values,
    phasors_from_ideal,
    register_roundtrip,
    snapshot_from_sim,
)
from meas.sim.plc import PlcSim, Transient, remaining
from meas.snapshot import CommState, Quality

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"
V_LN = 400.0 / math.sqrt(3.0)  # 230.94 V, line-to-neutral of a 400 V system
PHI_08 = math.degrees(math.acos(0.8))  # 36.87 deg: PF 0.8


@pytest.fixture(scope="module")
def profile():
    return load_profile(DEMO)


def balanced(
    pf_angle_deg: float = 0.0, v: float = V_LN, i: float = 10.0, scale: float = 1.0
) -> dict[str, float]:
    """Positive sequence, B lags A by 120 deg; current lags its voltage by ``pf_angle_deg``."""
    out = {"f.T": 50.0}
    for n, ph in enumerate("ABC"):
        out[f"v_ln.{ph}"] = v * scale
        out[f"v_ang.{ph}"] = -120.0 * n
        out[f"i.{ph}"] = i * scale
        out[f"i_ang.{ph}"] = -120.0 * n - pf_angle_deg
    return out


def wrap(deg: float) -> float:
    return (deg + 180.0) % 360.0 - 180.0


def values(profile, meter, ideal, faults=(), noise=False, seed=1):
    return meter_values(
        profile, meter, ideal, list(faults), np.random.default_rng(seed), noise=noise
    )


# ---------------------------------------------------------------- parsing


def test_parse_every_kind():
    assert parse_fault("ct-reversed:M3:b") == Fault("ct-reversed", "M3", "B")
    assert parse_fault("phases-swapped:M2:B-C") == Fault("phases-swapped", "M2", "B-C")
    assert parse_fault("phases-swapped:M2:CA") == Fault("phases-swapped", "M2", "C-A")
    assert parse_fault("vt-ratio:M4:1.1") == Fault("vt-ratio", "M4", 1.1)
    assert parse_fault("ct-ratio:M5:0.8") == Fault("ct-ratio", "M5", 0.8)
    assert parse_fault("frozen:M1") == Fault("frozen", "M1")
    assert parse_fault("offline:M6") == Fault("offline", "M6")
    assert parse_fault("slow:M2:1.5") == Fault("slow", "M2", 1.5)
    assert parse_fault("exception:M3:4") == Fault("exception", "M3", 4.0)
    assert parse_fault("noisy:M1:5") == Fault("noisy", "M1", 5.0)
    assert parse_fault("exception:M3:4").text == "exception:M3:4"


@pytest.mark.parametrize(
    ("text", "says"),
    [
        ("reversed:M1:B", "unknown kind"),
        ("ct-reversed", "name the meter"),
        ("ct-reversed:M1", "missing PHASE"),
        ("ct-reversed:M1:D", "phase must be A, B or C"),
        ("phases-swapped:M1:B-B", "two phases"),
        ("vt-ratio:M1:abc", "is not a number"),
        ("ct-ratio:M1:-1", "positive number"),
        ("exception:M1:7", "exception code must be one of"),  # 7 is not defined in Modbus V1.1b3, 7
        ("offline:M1:3", "too many parts"),
    ],
)
def test_parse_errors_are_one_clear_line(text, says):
    with pytest.raises(BenchwalkError) as err:
        parse_fault(text)
    assert says in str(err.value) and "\n" not in str(err.value) and text in str(err.value)


def test_fault_on_unknown_meter_names_the_profile(profile):
    with pytest.raises(
        BenchwalkError, match=r"meter 'M9' is not in .*feeder_bench.toml; meters: M1"
    ):
        validate_faults(profile, [parse_fault("offline:M9")])


# ---------------------------------------------------------------- wiring faults, noise off


def test_no_fault_reproduces_the_textbook_balanced_set(profile):
    v = values(profile, "M1", balanced(PHI_08))  # PF 0.8 lagging
    p_ph = V_LN * 10.0 * 0.8  # P = V I cos(phi) per phase (textbook definition)
    q_ph = V_LN * 10.0 * 0.6
    assert v["p.A"] == pytest.approx(p_ph, rel=1e-9)
    assert v["q.B"] == pytest.approx(q_ph, rel=1e-9)
    assert v["p.T"] == pytest.approx(3 * p_ph, rel=1e-9)
    assert v["s.T"] == pytest.approx(3 * V_LN * 10.0, rel=1e-9)
    assert v["pf.T"] == pytest.approx(0.8, rel=1e-9)
    assert v["v_ll.AB"] == pytest.approx(400.0, rel=1e-9)  # sqrt(3) x V_LN, common practice
    assert v["i.N"] == pytest.approx(0.0, abs=1e-9)  # balanced currents sum to zero
    assert v["i_ang.B"] == pytest.approx(-120.0 - PHI_08, abs=1e-9)


def test_ct_reversed_b_matches_reference_signature_at_pf1(profile):
    """REFERENCES.md 2 [C]: CT of phase b reversed, balanced 1 pu at PF 1: per-phase P 1, -1, 1;
    P_total / P_true = 1/3; I2/I1 = 200 %."""
    ok = values(profile, "M1", balanced(0.0))
    bad = values(profile, "M1", balanced(0.0), [parse_fault("ct-reversed:M1:B")])
    p_true = ok["p.T"]
    assert [bad[f"p.{p}"] / ok[f"p.{p}"] for p in "ABC"] == pytest.approx([1, -1, 1], abs=1e-12)
    assert bad["p.T"] / p_true == pytest.approx(1 / 3, rel=1e-12)
    ph = phasors_from_ideal(balanced(0.0), 50.0)
    i = apply_wiring(ph, [parse_fault("ct-reversed:M1:B")]).i
    a = np.exp(2j * np.pi / 3)
    i1 = (i[0] + a * i[1] + a * a * i[2]) / 3  # Fortescue, REFERENCES.md 2
    i2 = (i[0] + a * a * i[1] + a * i[2]) / 3
    assert abs(i2) / abs(i1) == pytest.approx(2.0, rel=1e-12)


def test_ct_reversed_b_changes_exactly_what_it_should(profile):
    ideal = balanced(PHI_08)
    ok = values(profile, "M1", ideal)
    bad = values(profile, "M1", ideal, [parse_fault("ct-reversed:M1:B")])
    expected = dict(ok)
    expected["i_ang.B"] = wrap(ok["i_ang.B"] + 180.0)
    expected["p.B"], expected["q.B"], expected["pf.B"] = -ok["p.B"], -ok["q.B"], -ok["pf.B"]
    expected["p.T"] = ok["p.A"] - ok["p.B"] + ok["p.C"]
    expected["q.T"] = ok["q.A"] - ok["q.B"] + ok["q.C"]
    # vector S (lumen map): balanced phases carry equal complex S, so |S - S + S| = |S_phase|
    expected["s.T"] = ok["s.A"]
    expected["pf.T"] = expected["p.T"] / expected["s.T"]
    expected["i.N"] = 20.0  # Ia - Ib + Ic = -2 Ib for a balanced set, so |I_N| = 2 x 10 A
    assert set(bad) == set(ok)
    for k in ok:
        assert bad[k] == pytest.approx(expected[k], rel=1e-9, abs=1e-9), k


def test_phases_swapped_b_c_matches_reference_signature_at_pf1(profile):
    """REFERENCES.md 2 [C]: currents b and c swapped, balanced PF 1: per-phase P 1, -0.5, -0.5;
    P_total = 0."""
    ok = values(profile, "M1", balanced(0.0))
    bad = values(profile, "M1", balanced(0.0), [parse_fault("phases-swapped:M1:B-C")])
    assert [bad[f"p.{p}"] / ok[f"p.{p}"] for p in "ABC"] == pytest.approx(
        [1, -0.5, -0.5], abs=1e-12
    )
    assert bad["p.T"] == pytest.approx(0.0, abs=1e-9)
    assert bad["i_ang.B"] == pytest.approx(ok["i_ang.C"], abs=1e-9)
    assert bad["i_ang.C"] == pytest.approx(ok["i_ang.B"], abs=1e-9)
    # about 120 degrees between each swapped current and its own voltage (REFERENCES.md 2)
    assert abs(wrap(bad["i_ang.B"] - bad["v_ang.B"])) == pytest.approx(120.0, abs=1e-9)
    untouched = [
        k for k in ok if k.split(".")[0] in ("v_ln", "v_ll", "v_ang", "i", "f") or k.endswith(".A")
    ]
    for k in untouched:
        assert bad[k] == pytest.approx(ok[k], rel=1e-12, abs=1e-9), k


@pytest.mark.parametrize(
    ("fault", "v_factor", "i_factor"),
    [("vt-ratio:M1:1.1", 1.1, 1.0), ("ct-ratio:M1:0.8", 1.0, 0.8)],
)
def test_ratio_faults_scale_their_quantities_and_powers(profile, fault, v_factor, i_factor):
    ideal = balanced(25.0)
    ok = values(profile, "M1", ideal)
    bad = values(profile, "M1", ideal, [parse_fault(fault)])
    for k, x in ok.items():
        q = k.split(".")[0]
        factor = {"v_ln": v_factor, "v_ll": v_factor, "i": i_factor}.get(q, 1.0)
        if q in ("p", "q", "s"):
            factor = v_factor * i_factor  # P = V I cos(phi): a ratio error carries into power
        assert bad[k] == pytest.approx(x * factor, rel=1e-12, abs=1e-9), k


def test_secondary_meter_reports_primary_divided_by_its_ratios(profile):
    """M3 reports secondary through CT 50/5 A (ratio 10) and VT 400/100 V (ratio 4)."""
    ideal = balanced(20.0, i=30.0)
    m3 = values(profile, "M3", ideal)
    primary = values(profile, "M1", ideal)  # same ideal, a primary meter of the same bench
    assert m3["v_ln.A"] == pytest.approx(primary["v_ln.A"] / 4.0, rel=1e-12)
    assert m3["i.B"] == pytest.approx(primary["i.B"] / 10.0, rel=1e-12)
    assert m3["p.T"] == pytest.approx(primary["p.T"] / 40.0, rel=1e-12)
    assert m3["pf.T"] == pytest.approx(primary["pf.T"], rel=1e-12)
    assert "v_ang.A" not in m3  # the corvid map has no angles: only the map's keys are kept


def test_apparent_power_follows_the_map_definition(profile):
    """IEEE Std 1459-2010 [M definitions, C values]: vector S = |sum of complex S|; arithmetic
    S = sum of |S|; only vector S satisfies S^2 = P^2 + Q^2 under unbalance."""
    ideal = balanced(10.0)
    ideal["i.C"], ideal["i_ang.C"] = 4.0, 120.0 - 60.0  # phase C: 4 A at 60 deg lagging
    vec = values(profile, "M1", ideal)  # lumen: vector
    ari = values(profile, "M5", ideal)  # wren: arithmetic
    assert vec["s.T"] == pytest.approx(math.hypot(vec["p.T"], vec["q.T"]), rel=1e-12)
    assert ari["s.T"] == pytest.approx(ari["s.A"] + ari["s.B"] + ari["s.C"], rel=1e-12)
    assert ari["s.T"] > math.hypot(ari["p.T"], ari["q.T"]) * 1.001


# ---------------------------------------------------------------- noise


def _rel_errors(profile, meter, ideal, key, n, faults=()):
    ref = values(profile, meter, ideal)[key]
    rng = np.random.default_rng(20261201)
    got = np.array([meter_values(profile, meter, ideal, list(faults), rng)[key] for _ in range(n)])
    return (got - ref) / ref, got


def test_noise_sigma_and_clip_follow_the_agreed_model(profile):
    """Agreed model (meas/sim/meters.py): sigma = 0.1 x class limit, clipped at 0.5 x limit."""
    ideal = balanced(0.0)
    lim_v = class_limit(profile.meter("M1").classes.v)  # "0.5" -> 0.5 %
    ev, _ = _rel_errors(profile, "M1", ideal, "v_ln.A", 2000)
    assert np.abs(ev).max() <= 0.5 * lim_v + 1e-15
    assert np.std(ev) == pytest.approx(
        0.1 * lim_v, rel=0.08
    )  # std of n=2000 samples: +-1.6 % (1 sigma)
    assert abs(np.mean(ev)) < 4 * 0.1 * lim_v / math.sqrt(2000)
    _, f = _rel_errors(profile, "M1", ideal, "f.T", 2000)
    assert np.std(f) == pytest.approx(0.002, rel=0.08) and np.abs(f - 50.0).max() <= 0.01
    e5, _ = _rel_errors(profile, "M1", ideal, "v_ln.A", 2000, [parse_fault("noisy:M1:5")])
    assert np.std(e5) == pytest.approx(5 * 0.1 * lim_v, rel=0.08)
    assert np.abs(e5).max() <= 5 * 0.5 * lim_v + 1e-15


@pytest.mark.parametrize("phi_deg", [0.0, 60.0])  # PF 1 and PF 0.5 inductive
def test_active_power_noise_stays_inside_iec_62053_21_class_1(profile, phi_deg):
    """IEC 62053-21 class 1, 0.1 In..Imax: 1.0 % at PF 1 and at PF 0.5 ind (REFERENCES.md 3 [V])."""
    assert profile.meter("M5").classes.p == "1"
    ep, _ = _rel_errors(profile, "M5", balanced(phi_deg), "p.T", 2000)
    assert np.abs(ep).max() < 0.010
    ea, _ = _rel_errors(profile, "M5", balanced(phi_deg), "p.A", 2000)
    assert np.abs(ea).max() < 0.010


def test_noisy_readings_keep_meter_internal_sums_exact(profile):
    rng = np.random.default_rng(7)
    for _ in range(200):
        v = meter_values(profile, "M1", balanced(30.0), [], rng)
        assert v["p.T"] == pytest.approx(v["p.A"] + v["p.B"] + v["p.C"], rel=1e-12)
        assert v["q.T"] == pytest.approx(v["q.A"] + v["q.B"] + v["q.C"], rel=1e-12)
        assert v["s.T"] == pytest.approx(math.hypot(v["p.T"], v["q.T"]), rel=1e-12)
        assert v["pf.A"] == pytest.approx(v["p.A"] / v["s.A"], rel=1e-12)
        assert abs(v["f.T"] - 50.0) <= 0.01  # clip = 5 sigma, sigma 0.002 Hz


def test_noise_is_reproducible_from_the_seed(profile):
    a = values(profile, "M1", balanced(30.0), noise=True, seed=42)
    b = values(profile, "M1", balanced(30.0), noise=True, seed=42)
    c = values(profile, "M1", balanced(30.0), noise=True, seed=43)
    assert a == b and a != c


# ---------------------------------------------------------------- registers and snapshots


def test_register_roundtrip_is_within_resolution(profile):
    rmap = profile.maps["wren-i16"]
    v = values(profile, "M5", balanced(30.0))
    back = register_roundtrip(rmap, v)
    for r in rmap.registers:
        assert abs(back[r.key] - v[r.key]) <= r.scale / 2 + 1e-9, r.key
        assert back[r.key] == decode(r, encode(r, v[r.key]))


@dataclass
class HandState:
    meters: dict
    energized: dict


def hand_readings(profile, states):
    """Hand-made ideal readings: every meter sees the same balanced set, scaled to zero when
    the feeder breaker CB1 is open, and to 0.5 when the sectionaliser SW2 is open."""
    k = 0.0 if states.get("CB1") == "open" else (0.5 if states.get("SW2") == "open" else 1.0)
    ideal = balanced(30.0, scale=k)
    return HandState({m.id: dict(ideal) for m in profile.meters}, {})


def test_snapshot_from_sim_is_primary_and_carries_comm_faults(profile):
    states = {s.id: s.normal for s in profile.switches}
    ideal = hand_readings(profile, states)
    faults = [
        parse_fault("offline:M6"),
        parse_fault("exception:M3:4"),
        parse_fault("slow:M2:1.5"),
        parse_fault("slow:M7:0.1"),
    ]
    snap = snapshot_from_sim(
        profile, states, faults, np.random.default_rng(1), seq=3, noise=False, ideal=ideal
    )
    assert snap.seq == 3 and dict(snap.switches) == states
    m1 = snap.meters["M1"]
    assert m1.state is CommState.OK and m1.ok("p.T")
    assert m1.get("v_ln.A") == pytest.approx(V_LN, abs=1e-4)  # float32 resolution
    m3 = snap.meters["M3"]  # offline? no: exception code 4, every value NaN with quality exception
    assert (
        m3.exception_code == 4
        and m3.quality["p.T"] is Quality.EXCEPTION
        and math.isnan(m3.values["p.T"])
    )
    assert snap.meters["M6"].quality["v_ln.A"] is Quality.TIMEOUT
    assert snap.meters["M2"].quality["v_ln.A"] is Quality.TIMEOUT  # 1.5 s > its 0.5 s timeout
    assert snap.meters["M7"].ok("p.T") and snap.meters["M7"].latency_s == pytest.approx(0.1)
    m5 = snapshot_from_sim(
        profile, states, [], np.random.default_rng(1), 4, noise=False, ideal=ideal
    ).meters["M5"]
    m3ok = snapshot_from_sim(
        profile, states, [], np.random.default_rng(1), 4, noise=False, ideal=ideal
    ).meters["M3"]
    # secondary corvid meter back to primary: 0.01 V secondary resolution x VT ratio 4
    assert m3ok.get("v_ln.B") == pytest.approx(V_LN, abs=0.04 / 2 + 1e-9)
    assert m5.get("p.T") == pytest.approx(
        3 * V_LN * 10 * math.cos(math.radians(30)), abs=0.5
    )  # int16, 1 W


def test_snapshot_from_sim_with_a_silent_plc_reads_every_switch_unknown(profile):
    states = {s.id: s.normal for s in profile.switches}
    ideal = hand_readings(profile, states)
    snap = snapshot_from_sim(
        profile,
        states,
        [parse_fault("offline:PLC1")],
        np.random.default_rng(1),
        seq=1,
        noise=False,
        ideal=ideal,
    )
    assert set(snap.switches.values()) == {"unknown"}
    assert snap.meters["M1"].state is CommState.OK


def test_frozen_meter_repeats_previous_snapshot(profile):
    states = {s.id: s.normal for s in profile.switches}
    rng = np.random.default_rng(5)
    first = snapshot_from_sim(profile, states, [], rng, 1, ideal=hand_readings(profile, states))
    states2 = dict(states, SW2="open")
    later = snapshot_from_sim(
        profile,
        states2,
        [parse_fault("frozen:M1")],
        rng,
        2,
        ideal=hand_readings(profile, states2),
        previous=first,
    )
    assert dict(later.meters["M1"].values) == dict(first.meters["M1"].values)
    assert later.meters["M7"].get("p.T") == pytest.approx(
        first.meters["M7"].get("p.T") * 0.25, rel=0.02
    )


# ---------------------------------------------------------------- PLC and transients


def test_command_coil_moves_status_after_operate_time(profile):
    plc = PlcSim(profile, t=0.0)
    cb1 = profile.switch("CB1")  # command coil 0, status discrete 0, operate 0.15 s
    assert plc.command_coil(cb1.command_coil, False, t=10.0)
    plc.advance(10.0 + cb1.operate_time_s - 1e-6)
    assert plc.states()["CB1"] == "closed" and ("discrete", 0, True) in plc.status_bits()
    assert plc.advance(10.0 + cb1.operate_time_s) == ["CB1"]
    assert plc.states()["CB1"] == "open" and ("discrete", 0, False) in plc.status_bits()
    assert not plc.command_coil(2, True, t=11.0)  # SW3 is manual: coil 2 commands nothing
    plc.operate_by_hand("TIE", "closed", t=12.0)
    plc.advance(12.0 + profile.switch("TIE").operate_time_s)
    assert plc.states()["TIE"] == "closed"
    with pytest.raises(BenchwalkError, match="not in"):
        plc.operate_by_hand("XX", "open", t=13.0)


def test_first_order_transient_is_63_percent_done_at_tau():
    """First-order step response reaches 1 - 1/e = 63.2 % at t = tau (common practice)."""
    assert 1.0 - remaining("first_order", 2.0, 2.0) == pytest.approx(0.632120, abs=1e-6)
    assert remaining("first_order", 2.0, 0.0) == 1.0 and remaining("first_order", 2.0, 40.0) < 1e-8


def test_damped_transient_overshoots_slightly():
    """Second-order step, zeta 0.7: peak overshoot exp(-pi zeta / sqrt(1 - zeta^2)) = 4.60 %
    (standard second-order response formula, from memory)."""
    t = np.linspace(0.0, 20.0, 20001)
    r = np.array([remaining("damped", 1.5, x) for x in t])
    assert -r.min() == pytest.approx(math.exp(-math.pi * 0.7 / math.sqrt(1 - 0.49)), rel=1e-3)
    assert abs(r[-1]) < 1e-4


def test_transient_is_continuous_when_retargeted():
    a = phasors_from_ideal(balanced(0.0), 50.0)
    b = phasors_from_ideal(balanced(0.0, scale=0.0), 50.0)
    tr = Transient("first_order", 1.0, {"M": a}, t=0.0)
    tr.retarget({"M": b}, t=1.0)
    mid = tr.at(1.5)["M"]
    tr.retarget({"M": a}, t=1.5)
    assert np.allclose(tr.at(1.5)["M"].v, mid.v)
    assert abs(tr.at(1.5 + 1.0)["M"].v[0]) == pytest.approx(
        V_LN * (1 - (1 - math.exp(-0.5)) * math.exp(-1)), rel=1e-9
    )


def test_bench_transient_after_breaker_opens_has_the_profile_time_constant(profile):
    prof = dataclasses.replace(
        profile, sim={**profile.sim, "transient": "first_order", "settle_s": 1.0}
    )
    clock = [100.0]
    bench = SimulatedBench(prof, noise=False, readings=hand_readings, clock=lambda: clock[0])
    before = bench.compute(100.0)["M1"]["v_ln.A"]
    bench.plc.command_coil(0, False, t=100.0)  # CB1 open, operate 0.15 s
    t_change = 100.0 + prof.switch("CB1").operate_time_s
    assert bench.compute(t_change - 1e-3)["M1"]["v_ln.A"] == pytest.approx(before)
    bench.compute(t_change)
    at_tau = bench.compute(t_change + 1.0)["M1"]["v_ln.A"]
    # |V| of collinear phasors blends linearly: 63.2 % of the step gone at t = tau
    assert (before - at_tau) / before == pytest.approx(1 - math.exp(-1), abs=1e-9)
    assert bench.loads == 2  # one load flow per switch state, cached afterwards
    bench.compute(t_change + 30.0)
    assert bench.loads == 2


def test_bench_frozen_meter_keeps_values_while_others_follow_switching(profile):
    clock = [0.0]
    bench = SimulatedBench(
        profile, [parse_fault("frozen:M1")], seed=3, readings=hand_readings, clock=lambda: clock[0]
    )
    first = bench.compute(0.0)
    bench.values = first  # what update() records after writing
    bench.operate_by_hand("SW2", "open")
    later = bench.compute(60.0)  # long after the transient
    assert later["M1"] == first["M1"]
    assert later["M8"]["p.T"] == pytest.approx(first["M8"]["p.T"] * 0.25, rel=0.02)
    assert bench.switch_states()["SW2"] == "open"


def test_energy_counters_integrate_measured_power(profile):
    clock = [0.0]
    bench = SimulatedBench(profile, noise=False, readings=hand_readings, clock=lambda: clock[0])
    for n in range(0, 361):
        v = bench.compute(10.0 * n)["M1"]
    p_t = v["p.T"]
    assert v["e_imp.T"] == pytest.approx(p_t * 1.0, rel=1e-6)  # 1 h at constant P: Wh = W x h
    assert v["e_exp.T"] == 0.0


def test_bench_snapshots_without_sockets_follow_the_transient(profile):
    """Settle detectors can be tested in-process: snapshots through a real first-order transient."""
    prof = dataclasses.replace(
        profile, sim={**profile.sim, "transient": "first_order", "settle_s": 0.5}
    )
    bench = SimulatedBench(
        prof,
        [parse_fault("exception:M3:4")],
        noise=False,
        readings=hand_readings,
        clock=lambda: 0.0,
    )
    s0 = bench.snapshot(0.0, seq=0)
    bench.operate_by_hand("SW2", "open")  # at t = 0 by the bench clock; 0.4 s mechanism
    t_move = profile.switch("SW2").operate_time_s
    snaps = [bench.snapshot(t_move + 0.05 * k, seq=k + 1) for k in range(60)]
    v = np.array([s.meters["M1"].get("v_ln.A") for s in snaps])
    v0, v_end = s0.meters["M1"].get("v_ln.A"), V_LN * 0.5
    frac_left = (v - v_end) / (v0 - v_end)
    t = 0.05 * np.arange(60)
    assert np.allclose(frac_left, np.exp(-t / 0.5), atol=1e-6)  # float32 registers: ~1e-7 relative
    assert snaps[0].meters["M3"].exception_code == 4 and snaps[-1].switches["SW2"] == "open"


def test_frequency_is_never_blended_through_a_transient():
    """A meter reads the system frequency or, once its supply has gone, zero: never 25 Hz."""
    import numpy as np

    from meas.sim.meters import F_CUTOFF_REMAINING, Phasors, blend

    live = Phasors(np.full(3, 230.0 + 0j), np.zeros(3, dtype=complex), 50.0)
    dead = Phasors(np.zeros(3, dtype=complex), np.zeros(3, dtype=complex), 0.0)
    # energizing: nominal at once, even with most of the voltage step still to go
    assert blend(dead, live, 0.9).f == 50.0
    # de-energizing: nominal while the voltage decays, zero below the cut-off
    assert blend(live, dead, 0.5).f == 50.0
    assert blend(live, dead, F_CUTOFF_REMAINING * 0.5).f == 0.0
    assert abs(blend(live, dead, 0.5).v[0] - 115.0) < 1e-9
