"""The simulated bench's load flow against the outside world.

References: pandapower 3.5 (``runpp`` Newton-Raphson, ``runpp_3ph`` sequence-frame unbalanced
flow, ``networks.case14`` = IEEE 14-bus via MATPOWER), the long-line ABCD formulas of Glover,
Sarma & Overbye, *Power System Analysis and Design*, ch. 5, and the IEC 60076-1 clock-number
definition of vector groups (from memory; common practice). pandapower conventions used below
(REFERENCES.md 8): res_line p_from/p_to positive = into the line at that end; positive shunt q
absorbs; ``vm_pu`` on the bus's vn_kv, phase-to-ground base vn_kv/sqrt(3) in ``res_bus_3ph``.
"""

from __future__ import annotations

import cmath
import dataclasses
import math
import pathlib
import warnings

import numpy as np
import pandapower as pp
import pandapower.networks as pn
import pytest
from pandapower.pf.runpp_3ph import runpp_3ph

from meas.errors import ProfileError
from meas.model import (
    Bench,
    Branch,
    Bus,
    LineParams,
    LoadParams,
    Profile,
    ShuntParams,
    SourceParams,
    TransformerParams,
    Zone,
)
from meas.network.admittance import build_network
from meas.network.elements import element_models, transformer_admittance
from meas.network.loadflow import SolverError, solve
from meas.profile import load_profile

DEMO = pathlib.Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"
SQ3 = math.sqrt(3)

warnings.filterwarnings("ignore", category=FutureWarning)


@pytest.fixture(scope="module")
def demo() -> Profile:
    return load_profile(str(DEMO))


def balanced_variant(p: Profile) -> Profile:
    """The demo with load bank 2 made balanced (same totals), so a positive-sequence flow applies."""
    branches = tuple(
        dataclasses.replace(b, model=LoadParams(5000.0, 1600.0, "z")) if b.id == "LD2" else b
        for b in p.branches
    )
    return dataclasses.replace(p, branches=branches)


def make_profile(
    buses,
    branches,
    switches=(),
    *,
    zones=(("z", 400.0),),
    f_hz=50.0,
    s_base=30000.0,
    path="test.toml",
) -> Profile:
    bench = Bench("test", f_hz, 1.0, s_base, tuple(Zone(z, v, v) for z, v in zones))
    return Profile(path, "", bench, {}, (), tuple(buses), tuple(branches), tuple(switches))


def opened(p: Profile, states: dict[str, str]) -> set[str]:
    return {s.branch for s in p.switches if states.get(s.id, s.normal) == "open"}


def thevenin(src: SourceParams) -> tuple[float, float]:
    z = src.v_ll**2 / src.sc_va
    r = z / math.sqrt(1 + src.x_r**2)
    return r, r * src.x_r


def pp_demo(p: Profile, states: dict[str, str]):
    """The balanced demo as a pandapower net: ext_grid behind the source impedance (as a line)."""
    f = p.bench.frequency_hz
    net = pp.create_empty_network(f_hz=f, sn_mva=p.bench.s_base_va / 1e6)
    bus = {b.id: pp.create_bus(net, vn_kv=0.4, name=b.id) for b in p.buses}
    src = p.branch("SRC").model
    assert isinstance(src, SourceParams)
    emf = pp.create_bus(net, vn_kv=0.4, name="EMF")
    pp.create_ext_grid(net, emf, vm_pu=src.v_ll / 400.0, va_degree=0.0)
    r, x = thevenin(src)
    pp.create_line_from_parameters(net, emf, bus["B0"], 1.0, r, x, 0.0, 10.0, name="SRC")
    out = opened(p, states)
    lines = {}
    for b in p.branches:
        s, live = b.model, b.id not in out
        if b.kind == "line":
            c_nf = s.b_us * 1e-6 / (2 * math.pi * f) * 1e9
            lines[b.id] = pp.create_line_from_parameters(
                net,
                bus[b.from_bus],
                bus[b.to_bus],
                1.0,
                s.r_ohm,
                s.x_ohm,
                c_nf,
                10.0,
                in_service=live,
                name=b.id,
            )
        elif b.kind == "load":
            zip_ = {
                "pq": (0, 0),
                "z": (100, 0),
                "zip": (100 * (s.zip or (0, 0, 0))[0], 100 * (s.zip or (0, 0, 0))[1]),
            }[s.behaviour]
            pp.create_load(
                net,
                bus[b.from_bus],
                s.p_w / 1e6,
                s.q_var / 1e6,
                const_z_p_percent=zip_[0],
                const_z_q_percent=zip_[0],
                const_i_p_percent=zip_[1],
                const_i_q_percent=zip_[1],
                in_service=live,
            )
        elif b.kind == "shunt":
            pp.create_shunt(
                net, bus[b.from_bus], q_mvar=s.q_var / 1e6, p_mw=0.0, vn_kv=0.4, in_service=live
            )
    pp.runpp(net, algorithm="nr", calculate_voltage_angles=True, tolerance_mva=1e-9)
    return net, bus, lines


