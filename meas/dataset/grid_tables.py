"""The bench model as tables a power-system library loads: pandapower's element tables, by
pandapower's own element and parameter names, one JSON file.

Why tables and not pandapower's own JSON file: that file embeds pandas' DataFrame
serialization and a pandapower version (``from_json`` converts between releases), so writing
it without pandapower would tie benchwalk to one release; the parameters of pandapower's
``create_*`` functions are its stable public API, and plain tables are readable by anything.
Loading is one loop (docs/dataset-format.md): ``getattr(pp, "create_" + element)(net, **row)``
with bus names resolved to the created buses.

Mapping (the same as the cross-check against pandapower in tests/network): a source is an
``ext_grid`` at an extra bus ``<id>.emf`` behind its short-circuit impedance as a 1 km line
(an ideal source sits on its bus directly); lumped lines are 1 km long; switches are the
``in_service`` flag of the branch they open, for the configuration given; per-phase load and
shunt values that differ are ``asymmetric_load`` / three single-phase parts for
``runpp_3ph``. Units: kV, MW, Mvar, ohm, nF per km (pandapower's).
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from ..model import (
    LineParams,
    LoadParams,
    PhaseValues,
    Profile,
    ShuntParams,
    SourceParams,
    TransformerParams,
)
from ..network.topology import settled_states

FORMAT = "benchwalk pandapower tables 1"
# element table -> the pandapower function that creates one row of it
CREATE = {
    "bus": "create_bus",
    "ext_grid": "create_ext_grid",
    "line": "create_line_from_parameters",
    "trafo": "create_transformer_from_parameters",
    "load": "create_load",
    "asymmetric_load": "create_asymmetric_load",
    "shunt": "create_shunt",
}
BUS_FIELDS = ("bus", "from_bus", "to_bus", "hv_bus", "lv_bus")  # values are bus names
Row = dict[str, Any]


def _phases(x: PhaseValues) -> tuple[float, float, float]:
    """Per-phase values: a single number is the three-phase total, shared equally."""
    if isinstance(x, int | float):
        return (x / 3.0, x / 3.0, x / 3.0)
    a, b, c = x
    return (float(a), float(b), float(c))


def _nf(b_us: float | None, f_hz: float) -> float:
    return 0.0 if not b_us else b_us * 1e-6 / (2 * math.pi * f_hz) * 1e9


def pandapower_tables(
    profile: Profile, switch_states: Mapping[str, str] | None = None
) -> dict[str, Any]:
    """The bench as pandapower element tables for one switch configuration (default: normal)."""
    f = profile.bench.frequency_hz
    states = settled_states(profile, dict(switch_states or {}))
    opened = {s.branch for s in profile.switches if states[s.id] == "open"}
    zones = {z.id: z for z in profile.bench.zones}
    vn = {b.id: zones[b.zone].bench_v_ll / 1e3 for b in profile.buses}
    t: dict[str, list[Row]] = {
        k: [] for k in ("bus", "ext_grid", "line", "trafo", "load", "asymmetric_load", "shunt")
    }
    for b in profile.buses:
        t["bus"].append({"name": b.id, "vn_kv": vn[b.id]})
    for br in profile.branches:
        m, live = br.model, br.id not in opened
        if isinstance(m, SourceParams):
            bus = br.from_bus
            grid = {"vm_pu": m.v_ll / 1e3 / vn[bus], "va_degree": m.angle_deg, "in_service": live}
            if math.isfinite(m.sc_va):
                emf = f"{br.id}.emf"
                t["bus"].append({"name": emf, "vn_kv": vn[bus]})
                z = (m.v_ll**2) / m.sc_va
                r = z / math.sqrt(1 + m.x_r**2)
                t["line"].append(
                    {"name": br.id, "from_bus": emf, "to_bus": bus, "length_km": 1.0,
                     "r_ohm_per_km": r, "x_ohm_per_km": r * m.x_r, "c_nf_per_km": 0.0,
                     "r0_ohm_per_km": r, "x0_ohm_per_km": r * m.x_r, "c0_nf_per_km": 0.0,
                     "max_i_ka": 10.0, "in_service": live}
                )  # fmt: skip
                bus = emf
            # the source impedance is the line above: the ext_grid itself is a stiff EMF for
            # runpp_3ph too (1e6 MVA short-circuit power), as in tests/network's cross-check
            grid |= {"s_sc_max_mva": 1e6, "rx_max": 0.1, "x0x_max": 1.0, "r0x0_max": 0.1}
            t["ext_grid"].append({"name": br.id, "bus": bus, **grid})
        elif isinstance(m, LineParams):
            length = m.length_km or 1.0
            t["line"].append(
                {"name": br.id, "from_bus": br.from_bus, "to_bus": br.to_bus, "length_km": length,
                 "r_ohm_per_km": m.r_ohm, "x_ohm_per_km": m.x_ohm, "c_nf_per_km": _nf(m.b_us, f),
                 "r0_ohm_per_km": m.r0_ohm if m.r0_ohm is not None else m.r_ohm,
                 "x0_ohm_per_km": m.x0_ohm if m.x0_ohm is not None else m.x_ohm,
                 "c0_nf_per_km": _nf(m.b0_us if m.b0_us is not None else m.b_us, f),
                 "max_i_ka": 10.0, "in_service": live}
            )  # fmt: skip
        elif isinstance(m, TransformerParams):
            t["trafo"].append(
                {"name": br.id, "hv_bus": br.from_bus, "lv_bus": br.to_bus, "sn_mva": m.s_va / 1e6,
                 "vn_hv_kv": m.v1_ll / 1e3, "vn_lv_kv": m.v2_ll / 1e3, "vk_percent": m.uk_pct,
                 "vkr_percent": m.ur_pct, "pfe_kw": 0.0, "i0_percent": 0.0,
                 "vector_group": m.vector_group, "vk0_percent": m.uk_pct, "vkr0_percent": m.ur_pct,
                 "mag0_percent": 100.0, "mag0_rx": 0.0, "si0_hv_partial": 0.9,
                 "in_service": live}
            )  # fmt: skip
        elif isinstance(m, LoadParams):
            z, i = {"pq": (0.0, 0.0), "z": (100.0, 0.0)}.get(m.behaviour, (0.0, 0.0))
            if m.behaviour == "zip" and m.zip:
                z, i = 100.0 * m.zip[0], 100.0 * m.zip[1]
            p, q = _phases(m.p_w), _phases(m.q_var)
            if len(set(p)) == 1 and len(set(q)) == 1:
                t["load"].append(
                    {"name": br.id, "bus": br.from_bus, "p_mw": sum(p) / 1e6, "q_mvar": sum(q) / 1e6,
                     "const_z_p_percent": z, "const_z_q_percent": z, "const_i_p_percent": i,
                     "const_i_q_percent": i, "in_service": live}
                )  # fmt: skip
            else:
                t["asymmetric_load"].append(
                    {"name": br.id, "bus": br.from_bus, "type": "wye",
                     "p_a_mw": p[0] / 1e6, "p_b_mw": p[1] / 1e6, "p_c_mw": p[2] / 1e6,
                     "q_a_mvar": q[0] / 1e6, "q_b_mvar": q[1] / 1e6, "q_c_mvar": q[2] / 1e6,
                     "in_service": live, "benchwalk:behaviour": m.behaviour}
                )  # fmt: skip
        elif isinstance(m, ShuntParams):
            p, q = _phases(m.p_w), _phases(m.q_var)
            t["shunt"].append(
                {"name": br.id, "bus": br.from_bus, "p_mw": sum(p) / 1e6, "q_mvar": sum(q) / 1e6,
                 "vn_kv": vn[br.from_bus], "in_service": live}
            )  # fmt: skip
    return {
        "format": FORMAT,
        "f_hz": f,
        "sn_mva": profile.bench.s_base_va / 1e6,
        "switches": dict(states),
        "create": {k: CREATE[k] for k, v in t.items() if v},
        "elements": {k: v for k, v in t.items() if v},
    }


NETWORK_FILE = "network/pandapower.json"


def write_network(profile_files: Sequence[tuple[str, str]], folder: Path) -> bool:
    """The dataset's ``network/pandapower.json`` (normal switch states), when every branch of
    the journalled profile has model data; False (no file) otherwise."""
    from .derived import profile_from_texts

    profile = profile_from_texts(profile_files)
    if profile is None or any(b.model is None for b in profile.branches):
        return False
    path = folder / NETWORK_FILE
    path.parent.mkdir(parents=True, exist_ok=True)
    write_pandapower_tables(profile, path)
    return True


def write_pandapower_tables(
    profile: Profile, path: Path, switch_states: Mapping[str, str] | None = None
) -> None:
    path.write_text(
        json.dumps(pandapower_tables(profile, switch_states), indent=1) + "\n", encoding="utf-8"
    )
