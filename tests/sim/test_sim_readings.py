"""Ideal meter readings of the simulated bench: conventions, balances and dead parts.

Sources: IEEE Std 1459-2010 definitions of arithmetic and vector apparent power (from
memory, REFERENCES.md 4); IEC power-factor sign convention (sign of P; from memory);
pandapower 3.5 ``runpp`` (res_line p_from/p_to positive into the line; REFERENCES.md 8);
trigonometric identities P = |V||I| cos(phi), Q = |V||I| sin(phi) and the law of cosines
(common practice); Kirchhoff's current law at a bus (common practice).
"""

from __future__ import annotations

import dataclasses
import math
import pathlib
import time

import numpy as np
import pandapower as pp
import pytest

from meas.model import LoadParams, Meter, Profile, TcpTransport
from meas.profile import load_profile
from meas.quantities import all_keys
from meas.sim.readings import dead_values, ideal_readings, meter_values

DEMO = pathlib.Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"
PH = ("A", "B", "C")


@pytest.fixture(scope="module")
def demo() -> Profile:
    return load_profile(str(DEMO))


def expected_keys() -> set[str]:
    return {k for k in all_keys() if not k.startswith(("e_imp", "e_exp"))}


def test_every_meter_has_every_quantity(demo):
    st = ideal_readings(demo, {"TIE": "closed", "RX": "closed"})
    assert set(st.meters) == {m.id for m in demo.meters}
    for vals in st.meters.values():
        assert set(vals) == expected_keys()
        assert all(math.isfinite(v) for v in vals.values())


def test_per_phase_power_matches_magnitudes_and_angles(demo):
    """P = |V||I| cos(v_ang - i_ang), Q = |V||I| sin(...) per phase; totals are sums (common practice)."""
    st = ideal_readings(demo, {"TIE": "closed", "RX": "closed"})
    for mid, r in st.meters.items():
        for ph in PH:
            phi = math.radians(r[f"v_ang.{ph}"] - r[f"i_ang.{ph}"])
            vi = r[f"v_ln.{ph}"] * r[f"i.{ph}"]
            assert r[f"p.{ph}"] == pytest.approx(vi * math.cos(phi), abs=1e-9 * max(vi, 1)), mid
            assert r[f"q.{ph}"] == pytest.approx(vi * math.sin(phi), abs=1e-9 * max(vi, 1)), mid
            assert r[f"s.{ph}"] == pytest.approx(vi, rel=1e-12)
        assert r["p.T"] == pytest.approx(sum(r[f"p.{ph}"] for ph in PH), rel=1e-12)
        assert r["q.T"] == pytest.approx(sum(r[f"q.{ph}"] for ph in PH), rel=1e-12)


def test_voltage_conventions(demo):
    """v_ang.A = 0, positive sequence (B about -120, C about +120 degrees); v_ll from the law of cosines."""
    r = ideal_readings(demo, {}).meters["M1"]
    assert r["v_ang.A"] == 0.0
    assert r["v_ang.B"] == pytest.approx(-120.0, abs=2.0)
    assert r["v_ang.C"] == pytest.approx(120.0, abs=2.0)
    for a, b in (("A", "B"), ("B", "C"), ("C", "A")):
        d = math.radians(r[f"v_ang.{a}"] - r[f"v_ang.{b}"])
        va, vb = r[f"v_ln.{a}"], r[f"v_ln.{b}"]
        assert r[f"v_ll.{a}{b}"] == pytest.approx(
            math.sqrt(va**2 + vb**2 - 2 * va * vb * math.cos(d)), rel=1e-12
        )
    assert r["f.T"] == demo.bench.frequency_hz


def test_neutral_current_is_the_phasor_sum(demo):
    r = ideal_readings(demo, {}).meters["M5"]  # load bank 2, unbalanced
    i = sum(r[f"i.{ph}"] * np.exp(1j * math.radians(r[f"i_ang.{ph}"])) for ph in PH)
    assert r["i.N"] == pytest.approx(abs(i), rel=1e-12)
    assert r["i.N"] > 1.0  # unbalanced: a real residual current
    # with load bank 2 (the only unbalanced element) switched out the bench is balanced: no residual
    m8 = ideal_readings(demo, {"LB2": "open"}).meters["M8"]
    assert m8["i.N"] < 1e-9 * m8["i.A"]


def test_receiving_end_meter_reads_negative_and_losses_are_the_sum(demo):
    """M2 (B1 end of L2) and M7 (B2 end): power flows B1 -> B2, so M7 reads negative P and a
    negative pf (IEC: pf carries the sign of P); line losses = p_from + p_to. The loss is
    cross-checked with R * sum |I_series|^2 of the pi section (lossless shunt, Z0 = Z1)."""
    st = ideal_readings(demo, {"RX": "closed"})
    m2, m7 = st.meters["M2"], st.meters["M7"]
    assert m2["p.T"] > 0 and m7["p.T"] < 0
    assert m7["pf.T"] < 0 and m2["pf.T"] > 0
    loss = m2["p.T"] + m7["p.T"]
    v, i = st.phasors["M2"]
    b = demo.branch("L2").model
    i_series = i - 1j * b.b_us * 1e-6 / 2 * v
    assert loss == pytest.approx(b.r_ohm * float(np.sum(np.abs(i_series) ** 2)), rel=1e-8)
    assert loss > 0