DEMO_CASES = [
    {},  # normal: TIE open, reactor out
    {"TIE": "closed"},  # meshed
    {"RX": "closed"},  # reactor in
    {"TIE": "closed", "RX": "closed", "LB2": "open"},
    {"SW2": "open"},  # B2 islanded (pandapower gives NaN there; we give zero)
]


@pytest.mark.parametrize(
    "states", DEMO_CASES, ids=lambda s: ",".join(f"{k}={v}" for k, v in s.items()) or "normal"
)
def test_demo_balanced_matches_pandapower(demo, states):
    p = balanced_variant(demo)
    net, bus, lines = pp_demo(p, states)
    sol = solve(build_network(p, states))
    assert sol.converged and sol.max_mismatch_va <= sol.tol_va
    vbase = 400.0 / SQ3
    for b, i in bus.items():
        v = sol.v[b]
        if np.isnan(net.res_bus.vm_pu[i]):  # pandapower: isolated bus
            assert not sol.energized[b] and np.all(v == 0)
            continue
        # pandapower runpp, NR, tolerance 1e-9 MVA: |V| within 1e-6 pu, angle within 1e-4 degrees
        assert abs(abs(v[0]) / vbase - net.res_bus.vm_pu[i]) < 1e-6
        assert abs(math.degrees(cmath.phase(v[0])) - net.res_bus.va_degree[i]) < 1e-4
        # balanced network: phases B and C are phase A rotated by -120 / +120 degrees (positive sequence)
        assert np.allclose(
            v[1:], v[0] * np.exp(-2j * np.pi / 3 * np.array([1, 2])), rtol=0, atol=1e-9 * vbase
        )
    base = p.bench.s_base_va
    for lid, i in lines.items():
        rl = net.res_line.loc[i]
        sf, st = sol.s_from[lid].sum(), sol.s_to[lid].sum()
        if lid in opened(p, states) or np.isnan(rl.p_from_mw):
            assert sf == 0 and st == 0
            continue
        for mine, ref in (
            (sf.real, rl.p_from_mw),
            (sf.imag, rl.q_from_mvar),
            (st.real, rl.p_to_mw),
            (st.imag, rl.q_to_mvar),
        ):
            assert (
                abs(mine - ref * 1e6) < 1e-6 * base
            )  # pandapower res_line, within 1e-6 of the base
        assert abs((sf + st).real - rl.pl_mw * 1e6) < 1e-6 * base  # line losses


@pytest.fixture(scope="module")
def case14():
    net = pn.case14()
    pp.runpp(net, algorithm="nr", calculate_voltage_angles=True, tolerance_mva=1e-9)
    return net


