"""Poll plan: coverage, limits and minimality (hypothesis vs an exact DP), worked examples, RTU time.

Exact minimum used as the reference: with non-overlapping values sorted by address, a read
that covers two values covers every value between them, so an optimal plan is a partition
of each kind's sorted values into contiguous groups; ``_dp_minimum`` searches all of them.
"""

from __future__ import annotations

import pathlib

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from support.modbus_helpers import make_map, spec, tcp_meter

from meas.errors import BenchwalkError
from meas.modbus.plan import (
    MAX_READ_REGISTERS,
    bits_per_character,
    naive_request_count,
    plan_map,
    plan_meter,
    plan_profile,
    read_limit,
    rtu_cycle_time_s,
    rtu_request_time_s,
    t35_s,
)
from meas.profile import load_profile
from meas.register_map import DATA_TYPES, REGISTER_COUNT, REGISTER_KINDS, RegisterMap

ROOT = pathlib.Path(__file__).resolve().parents[2]
DTYPES = list(DATA_TYPES)


@st.composite
def register_maps(draw):
    """Small random maps: non-overlapping values of both kinds, random gaps and read limit."""
    n = draw(st.integers(1, 9))
    specs, addr = [], {"holding": draw(st.integers(0, 50)), "input": draw(st.integers(0, 50))}
    for i in range(n):
        kind = draw(st.sampled_from(["holding", "input"]))
        dtype = draw(st.sampled_from(DTYPES))
        addr[kind] += draw(st.integers(0, 12))
        specs.append(spec(f"k{i}", addr[kind], dtype, kind))
        addr[kind] += REGISTER_COUNT[dtype]
    max_read = draw(st.integers(4, 140))
    return make_map("h", specs, max_read=max_read)


def _dp_minimum(regmap: RegisterMap, max_gap: int) -> int:
    limit = min(MAX_READ_REGISTERS, regmap.max_read)
    total = 0
    for kind in REGISTER_KINDS:
        s = sorted((x for x in regmap.registers if x.kind == kind), key=lambda x: x.address)
        best = [0] + [10**9] * len(s)
        for j in range(1, len(s) + 1):
            for i in range(1, j + 1):
                group = s[i - 1 : j]
                gaps_ok = all(
                    b.address - a.end <= max_gap for a, b in zip(group, group[1:], strict=False)
                )
                if gaps_ok and group[-1].end - group[0].address <= limit:
                    best[j] = min(best[j], best[i - 1] + 1)
        total += best[-1]
    return total


@settings(max_examples=300, deadline=None)
@given(regmap=register_maps(), max_gap=st.integers(0, 10))
def test_plan_covers_everything_within_limits_and_is_minimal(regmap, max_gap):
    plan = plan_map(regmap, max_gap)
    limit = read_limit(regmap)
    specs = {s.key: s for s in regmap.registers}
    covered = []
    for r in plan.requests:
        assert 1 <= r.count <= limit <= MAX_READ_REGISTERS  # Modbus V1.1b3: 1..125 per FC3/FC4
        assert r.function_code == {"holding": 3, "input": 4}[r.kind]
        used = set()
        for k in r.keys:
            s = specs[k]
            assert s.kind == r.kind  # never mixes kinds
            assert r.address <= s.address and s.end <= r.end  # whole value inside the read
            used.update(range(s.address, s.end))
            covered.append(k)
        # no bridged hole longer than max_gap
        run = 0
        for a in range(r.address, r.end):
            run = 0 if a in used else run + 1
            assert run <= max_gap
    assert sorted(covered) == sorted(specs)  # every configured value, exactly once
    assert len(plan.requests) == _dp_minimum(regmap, max_gap)
    used_all = {(s.kind, a) for s in regmap.registers for a in range(s.address, s.end)}
    assert plan.registers_read == sum(r.count for r in plan.requests)
    assert plan.registers_wasted == plan.registers_read - len(used_all)


def _lumen() -> RegisterMap:
    """The demo's lumen-f32 layout: 33 float32 input registers from 0, two float64 at 100/104."""
    keys = [
        "v_ln.A",
        "v_ln.B",
        "v_ln.C",
        "v_ll.AB",
        "v_ll.BC",
        "v_ll.CA",
        "i.A",
        "i.B",
        "i.C",
        "i.N",
        "p.A",
        "p.B",
        "p.C",
        "p.T",
        "q.A",
        "q.B",
        "q.C",
        "q.T",
        "s.A",
        "s.B",
        "s.C",
        "s.T",
        "pf.A",
        "pf.B",
        "pf.C",
        "pf.T",
        "f.T",
        "v_ang.A",
        "v_ang.B",
        "v_ang.C",
        "i_ang.A",
        "i_ang.B",
        "i_ang.C",
    ]
    specs = [spec(k, 2 * n) for n, k in enumerate(keys)]
    specs += [spec("e_imp.T", 100, "float64"), spec("e_exp.T", 104, "float64")]
    return make_map("lumen-f32", specs)


