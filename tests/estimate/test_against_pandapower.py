"""The estimator's engine against ``pandapower.estimation.estimate`` (test dependency only) on the
balanced positive-sequence equivalent of the demo bench (radial base case, tie open).

Both get the same readings with the same standard deviations: bus voltages, line flows at both
ends of the trunk, and the consumption of every bus with a load. The network is the demo
profile's nameplate lines as nominal pi sections (pandapower ``create_line_from_parameters``,
REFERENCES.md §8), on a 1 MVA, 0.4 kV base; the readings are a pandapower load flow plus seeded
noise. Reference values: pandapower's own estimate of the same case.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from meas.estimate.core import MeterTerm, StepModel, TwoPortTerm
from meas.estimate.solver import solve
from meas.model import LineParams
from meas.profile import load_profile

pp = pytest.importorskip("pandapower")
est = pytest.importorskip("pandapower.estimation")

V_KV, S_MVA, F_HZ = 0.4, 1.0, 50.0
Z_BASE = V_KV**2 / S_MVA
BUSES = ("B0", "B1", "B2", "B3")
LINES = ("L1", "L2", "L3")  # the tie L4 is open in the radial base case
LOADS = {"B1": (4.0e-3, 1.5e-3), "B2": (6.0e-3, 2.0e-3), "B3": (5.0e-3, 1.6e-3)}  # MW, Mvar


def _case(profile_lines: dict[str, LineParams]):
    net = pp.create_empty_network(sn_mva=S_MVA, f_hz=F_HZ)
    idx = {b: pp.create_bus(net, vn_kv=V_KV, name=b) for b in BUSES}
    pp.create_ext_grid(net, idx["B0"], vm_pu=1.02)
    ends = {"L1": ("B0", "B1"), "L2": ("B1", "B2"), "L3": ("B1", "B3")}
    for name in LINES:
        p = profile_lines[name]
        a, b = ends[name]
        pp.create_line_from_parameters(
            net, idx[a], idx[b], 1.0, p.r_ohm, p.x_ohm,
            p.b_us * 1e3 / (2 * math.pi * F_HZ), 1.0, name=name,
        )  # fmt: skip
    for bus, (p_mw, q_mvar) in LOADS.items():
        pp.create_load(net, idx[bus], p_mw, q_mvar)
    pp.runpp(net, algorithm="nr", calculate_voltage_angles=True, tolerance_mva=1e-12)
    return net, idx, ends


def test_positive_sequence_demo_matches_pandapower_estimate() -> None:
    profile = load_profile("profiles_demo/feeder_bench.toml")
    lines = {b.id: b.model for b in profile.branches if b.id in LINES}
    net, idx, ends = _case(lines)  # type: ignore[arg-type]
    rng = np.random.default_rng(20261202)
    sv, sp = 0.004, 0.0002
    readings: list[tuple[str, str, str | None, str | None, float, float]] = []
    for b in BUSES:
        readings.append(("v", b, None, None, float(net.res_bus.vm_pu[idx[b]]), sv))
    for name in LINES:
        li = int(net.line.index[net.line.name == name][0])
        for side in ("from", "to"):
            for q in ("p", "q"):
                val = float(net.res_line[f"{q}_{side}_mw" if q == "p" else f"{q}_{side}_mvar"][li])
                readings.append((q, name, side, None, val, sp))
    for b in LOADS:
        readings.append(("p", b, None, "bus", float(net.res_bus.p_mw[idx[b]]), sp))
        readings.append(("q", b, None, "bus", float(net.res_bus.q_mvar[idx[b]]), sp))
    noisy = [(*r[:4], r[4] + rng.normal(0, r[5]), r[5]) for r in readings]

    # pandapower: measurements on a copy of the case
    for kind, el, side, what, val, sd in noisy:
        if kind == "v":
            pp.create_measurement(net, "v", "bus", val, sd, idx[el])
        elif what == "bus":
            pp.create_measurement(net, kind, "bus", val, sd, idx[el])
        else:
            li = int(net.line.index[net.line.name == el][0])
            pp.create_measurement(net, kind, "line", val, sd, li, side)
    assert est.estimate(net, init="flat", tolerance=1e-10, maximum_iterations=50)
    ref_v = net.res_bus_est.vm_pu.to_numpy()
    ref_a = net.res_bus_est.va_degree.to_numpy()

    # the same case for the estimator's engine: one node per bus, per unit
    node = {b: i for i, b in enumerate(BUSES)}
    tps = []
    for name in LINES:
        p = lines[name]
        assert isinstance(p, LineParams)
        ys = 1 / (complex(p.r_ohm, p.x_ohm) / Z_BASE)
        ysh = 1j * p.b_us * 1e-6 * Z_BASE / 2
        y = np.array([[ys + ysh, -ys], [-ys, ys + ysh]])
        a, b = ends[name]
        tps.append(TwoPortTerm(name, np.array([node[a], node[b]]), (lambda pv, y=y: y), ()))
    at_bus = {b: [] for b in BUSES}
    for k, name in enumerate(LINES):
        a, b = ends[name]
        at_bus[a].append((k, 0))
        at_bus[b].append((k, 1))
    meters = []
    slot = {"v": 0, "p": 2, "q": 3}
    for kind, el, side, what, val, sd in noisy:
        if kind == "v":
            cur: tuple = ()
            bus = el
        elif what == "bus":  # pandapower's bus p/q are consumption: minus the flow into the lines
            cur = tuple(("t", k, e, -1.0) for k, e in at_bus[el])
            bus = el
        else:
            k = LINES.index(el)
            e = 0 if side == "from" else 1
            cur = (("t", k, e, 1.0),)
            bus = ends[el][e]
        meters.append(
            MeterTerm(f"{kind}:{el}:{side}", np.array([node[bus]]), cur, -1, -1,
                      np.array([slot[kind]]), np.array([val]), np.array([sd]))
        )  # fmt: skip
    step = StepModel(
        4, np.ones(4), np.ones(4, complex), np.array([0]), tuple(tps), (), tuple(meters), (), 1
    )
    fit = solve([step], [])
    assert fit.converged
    v = fit.lay.tcs[0] @ fit.x[fit.lay.offsets[0] :]
    # reference: pandapower.estimation.estimate on the same readings
    np.testing.assert_allclose(np.abs(v), ref_v, atol=1e-7)
    np.testing.assert_allclose(
        np.degrees(np.angle(v)) - np.degrees(np.angle(v[0])), ref_a - ref_a[0], atol=1e-5
    )