def case14_profile(net) -> Profile:
    """IEEE 14-bus (pandapower.networks.case14) in our model, SI units.

    Our solver has no PV buses: each generator becomes a negative PQ load with pandapower's
    solved P and Q (res_gen), so the comparison tests the network solution, not Q control.
    The ext_grid is an ideal source (sc_va = inf) at its vm_pu and va_degree.
    """
    zones = sorted({float(v) for v in net.bus.vn_kv})
    zid = {v: f"kv{v:g}" for v in zones}
    buses = [Bus(f"b{i}", zid[float(r.vn_kv)]) for i, r in net.bus.iterrows()]
    vn = {f"b{i}": float(r.vn_kv) * 1e3 for i, r in net.bus.iterrows()}
    br: list[Branch] = []
    eg = net.ext_grid.iloc[0]
    br.append(
        Branch(
            "EG",
            "source",
            f"b{eg.bus}",
            model=SourceParams(
                v_ll=eg.vm_pu * vn[f"b{eg.bus}"], sc_va=math.inf, angle_deg=float(eg.va_degree)
            ),
        )
    )
    for i, r in net.line.iterrows():
        assert r.g_us_per_km == 0
        b_us = 2 * math.pi * net.f_hz * r.c_nf_per_km * 1e-9 * r.length_km * 1e6 * r.parallel
        br.append(
            Branch(
                f"l{i}",
                "line",
                f"b{r.from_bus}",
                f"b{r.to_bus}",
                model=LineParams(
                    r_ohm=r.r_ohm_per_km * r.length_km / r.parallel,
                    x_ohm=r.x_ohm_per_km * r.length_km / r.parallel,
                    b_us=b_us,
                ),
            )
        )
    for i, r in net.trafo.iterrows():
        assert r.pfe_kw == 0 and r.i0_percent == 0 and r.shift_degree == 0 and r.parallel == 1
        tap = 0.0 if math.isnan(r.tap_pos) else (r.tap_pos - r.tap_neutral) * r.tap_step_percent
        assert math.isnan(r.tap_pos) or r.tap_side == "hv"
        br.append(
            Branch(
                f"t{i}",
                "transformer",
                f"b{r.hv_bus}",
                f"b{r.lv_bus}",
                model=TransformerParams(
                    s_va=r.sn_mva * 1e6,
                    v1_ll=r.vn_hv_kv * 1e3,
                    v2_ll=r.vn_lv_kv * 1e3,
                    uk_pct=r.vk_percent,
                    ur_pct=r.vkr_percent,
                    vector_group="YNyn0",
                    tap_pct=tap,
                ),
            )
        )
    for i, r in net.load.iterrows():
        br.append(
            Branch(
                f"ld{i}",
                "load",
                f"b{r.bus}",
                model=LoadParams(
                    p_w=r.p_mw * 1e6 * r.scaling, q_var=r.q_mvar * 1e6 * r.scaling, behaviour="pq"
                ),
            )
        )
    for i, r in net.gen.iterrows():
        res = net.res_gen.loc[i]
        br.append(
            Branch(
                f"g{i}",
                "load",
                f"b{r.bus}",
                model=LoadParams(p_w=-res.p_mw * 1e6, q_var=-res.q_mvar * 1e6, behaviour="pq"),
            )
        )
    for i, r in net.shunt.iterrows():
        k = (vn[f"b{r.bus}"] / (r.vn_kv * 1e3)) ** 2 * r.step  # pandapower: q given at vn_kv
        br.append(
            Branch(
                f"sh{i}",
                "shunt",
                f"b{r.bus}",
                model=ShuntParams(q_var=r.q_mvar * 1e6 * k, p_w=r.p_mw * 1e6 * k),
            )
        )
    return make_profile(
        buses,
        br,
        zones=[(zid[v], v * 1e3) for v in zones],
        f_hz=float(net.f_hz),
        s_base=float(net.sn_mva) * 1e6,
        path="case14",
    )