def test_meter_signs_and_losses_against_pandapower(demo):
    """Balanced demo (LD2 made balanced): M1 = res_line p_from of L1, M7 = p_to of L2 (negative)."""
    branches = tuple(
        dataclasses.replace(b, model=LoadParams(5000.0, 1600.0, "z")) if b.id == "LD2" else b
        for b in demo.branches
    )
    p = dataclasses.replace(demo, branches=branches)
    st = ideal_readings(p, {})
    net = pp.create_empty_network(f_hz=50.0, sn_mva=0.03)
    bus = {b.id: pp.create_bus(net, 0.4) for b in p.buses}
    emf = pp.create_bus(net, 0.4)
    pp.create_ext_grid(net, emf, vm_pu=408 / 400)
    z = 408.0**2 / 600000.0
    r = z / math.sqrt(65)
    pp.create_line_from_parameters(net, emf, bus["B0"], 1.0, r, 8 * r, 0.0, 10.0)
    line = {}
    for br in p.branches:
        s = br.model
        if br.kind == "line":
            line[br.id] = pp.create_line_from_parameters(
                net,
                bus[br.from_bus],
                bus[br.to_bus],
                1.0,
                s.r_ohm,
                s.x_ohm,
                s.b_us / (2 * math.pi * 50) * 1e3,
                10.0,
                in_service=br.id != "L4",
            )
    pp.create_load(net, bus["B2"], 0.006, 0.002)
    pp.create_load(net, bus["B3"], 0.005, 0.0016, const_z_p_percent=100, const_z_q_percent=100)
    pp.create_load(
        net,
        bus["B1"],
        0.004,
        0.0015,
        const_z_p_percent=30,
        const_z_q_percent=30,
        const_i_p_percent=30,
        const_i_q_percent=30,
    )
    pp.runpp(net, algorithm="nr", calculate_voltage_angles=True, tolerance_mva=1e-9)
    tol = 1e-6 * p.bench.s_base_va
    assert st.meters["M1"]["p.T"] == pytest.approx(
        net.res_line.p_from_mw[line["L1"]] * 1e6, abs=tol
    )
    assert st.meters["M1"]["q.T"] == pytest.approx(
        net.res_line.q_from_mvar[line["L1"]] * 1e6, abs=tol
    )
    assert st.meters["M7"]["p.T"] == pytest.approx(net.res_line.p_to_mw[line["L2"]] * 1e6, abs=tol)
    assert st.meters["M3"]["p.T"] == pytest.approx(
        net.res_line.p_from_mw[line["L3"]] * 1e6, abs=tol
    )
    assert st.meters["M2"]["p.T"] + st.meters["M7"]["p.T"] == pytest.approx(
        net.res_line.pl_mw[line["L2"]] * 1e6, abs=tol
    )
    assert st.meters["M1"]["i.A"] == pytest.approx(
        net.res_line.i_from_ka[line["L1"]] * 1e3, rel=1e-6
    )


def test_apparent_power_definitions_hand_example():
    """IEEE 1459 definitions on phases carrying 1000 W, 1000 var and nothing:
    arithmetic S = 1000 + 1000 + 0 = 2000 VA; vector S = |1000 + 1000j| = 1414.2136 VA [C]."""
    v = 230.0 * np.exp(-2j * np.pi / 3 * np.arange(3))
    s = np.array([1000.0, 1000.0j, 0.0])
    i = np.conj(s / v)
    arith = meter_values(v, i, apparent_power="arithmetic", frequency_hz=50.0)
    vect = meter_values(v, i, apparent_power="vector", frequency_hz=50.0)
    assert arith["s.T"] == pytest.approx(2000.0, rel=1e-12)
    assert vect["s.T"] == pytest.approx(1000.0 * math.sqrt(2), rel=1e-12)
    assert arith["pf.T"] == pytest.approx(0.5, rel=1e-12) and vect["pf.T"] == pytest.approx(
        1 / math.sqrt(2), rel=1e-12
    )
    assert arith["pf.A"] == pytest.approx(1.0) and arith["pf.B"] == pytest.approx(0.0, abs=1e-15)
    assert arith["pf.C"] == 0.0  # no apparent power: pf reads 0 by our convention


def test_apparent_power_definitions_on_the_unbalanced_bench(demo):
    """M1 is a 'vector' meter: s.T = sqrt(p.T^2 + q.T^2) (holds only for vector S, IEEE 1459);
    M3 is 'arithmetic': s.T = sum of phase S, which exceeds the vector value when phases differ."""
    st = ideal_readings(demo, {})
    m1, m3 = st.meters["M1"], st.meters["M3"]
    assert (
        demo.meter_map("M1").apparent_power == "vector"
        and demo.meter_map("M3").apparent_power == "arithmetic"
    )
    assert m1["s.T"] == pytest.approx(math.hypot(m1["p.T"], m1["q.T"]), rel=1e-12)
    assert m3["s.T"] == pytest.approx(m3["s.A"] + m3["s.B"] + m3["s.C"], rel=1e-12)
    v, i = st.phasors["M3"]
    vect = meter_values(v, i, apparent_power="vector", frequency_hz=50.0)["s.T"]
    assert m3["s.T"] > vect
    assert m3["pf.T"] == pytest.approx(m3["p.T"] / m3["s.T"], rel=1e-12)


