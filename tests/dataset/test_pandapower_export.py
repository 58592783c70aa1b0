"""The bench model exported as pandapower element tables loads into pandapower (the generic
loader below, as docs/dataset-format.md gives it) and its load flow matches benchwalk's solver.

Reference: pandapower 3.5 ``runpp`` (Newton-Raphson, tolerance 1e-9 MVA). The demo's load
bank 2 is unbalanced and voltage-dependent, which a positive-sequence flow cannot represent,
so the balanced comparison uses the demo with that load made balanced (same totals), as
tests/network does.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pytest

from meas.dataset.grid_tables import BUS_FIELDS, pandapower_tables, write_pandapower_tables
from meas.model import LoadParams, Profile
from meas.network.admittance import build_network
from meas.network.elements import element_models
from meas.network.loadflow import solve
from meas.profile import load_profile

pp = pytest.importorskip("pandapower")

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"
CASES = [{}, {"TIE": "closed"}, {"RX": "closed"}, {"TIE": "closed", "RX": "closed", "LB2": "open"}]


def load_into_pandapower(tables: dict):
    """The documented loader: one create call per row, bus names resolved to bus indices."""
    net = pp.create_empty_network(f_hz=tables["f_hz"], sn_mva=tables["sn_mva"])
    index: dict[str, int] = {}
    for element, rows in tables["elements"].items():
        create = getattr(pp, tables["create"][element])
        for row in rows:
            kw = {
                k: index[v] if k in BUS_FIELDS else v
                for k, v in row.items()
                if not k.startswith("benchwalk:")
            }
            created = create(net, **kw)
            if element == "bus":
                index[row["name"]] = created
    return net, index


def balanced(p: Profile) -> Profile:
    branches = tuple(
        dataclasses.replace(b, model=LoadParams(5000.0, 1600.0, "z")) if b.id == "LD2" else b
        for b in p.branches
    )
    return dataclasses.replace(p, branches=branches)


@pytest.fixture(scope="module")
def demo() -> Profile:
    return balanced(load_profile(DEMO))


@pytest.mark.parametrize(
    "states", CASES, ids=lambda s: ",".join(f"{k}={v}" for k, v in s.items()) or "normal"
)
def test_exported_tables_load_and_match_our_load_flow(demo, states, tmp_path):
    path = tmp_path / "pandapower.json"
    write_pandapower_tables(demo, path, states)
    tables = json.loads(path.read_text())
    net, index = load_into_pandapower(tables)
    pp.runpp(net, algorithm="nr", calculate_voltage_angles=True, tolerance_mva=1e-9)
    sol = solve(
        build_network(
            demo, {**{s.id: s.normal for s in demo.switches}, **states}, element_models(demo)
        )
    )
    for bus in demo.buses:
        v = sol.v[bus.id]
        vb = 400.0 / math.sqrt(3)
        i = index[bus.id]
        # |V| within 1e-6 pu of pandapower's (the figure), angle within 1e-4 degrees
        assert abs(abs(v[0]) / vb - net.res_bus.vm_pu[i]) < 1e-6, bus.id
        assert abs(np.angle(v[0], deg=True) - net.res_bus.va_degree[i]) < 1e-4, bus.id


def test_open_switches_take_their_branch_out_of_service(demo):
    t = pandapower_tables(demo, {"TIE": "closed", "RX": "closed", "LB2": "open"})
    rows = {r["name"]: r for e in t["elements"].values() for r in e}
    branch_of = {s.id: s.branch for s in demo.switches}
    assert rows[branch_of["LB2"]]["in_service"] is False
    assert (
        rows[branch_of["TIE"]]["in_service"] is True and rows[branch_of["RX"]]["in_service"] is True
    )


def pq_unbalanced(p: Profile) -> Profile:
    """The demo with every load constant-power (runpp_3ph's asymmetric loads are constant
    power), load bank 2 kept unbalanced per phase."""
    out = []
    for b in p.branches:
        if b.kind == "load":
            m = b.model
            assert isinstance(m, LoadParams)
            b = dataclasses.replace(b, model=LoadParams(m.p_w, m.q_var, "pq"))
        out.append(b)
    return dataclasses.replace(p, branches=tuple(out))


def test_three_phase_tables_match_our_unbalanced_load_flow(tmp_path):
    """runpp_3ph (pandapower 3.5, sequence-frame unbalanced flow) on the exported tables of
    the demo with load bank 2 unbalanced: per-phase |V| within 1e-6 pu, angles within 1e-4 deg."""
    from pandapower.pf.runpp_3ph import runpp_3ph

    p = pq_unbalanced(load_profile(DEMO))
    tables = pandapower_tables(p)  # normal states: the reactor is out
    assert tables["elements"]["asymmetric_load"]
    net, index = load_into_pandapower(tables)
    runpp_3ph(net, tolerance_mva=1e-10)
    sol = solve(build_network(p, {s.id: s.normal for s in p.switches}, element_models(p)))
    vb = 400.0 / math.sqrt(3)
    assert np.ptp(np.abs(sol.v["B3"])) / vb > 0.005  # really unbalanced
    for bus in p.buses:
        r = net.res_bus_3ph.loc[index[bus.id]]
        for k, ph in enumerate("abc"):
            assert abs(abs(sol.v[bus.id][k]) / vb - r[f"vm_{ph}_pu"]) < 1e-6, (bus.id, ph)
            da = (np.angle(sol.v[bus.id][k], deg=True) - r[f"va_{ph}_degree"] + 180) % 360 - 180
            assert abs(da) < 1e-4, (bus.id, ph)