def test_ieee14_matches_pandapower(case14):
    net = case14
    p = case14_profile(net)
    sol = solve(build_network(p, {}))
    assert sol.converged and sol.iterations <= 10
    for i, r in net.res_bus.iterrows():
        v = sol.v[f"b{i}"]
        vb = net.bus.vn_kv[i] * 1e3 / SQ3
        assert abs(abs(v[0]) / vb - r.vm_pu) < 1e-6, i  # pandapower runpp case14
        assert abs(math.degrees(cmath.phase(v[0])) - r.va_degree) < 1e-4, i
    base = net.sn_mva * 1e6
    for i, r in net.res_line.iterrows():
        sf, st = sol.s_from[f"l{i}"].sum(), sol.s_to[f"l{i}"].sum()
        for mine, ref in (
            (sf.real, r.p_from_mw),
            (sf.imag, r.q_from_mvar),
            (st.real, r.p_to_mw),
            (st.imag, r.q_to_mvar),
        ):
            assert abs(mine - ref * 1e6) < 1e-6 * base
    for i, r in net.res_trafo.iterrows():
        sf, st = sol.s_from[f"t{i}"].sum(), sol.s_to[f"t{i}"].sum()
        for mine, ref in (
            (sf.real, r.p_hv_mw),
            (sf.imag, r.q_hv_mvar),
            (st.real, r.p_lv_mw),
            (st.imag, r.q_lv_mvar),
        ):
            assert abs(mine - ref * 1e6) < 1e-6 * base
    losses = sum((sol.s_from[k].sum() + sol.s_to[k].sum()).real for k in sol.s_to)
    ref_losses = (net.res_line.pl_mw.sum() + net.res_trafo.pl_mw.sum()) * 1e6
    assert abs(losses - ref_losses) < 1e-6 * base
    # the slack feed: pandapower res_ext_grid is generation (positive out of the grid)
    assert abs(-sol.s_from["EG"].sum().real - net.res_ext_grid.p_mw[0] * 1e6) < 1e-6 * base


UNBAL_LINES = {  # id: (from, to, r, x, b_us, r0, x0, b0_us), invented feeder data
    "L1": ("B0", "B1", 0.16, 0.20, 50.0, 0.48, 0.62, 30.0),
    "L2": ("B1", "B2", 0.12, 0.15, 40.0, 0.36, 0.50, 25.0),
    "L3": ("B1", "B3", 0.20, 0.16, 20.0, 0.55, 0.48, 12.0),
}
UNBAL_LOADS = {  # bus: (p per phase W, q per phase var), constant power, wye-grounded
    "B1": ([2500.0, 1500.0, 1000.0], [800.0, 500.0, 300.0]),
    "B2": ([1000.0, 3000.0, 2000.0], [300.0, 1000.0, 600.0]),
    "B3": ([0.0, 2200.0, 400.0], [0.0, 700.0, -150.0]),
}
SRC_SIM = SourceParams(v_ll=408.0, sc_va=600000.0, x_r=8.0)


def unbalanced_profile() -> Profile:
    buses = [Bus(b, "z") for b in ("B0", "B1", "B2", "B3")]
    br = [Branch("SRC", "source", "B0", model=SRC_SIM)]
    for lid, (f, t, r, x, b, r0, x0, b0) in UNBAL_LINES.items():
        br.append(
            Branch(
                lid,
                "line",
                f,
                t,
                model=LineParams(r_ohm=r, x_ohm=x, b_us=b, r0_ohm=r0, x0_ohm=x0, b0_us=b0),
            )
        )
    for bus, (pw, qv) in UNBAL_LOADS.items():
        br.append(Branch(f"LD{bus}", "load", bus, model=LoadParams(tuple(pw), tuple(qv), "pq")))
    return make_profile(buses, br)