@pytest.mark.parametrize(
    "states", [{}, {"TIE": "closed", "RX": "closed"}, {"RX": "closed", "LB2": "open"}]
)
def test_bus_b2_balance_sums_to_zero(demo, states):
    """Every branch at B2 is metered (M4 tie, M6 reactor, M7 trunk, M8 load): by KCL the powers
    into the branches sum to zero, per phase, within the solver's stated mismatch."""
    st = ideal_readings(demo, states)
    tol = st.solution.tol_va
    assert st.solution.max_mismatch_va <= tol
    for ph in PH:
        total = complex(
            sum(st.meters[m][f"p.{ph}"] for m in ("M4", "M6", "M7", "M8")),
            sum(st.meters[m][f"q.{ph}"] for m in ("M4", "M6", "M7", "M8")),
        )
        assert abs(total) <= tol
    assert st.meters["M8"]["p.T"] > 1000  # not vacuous: the bank really draws


def test_reactor_absorbs_its_rating_scaled_by_voltage(demo):
    """Shunt reactor, constant impedance: Q = 3000 var x (|V| / V_nominal)^2 per phase total."""
    r = ideal_readings(demo, {"RX": "closed"}).meters["M6"]
    vn = 400 / math.sqrt(3)
    assert r["q.T"] == pytest.approx(
        sum(1000.0 * (r[f"v_ln.{ph}"] / vn) ** 2 for ph in PH), rel=1e-12
    )
    assert abs(r["p.T"]) < 1e-9 and r["pf.T"] == pytest.approx(0.0, abs=1e-12)
    assert ideal_readings(demo, {}).meters["M6"]["q.T"] == 0.0  # contactor open


def test_constant_impedance_load_bank(demo):
    """LD2 (model z): P_phase = P_rated x (|V|/V_nominal)^2 (ZIP load model; common practice)."""
    r = ideal_readings(demo, {}).meters["M5"]
    vn = 400 / math.sqrt(3)
    for ph, p_rated in zip(PH, (2500.0, 1500.0, 1000.0), strict=True):
        assert r[f"p.{ph}"] == pytest.approx(p_rated * (r[f"v_ln.{ph}"] / vn) ** 2, rel=1e-12)


def test_feeder_breaker_open_kills_everything_downstream(demo):
    st = ideal_readings(demo, {"CB1": "open"})
    assert st.energized == {"B0": True, "B1": False, "B2": False, "B3": False}
    m1 = st.meters["M1"]  # B0 still live from the source, but L1 carries nothing
    assert m1["v_ln.A"] == pytest.approx(408 / math.sqrt(3), rel=1e-9)
    assert m1["i.A"] == 0 and m1["p.T"] == 0 and m1["pf.T"] == 0 and m1["f.T"] == 50.0
    for mid in ("M2", "M3", "M4", "M5", "M6", "M7", "M8"):
        assert st.meters[mid] == dead_values(), mid
    assert all(v == 0.0 for v in dead_values().values())


def test_voltage_only_meter(demo):
    extra = Meter("MV", "bus voltage", TcpTransport("127.0.0.1", 15099), 9, "wren-i16", "B3", None)
    p = dataclasses.replace(demo, meters=demo.meters + (extra,))
    r = ideal_readings(p, {}).meters["MV"]
    assert r["v_ln.B"] > 200 and r["f.T"] == 50.0
    assert all(r[k] == 0.0 for k in r if k.split(".")[0] in ("i", "p", "q", "s", "pf", "i_ang"))


def test_meter_on_a_branch_away_from_its_bus_is_a_user_error(demo):
    from meas.errors import BenchwalkError

    bad = dataclasses.replace(demo.meter("M2"), id="MX", bus="B3")  # L2 runs B1-B2, not B3
    p = dataclasses.replace(demo, meters=demo.meters + (bad,))
    with pytest.raises(BenchwalkError, match=r"meter 'MX': bus 'B3' is not an end of branch 'L2'"):
        ideal_readings(p, {})


def test_cache_returns_fresh_copies_and_is_fast(demo):
    p = dataclasses.replace(demo)  # a new profile object, so the cache starts empty
    t0 = time.perf_counter()
    first = ideal_readings(p, {"TIE": "closed"})
    t_first = time.perf_counter() - t0
    first.meters["M1"]["p.T"] = -1.0
    t0 = time.perf_counter()
    again = ideal_readings(p, {"TIE": "closed", "CB1": "closed"})  # same effective state
    t_again = time.perf_counter() - t0
    assert again.meters["M1"]["p.T"] > 0
    assert again.solution is first.solution
    assert t_again < t_first
    with pytest.raises(ValueError):
        again.solution.v["B1"][0] = 0  # shared phasors are read-only