def test_lumen_map_needs_two_reads():
    plan = plan_map(_lumen(), max_gap=8)
    assert [(r.kind, r.address, r.count) for r in plan.requests] == [
        ("input", 0, 66),
        ("input", 100, 8),
    ]
    assert plan.registers_read == 74 and plan.registers_wasted == 0
    assert naive_request_count(_lumen()) == 35
    # a gap of 34 registers (66..99) is bridged only when allowed
    assert len(plan_map(_lumen(), max_gap=34).requests) == 1
    assert plan_map(_lumen(), max_gap=34).registers_wasted == 34
    assert len(plan_map(_lumen(), max_gap=33).requests) == 2


def test_read_limit_and_gap_edges():
    regs = [spec(f"k{i}", i, "uint16", "holding") for i in range(130)]
    plan = plan_map(make_map("big", regs), 0)
    assert [r.count for r in plan.requests] == [125, 5]  # 125 = the spec's FC3 maximum
    assert [r.count for r in plan_map(make_map("small", regs, max_read=60), 0).requests] == [
        60,
        60,
        10,
    ]
    holes = make_map(
        "holes", [spec("a", 0, "uint16", "holding"), spec("b", 3, "uint16", "holding")]
    )
    assert len(plan_map(holes, 2).requests) == 1 and plan_map(holes, 2).registers_wasted == 2
    assert len(plan_map(holes, 1).requests) == 2
    mixed = make_map("mixed", [spec("a", 0, "uint16", "holding"), spec("b", 1, "uint16", "input")])
    assert sorted(r.function_code for r in plan_map(mixed, 8).requests) == [3, 4]


def test_value_wider_than_read_limit_is_a_clear_error():
    regmap = make_map("tiny", [spec("e_imp.T", 0, "float64")], max_read=2)
    with pytest.raises(BenchwalkError, match="map tiny: e_imp.T .* needs 4 registers"):
        plan_map(regmap, 8)


def test_plan_meter_uses_meter_id():
    assert plan_meter(tcp_meter("M9", 1502, map_id="lumen-f32"), _lumen(), 8).meter_id == "M9"


def test_demo_profile_plans():
    prof = load_profile(ROOT / "profiles_demo" / "feeder_bench.toml")
    plans = plan_profile(prof)
    assert set(plans) == {m.id for m in prof.meters}
    by_map = {prof.meter(mid).map_id: p for mid, p in plans.items()}
    assert len(by_map["lumen-f32"].requests) == 2
    # corvid: 1000..1050 in one FC3 read bridging two 2-register holes (1018-1019, 1048-1049)
    assert [(r.function_code, r.address, r.count) for r in by_map["corvid-i32"].requests] == [
        (3, 1000, 51)
    ]
    assert by_map["corvid-i32"].registers_wasted == 4
    # wren: 0..26 with register 9 unused, max_read 60
    assert [(r.address, r.count) for r in by_map["wren-i16"].requests] == [(0, 27)]


# Modbus over Serial Line Specification V1.02, 2.5.1 / 2.5.1.1: 11 bits per RTU character
# (start + 8 data + parity + stop, or 2 stops without parity); t3.5 = 3.5 characters,
# fixed at 1.750 ms above 19200 baud. Request = 8 bytes, reply = 5 + 2N bytes.


def test_bits_per_character():
    assert bits_per_character("E", 1) == 11 and bits_per_character("O", 1) == 11
    assert bits_per_character("N", 2) == 11 and bits_per_character("N", 1) == 10


def test_t35_interval():
    assert t35_s(9600) == pytest.approx(3.5 * 11 / 9600)  # 4.01 ms
    assert t35_s(19200) == pytest.approx(3.5 * 11 / 19200)  # 2.005 ms
    assert t35_s(38400) == 0.00175 and t35_s(115200) == 0.00175


@pytest.mark.parametrize("baud,expected_ms", [(9600, 252.08), (19200, 126.04), (115200, 23.84)])
def test_rtu_time_of_a_100_register_read(baud, expected_ms):
    # (8 + 5 + 200) x 11 / baud + 2 t3.5; worked figures 252 / 126 / 23.8 ms (PYMODBUS_NOTES.md)
    assert rtu_request_time_s(100, baud, "E", 1) * 1000 == pytest.approx(expected_ms, abs=0.01)


def test_rtu_cycle_time_sums_requests_and_8n1_is_faster():
    plan = plan_map(_lumen(), 8)
    t = rtu_cycle_time_s(plan, 9600, "E", 1)
    # 66 registers: (13 + 132) x 11 / 9600 + 2 x 4.0104 ms; 8 registers: (13 + 16) x 11 / 9600 + 8.02 ms
    hand = (145 * 11 + 29 * 11) / 9600 + 4 * 3.5 * 11 / 9600
    assert t == pytest.approx(hand, rel=1e-12)
    assert rtu_cycle_time_s(plan, 9600, "N", 1) == pytest.approx(hand * 10 / 11, rel=1e-12)
    assert rtu_cycle_time_s(plan, 9600, "E", 1, device_latency_s=0.01) == pytest.approx(hand + 0.02)