def test_unbalanced_matches_pandapower_3ph():
    """Unbalanced feeder with sequence-coupled lines against pandapower's runpp_3ph.

    Modelling differences: pandapower's ext_grid is an ideal positive-sequence slack with
    sequence shunts from s_sc_max_mva, while our source is an EMF behind Z1 = Z2 = Z0. So the
    pandapower net has an ext_grid with a huge short-circuit power (1e6 MVA, impedance 1.6e-7
    ohm, negligible) at an internal bus and the Thevenin impedance as a line with r0 = r,
    x0 = x. pandapower iterates in sequence components to tolerance_mva; we use 1e-10 MVA.
    Tolerance: 1e-6 pu on voltage, 1e-4 degrees, 1e-6 of the base on per-phase flows.
    """
    p = unbalanced_profile()
    sol = solve(build_network(p, {}))
    f = 50.0
    net = pp.create_empty_network(f_hz=f, sn_mva=0.03)
    bus = {b: pp.create_bus(net, vn_kv=0.4, name=b) for b in ("B0", "B1", "B2", "B3")}
    emf = pp.create_bus(net, vn_kv=0.4)
    pp.create_ext_grid(
        net,
        emf,
        vm_pu=408 / 400,
        va_degree=0.0,
        s_sc_max_mva=1e6,
        rx_max=0.1,
        x0x_max=1.0,
        r0x0_max=0.1,
    )
    r, x = thevenin(SRC_SIM)
    pp.create_line_from_parameters(
        net,
        emf,
        bus["B0"],
        1.0,
        r,
        x,
        0.0,
        10.0,
        r0_ohm_per_km=r,
        x0_ohm_per_km=x,
        c0_nf_per_km=0.0,
    )
    lines = {}
    for lid, (fb, tb, r, x, b, r0, x0, b0) in UNBAL_LINES.items():
        c = b * 1e-6 / (2 * math.pi * f) * 1e9
        c0 = b0 * 1e-6 / (2 * math.pi * f) * 1e9
        lines[lid] = pp.create_line_from_parameters(
            net,
            bus[fb],
            bus[tb],
            1.0,
            r,
            x,
            c,
            10.0,
            r0_ohm_per_km=r0,
            x0_ohm_per_km=x0,
            c0_nf_per_km=c0,
        )
    for b, (pw, qv) in UNBAL_LOADS.items():
        pp.create_asymmetric_load(
            net, bus[b], *(v / 1e6 for v in pw), *(v / 1e6 for v in qv), type="wye"
        )
    runpp_3ph(net, tolerance_mva=1e-10)
    vbase = 400 / SQ3
    worst_v = 0.0
    for b, i in bus.items():
        r = net.res_bus_3ph.loc[i]
        for k, ph in enumerate("abc"):
            d = abs(abs(sol.v[b][k]) / vbase - r[f"vm_{ph}_pu"])
            worst_v = max(worst_v, d)
            assert d < 1e-6, (b, ph)
            da = (math.degrees(cmath.phase(sol.v[b][k])) - r[f"va_{ph}_degree"] + 180) % 360 - 180
            assert abs(da) < 1e-4, (b, ph)
    # the case is really unbalanced: phase voltages at B2 differ by more than 1 %
    assert np.ptp(np.abs(sol.v["B2"])) / vbase > 0.01
    for lid, i in lines.items():
        r = net.res_line_3ph.loc[i]
        for k, ph in enumerate("abc"):
            sf, st = sol.s_from[lid][k], sol.s_to[lid][k]
            for mine, ref in (
                (sf.real, r[f"p_{ph}_from_mw"]),
                (sf.imag, r[f"q_{ph}_from_mvar"]),
                (st.real, r[f"p_{ph}_to_mw"]),
                (st.imag, r[f"q_{ph}_to_mvar"]),
            ):
                assert abs(mine - ref * 1e6) < 1e-6 * 30000.0, (lid, ph)


# ---------------------------------------------------------------- element models


def test_long_line_open_end_matches_abcd():
    """Ferranti rise on an open 300 km line: Vr = Vs / cosh(gamma l) (Glover et al., ch. 5).

    Per-length data are typical 345 kV values (from memory); the check is the exact ABCD
    relation, which the hyperbolic pi correction must reproduce and the nominal pi must not.
    """
    z, y, length = complex(0.032, 0.35), 4.2e-6j, 300.0
    gl = cmath.sqrt(z * y) * length
    expected = 1 / abs(cmath.cosh(gl))
    out = {}
    for long_line in (True, False):
        p = make_profile(
            [Bus("S", "z"), Bus("R", "z")],
            [
                Branch("G", "source", "S", model=SourceParams(v_ll=345e3, sc_va=math.inf)),
                Branch(
                    "LN",
                    "line",
                    "S",
                    "R",
                    model=LineParams(
                        r_ohm=z.real,
                        x_ohm=z.imag,
                        b_us=y.imag * 1e6,
                        length_km=length,
                        long_line=long_line,
                    ),
                ),
            ],
            zones=(("z", 345e3),),
            s_base=100e6,
        )
        sol = solve(build_network(p, {}))
        out[long_line] = abs(sol.v["R"][0]) / abs(sol.v["S"][0])
    assert out[True] == pytest.approx(expected, rel=1e-9)
    # nominal pi: Vr/Vs = 1 / |1 + ZY/2| (same source); differs from exact by > 1e-4 here
    assert out[False] == pytest.approx(1 / abs(1 + z * y * length**2 / 2), rel=1e-9)
    assert abs(out[True] - out[False]) > 1e-4


