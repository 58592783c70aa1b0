"""pandapower copies of benchwalk networks, the oracle of the short-circuit tests and benchmark.

``demo_bench_net`` maps a profile's sources, lines and transformers onto pandapower as the
research notes do (CALIBRATION_NOTES §2.2): an ext_grid with s_sc = c Un^2/|Z_s| and
rx = R_s/X_s (benchwalk's sc_va carries no c), lines from their lumped R and X without
charging (IEC 60909 neglects it), switches as in-service flags. ``scale`` "network" builds it
at the zones' network voltages with impedances times (vs^2 / ps).
"""

from __future__ import annotations

from collections.abc import Mapping

import pandapower as pp

from meas.model import LineParams, Profile, SourceParams, TransformerParams
from meas.network.topology import branch_conducts, settled_states
from meas.shortcircuit.factors import voltage_factors


def demo_bench_net(
    profile: Profile,
    states: Mapping[str, str] | None = None,
    scale: str = "bench",
    case: str = "max",
) -> tuple[pp.pandapowerNet, dict[str, int]]:
    conducts = branch_conducts(profile, settled_states(profile, dict(states or {})))
    net = pp.create_empty_network(f_hz=profile.bench.frequency_hz, sn_mva=1.0)
    zone = {z.id: z for z in profile.bench.zones}
    ps = profile.bench.power_scale

    def vs(bus: str) -> float:
        z = zone[profile.bus(bus).zone]
        return z.network_v_ll / z.bench_v_ll if scale == "network" else 1.0

    idx = {}
    for b in profile.buses:
        z = zone[b.zone]
        vn = (z.network_v_ll if scale == "network" else z.bench_v_ll) / 1000.0
        idx[b.id] = pp.create_bus(net, vn_kv=vn, name=b.id)
    fz = (lambda bus: vs(bus) ** 2 / ps) if scale == "network" else (lambda bus: 1.0)
    for br in profile.branches:
        p = br.model
        on = conducts[br.id] is not False
        if isinstance(p, SourceParams):
            z = p.v_ll**2 / p.sc_va * fz(br.from_bus)
            un = net.bus.vn_kv[idx[br.from_bus]]
            cmax, cmin = voltage_factors(un * 1000.0)
            c = cmax if case == "max" else cmin
            s = c * un**2 / z
            pp.create_ext_grid(
                net,
                idx[br.from_bus],
                s_sc_max_mva=s,
                s_sc_min_mva=s,
                rx_max=1 / p.x_r,
                rx_min=1 / p.x_r,
                x0x_max=1.0,
                r0x0_max=1 / p.x_r,
                x0x_min=1.0,
                r0x0_min=1 / p.x_r,
                in_service=on,
            )
        elif isinstance(p, LineParams) and br.to_bus is not None:
            f = fz(br.from_bus)
            pp.create_line_from_parameters(
                net,
                idx[br.from_bus],
                idx[br.to_bus],
                length_km=1.0,
                r_ohm_per_km=p.r_ohm * f,
                x_ohm_per_km=p.x_ohm * f,
                c_nf_per_km=0.0,
                max_i_ka=1.0,
                r0_ohm_per_km=(p.r0_ohm if p.r0_ohm is not None else p.r_ohm) * f,
                x0_ohm_per_km=(p.x0_ohm if p.x0_ohm is not None else p.x_ohm) * f,
                c0_nf_per_km=0.0,
                in_service=on,
                name=br.id,
            )
        elif isinstance(p, TransformerParams) and br.to_bus is not None:
            pp.create_transformer_from_parameters(
                net,
                idx[br.from_bus],
                idx[br.to_bus],
                sn_mva=p.s_va * (ps if scale == "network" else 1.0) / 1e6,
                vn_hv_kv=p.v1_ll * vs(br.from_bus) / 1e3,
                vn_lv_kv=p.v2_ll * vs(br.to_bus) / 1e3,
                vk_percent=p.uk_pct,
                vkr_percent=p.ur_pct,
                pfe_kw=0.0,
                i0_percent=0.0,
                in_service=on,
                name=br.id,
            )
    net.line["endtemp_degree"] = 20.0  # no conductor heating: benchwalk takes R as given
    return net, idx
