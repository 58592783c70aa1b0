"""The calibration problem with pandapower's balanced load flow (``runpp``) in the loop.

A reference for the fit (test and benchmark only; pandapower is a test dependency): the same
residuals, priors and gains, with the model readings from pandapower instead of benchwalk's own
three-phase solver. It works on a balanced bench (pandapower's ``runpp`` is positive-sequence):
``balanced_demo`` makes the demo's unbalanced load bank 2 balanced with the same totals, as the
reference study's copy of the demo did (CALIBRATION_NOTES.md §4.1). The source becomes an
external grid at its EMF behind a line with the source's R and X.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import replace

import numpy as np
import pandapower as pp

from meas.calib.observations import Observations
from meas.model import LineParams, LoadParams, Profile, ShuntParams, SourceParams
from meas.network.parameters import with_values
from meas.network.topology import branch_conducts, settled_states

_LD2_TOTAL = (5000.0, 1600.0)


def balanced_demo(profile: Profile) -> Profile:
    """The demo bench with load bank 2 balanced at the same total power."""
    out = []
    for b in profile.branches:
        if b.id == "LD2" and isinstance(b.model, LoadParams):
            b = replace(b, model=replace(b.model, p_w=_LD2_TOTAL[0], q_var=_LD2_TOTAL[1]))
        out.append(b)
    return replace(profile, branches=tuple(out))


class PandapowerPredictor:
    """``meas.calib.predict.Predictor`` on pandapower ``runpp``, one net per step."""

    def __init__(self, profile: Profile, obs: Observations):
        self.profile = profile
        self.obs = obs
        self.solves = 0
        self.nets = [self._build(settled_states(profile, st.switches)) for st in obs.steps]

    def affected(self, name: str) -> tuple[int, ...]:
        branch = name.partition(".")[0]
        return tuple(
            k
            for k, st in enumerate(self.obs.steps)
            if branch_conducts(self.profile, settled_states(self.profile, st.switches))[branch]
            is not False
        )

    def _build(self, states: Mapping[str, str]) -> pp.pandapowerNet:
        net = pp.create_empty_network(f_hz=self.profile.bench.frequency_hz)
        kv = 0.4
        bus = {"E": pp.create_bus(net, kv, name="E")}
        for b in self.profile.buses:
            bus[b.id] = pp.create_bus(net, kv, name=b.id)
        on = branch_conducts(self.profile, states)
        for br in self.profile.branches:
            m = br.model
            if isinstance(m, SourceParams):
                pp.create_ext_grid(net, bus["E"], vm_pu=1.0, name=br.id)
                pp.create_line_from_parameters(
                    net, bus["E"], bus[br.from_bus], 1.0, 0.1, 0.1, 0.0, 1.0, name=br.id
                )
            elif isinstance(m, LineParams):
                assert br.to_bus is not None
                pp.create_line_from_parameters(
                    net,
                    bus[br.from_bus],
                    bus[br.to_bus],
                    1.0,
                    0.1,
                    0.1,
                    0.0,
                    1.0,
                    name=br.id,
                    in_service=on[br.id] is not False,
                )
            elif isinstance(m, LoadParams):
                pp.create_load(
                    net, bus[br.from_bus], 0.0, 0.0, name=br.id, in_service=on[br.id] is not False
                )
            elif isinstance(m, ShuntParams):
                pp.create_shunt(
                    net, bus[br.from_bus], 0.0, 0.0, name=br.id, in_service=on[br.id] is not False
                )
        return net

    def _write(self, net: pp.pandapowerNet, profile: Profile, emf: float) -> None:
        f = profile.bench.frequency_hz
        for br in profile.branches:
            m = br.model
            if isinstance(m, SourceParams):
                z = m.v_ll**2 / m.sc_va
                r, x = z / math.sqrt(1 + m.x_r**2), z * m.x_r / math.sqrt(1 + m.x_r**2)
                net.ext_grid.loc[net.ext_grid.name == br.id, "vm_pu"] = m.v_ll * emf / 400.0
                i = net.line.index[net.line.name == br.id]
                net.line.loc[i, ["r_ohm_per_km", "x_ohm_per_km", "c_nf_per_km"]] = (r, x, 0.0)
            elif isinstance(m, LineParams):
                i = net.line.index[net.line.name == br.id]
                c_nf = m.b_us * 1e-6 / (2 * math.pi * f) * 1e9
                net.line.loc[i, ["r_ohm_per_km", "x_ohm_per_km", "c_nf_per_km"]] = (
                    m.r_ohm,
                    m.x_ohm,
                    c_nf,
                )
            elif isinstance(m, LoadParams):
                zf, fi, _ = (
                    m.zip
                    if m.behaviour == "zip" and m.zip
                    else {"pq": (0.0, 0.0, 1.0), "z": (1.0, 0.0, 0.0), "i": (0.0, 1.0, 0.0)}[
                        m.behaviour
                    ]
                )
                i = net.load.index[net.load.name == br.id]
                net.load.loc[i, ["p_mw", "q_mvar"]] = (_total(m.p_w) * 1e-6, _total(m.q_var) * 1e-6)
                net.load.loc[i, ["const_z_p_percent", "const_z_q_percent"]] = (100 * zf, 100 * zf)
                net.load.loc[i, ["const_i_p_percent", "const_i_q_percent"]] = (100 * fi, 100 * fi)
            elif isinstance(m, ShuntParams):
                i = net.shunt.index[net.shunt.name == br.id]
                net.shunt.loc[i, ["q_mvar", "p_mw"]] = (
                    _total(m.q_var) * 1e-6,
                    _total(m.p_w) * 1e-6,
                )

    def predict(
        self,
        values: Mapping[str, float],
        emf: np.ndarray | None = None,
        steps: Sequence[int] | None = None,
        base: np.ndarray | None = None,
    ) -> np.ndarray:
        profile = self.profile
        if values:
            profile = replace(profile, branches=with_values(profile.branches, values))
        out = np.zeros(len(self.obs)) if base is None else base.copy()
        todo = range(len(self.obs.steps)) if steps is None else steps
        for k in todo:
            net = self.nets[k]
            self._write(net, profile, 1.0 if emf is None else float(emf[k]))
            pp.runpp(
                net,
                tolerance_mva=1e-12,
                max_iteration=30,
                calculate_voltage_angles=True,
                numba=False,
            )
            self.solves += 1
            for i in np.flatnonzero(self.obs.step == k):
                out[i] = self._reading(net, profile, i)
        return out

    def _reading(self, net: pp.pandapowerNet, profile: Profile, i: int) -> float:
        meter = profile.meter(self.obs.meter[i])
        qty = self.obs.quantity[i]
        b = net.bus.index[net.bus.name == meter.bus][0]
        v_ph = float(net.res_bus.vm_pu[b]) * 400.0 / math.sqrt(3)
        if qty == "v_ln":
            return v_ph
        br = profile.branch(meter.branch or "")
        if br.kind == "line":
            j = net.line.index[net.line.name == br.id][0]
            end = "from" if meter.bus == br.from_bus else "to"
            res = net.res_line.loc[j]
            p, q = res[f"p_{end}_mw"] * 1e6 / 3, res[f"q_{end}_mvar"] * 1e6 / 3
        else:
            table = net.res_load if br.kind == "load" else net.res_shunt
            elements = net.load if br.kind == "load" else net.shunt
            j = elements.index[elements.name == br.id][0]
            p, q = table.p_mw[j] * 1e6 / 3, table.q_mvar[j] * 1e6 / 3
        return {"p": p, "q": q, "i": math.hypot(p, q) / v_ph}[qty]


def _total(v: float | tuple[float, float, float]) -> float:
    return float(sum(v)) if isinstance(v, tuple) else float(v)


def small_case_params() -> list[str]:
    return ["SRC.v_ll", "L1.r_ohm", "L2.x_ohm", "LD1.p_w"]


def small_case_steps() -> Sequence[str]:
    return ("pick-up-section-2", "load-bank-2")