def _trafo_profile(group: str, load=None) -> Profile:
    br = [
        Branch("G", "source", "HV", model=SourceParams(v_ll=11000.0, sc_va=math.inf)),
        Branch(
            "T",
            "transformer",
            "HV",
            "LV",
            model=TransformerParams(
                s_va=400e3, v1_ll=11000.0, v2_ll=400.0, uk_pct=4.0, ur_pct=1.0, vector_group=group
            ),
        ),
    ]
    if load:
        br.append(Branch("LD", "load", "LV", model=LoadParams(load[0], load[1], "pq")))
    return make_profile(
        [Bus("HV", "hv"), Bus("LV", "lv")], br, zones=(("hv", 11000.0), ("lv", 400.0)), s_base=400e3
    )


@pytest.mark.parametrize(
    "group,shift", [("Dyn11", 30.0), ("Dyn1", -30.0), ("YNyn0", 0.0), ("Yyn0", 0.0)]
)
def test_vector_group_phase_shift_at_no_load(group, shift):
    """IEC 60076-1 clock number (from memory): LV lags HV by 30 degrees x clock number;
    Dyn11 therefore leads by 30, Dyn1 lags by 30. At no load the ratio is v2_ll / v1_ll."""
    sol = solve(build_network(_trafo_profile(group), {}))
    hv, lv = sol.v["HV"], sol.v["LV"]
    assert math.degrees(cmath.phase(lv[0] / hv[0])) == pytest.approx(shift, abs=1e-9)
    assert abs(lv[0]) == pytest.approx(400 / SQ3, rel=1e-12)
    # positive sequence preserved on the LV side
    assert math.degrees(cmath.phase(lv[1] / lv[0])) == pytest.approx(-120.0, abs=1e-9)


def test_dyn1_balanced_matches_pandapower_shift():
    """A loaded Dyn1 transformer against pandapower runpp with shift_degree = 30 (LV lags HV)."""
    p = _trafo_profile("Dyn1", load=(240e3, 90e3))
    sol = solve(build_network(p, {}))
    net = pp.create_empty_network(f_hz=50, sn_mva=0.4)
    hv, lv = pp.create_bus(net, 11.0), pp.create_bus(net, 0.4)
    pp.create_ext_grid(net, hv, vm_pu=1.0)
    pp.create_transformer_from_parameters(
        net, hv, lv, 0.4, 11.0, 0.4, 1.0, 4.0, 0.0, 0.0, shift_degree=30.0
    )
    pp.create_load(net, lv, 0.24, 0.09)
    pp.runpp(net, algorithm="nr", calculate_voltage_angles=True, tolerance_mva=1e-9)
    v = sol.v["LV"]
    assert abs(abs(v[0]) / (400 / SQ3) - net.res_bus.vm_pu[lv]) < 1e-6
    assert abs(math.degrees(cmath.phase(v[0])) - net.res_bus.va_degree[lv]) < 1e-4
    s_hv = sol.s_from["T"].sum()
    assert abs(s_hv.real - net.res_trafo.p_hv_mw[0] * 1e6) < 1e-6 * 400e3
    assert abs(s_hv.imag - net.res_trafo.q_hv_mvar[0] * 1e6) < 1e-6 * 400e3


def test_delta_winding_blocks_zero_sequence():
    """A single-phase LV load behind Dyn11 draws no zero-sequence current from the HV side
    (delta winding; common practice), while behind YNyn0 it does."""

    def i0_hv(group: str) -> float:
        p = _trafo_profile(group)
        p = dataclasses.replace(
            p,
            branches=p.branches
            + (
                Branch(
                    "LD",
                    "load",
                    "LV",
                    model=LoadParams((60e3, 0.0, 0.0), (20e3, 0.0, 0.0), "pq"),
                ),
            ),
        )
        i = solve(build_network(p, {})).i_from["T"]
        return abs(i.sum()) / 3 / np.max(np.abs(i))

    assert i0_hv("Dyn11") < 1e-9
    assert i0_hv("YNyn0") > 0.3


def test_yy0_floating_star_equals_textbook_matrix():
    """Yy0 (both stars floating) has the zero-sequence-free block (y/3)[[2,-1,-1],...] of the
    classic phase-frame transformer tables (Chen, Chen, Inoue, Kotas & Chen, IEEE Trans. Power
    Delivery 6(1), 1991, from memory); our generalized Kron reduction must reproduce it."""
    y = transformer_admittance(300e3, 400.0, 400.0, 5.0, 1.0, "Yy0")
    zb = (400 / SQ3) ** 2 / 100e3
    yl = 1 / complex(0.01 * zb, math.sqrt(0.05**2 - 0.01**2) * zb)
    yii = yl / 3 * np.array([[2, -1, -1], [-1, 2, -1], [-1, -1, 2]])
    assert np.allclose(y, np.block([[yii, -yii], [-yii, yii]]), rtol=1e-12, atol=0)


# ---------------------------------------------------------------- topology and failure


def test_islanded_buses_read_zero_and_energized_flags(demo):
    sol = solve(build_network(demo, {"SW2": "open", "SW3": "open"}))
    assert sol.energized == {"B0": True, "B1": True, "B2": False, "B3": False}
    for b in ("B2", "B3"):
        assert np.all(sol.v[b] == 0)
    for br in ("L2", "L3", "L4", "LD1", "LD2", "SH1"):
        assert np.all(sol.i_from[br] == 0)
    assert np.all(sol.i_from["LD3"] != 0)


def test_tie_alone_feeds_the_trunk_end(demo):
    """SW2 open but TIE closed: B2 is fed round the loop through L3 and L4."""
    sol = solve(build_network(demo, {"SW2": "open", "TIE": "closed"}))
    assert all(sol.energized.values())
    assert abs(sol.s_from["L4"].sum().real + sol.s_from["LD1"].sum().real) < 1e-2  # L4 from=B2


def test_overload_raises_solver_error(demo):
    branches = tuple(
        dataclasses.replace(b, model=LoadParams(2e6, 1e6, "pq")) if b.id == "LD1" else b
        for b in demo.branches
    )
    with pytest.raises(SolverError, match=r"did not converge after \d+ iterations \(max mismatch"):
        solve(build_network(dataclasses.replace(demo, branches=branches), {}))


def test_branch_without_model_is_named(demo):
    """The loader accepts a profile without model tables (a real bench); the network model
    cannot, and names every such branch at once."""
    branches = tuple(
        dataclasses.replace(b, model=None) if b.id in ("L2", "LD1") else b for b in demo.branches
    )
    with pytest.raises(ProfileError) as exc:
        element_models(dataclasses.replace(demo, branches=branches))
    assert [(p.file, p.path) for p in exc.value.problems] == [
        (str(DEMO), "branch[2].model"),
        (str(DEMO), "branch[5].model"),
    ]
    assert "'L2': no model table" in exc.value.problems[0].message
    assert all("\n" not in p.message for p in exc.value.problems)


def test_two_ideal_sources_on_one_bus_are_refused():
    p = _trafo_profile("YNyn0")
    p = dataclasses.replace(
        p,
        branches=p.branches
        + (Branch("G2", "source", "HV", model=SourceParams(v_ll=11000.0, sc_va=math.inf)),),
    )
    with pytest.raises(ProfileError, match="already has the ideal source 'G'"):
        element_models(p)


def test_unknown_switch_is_a_user_error(demo):
    from meas.errors import BenchwalkError

    with pytest.raises(BenchwalkError, match="unknown switch 'SW9'"):
        build_network(demo, {"SW9": "open"})
    with pytest.raises(BenchwalkError, match="'open' or 'closed'"):
        build_network(demo, {"SW2": "unknown"})


def test_switch_model_counts(demo):
    net = build_network(demo, {"TIE": "closed", "RX": "closed"})
    assert [t.branch for t in net.two_ports] == ["L1", "L2", "L3", "L4"]
    assert [s.branch for s in net.shunts] == ["SH1"] and len(net.loads) == 3
    assert build_network(demo, {}).open_branches == frozenset({"L4", "SH1"})  # normal states
