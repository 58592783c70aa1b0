"""The IEC TR 60909-4 test network (the small variant, without generators), buses 1-5.

Values: pandapower's own test ``test_iec_60909_4_3ph_small_without_gen``
(pandapower/test/shortcircuit/test_iec60909_4.py, asserted there at atol 1e-3; CALIBRATION_NOTES
§6.8 [V]; that they are the TR's printed values is from memory): I"k 40.3390, 28.4130, 14.2095,
28.7195, 13.4191 kA and ip 99.7374, 72.6580, 32.1954, 72.1443, 36.5036 kA (3ph max, kappa C).

The network is rebuilt twice: as pandapower builds it in that test (so ``calc_sc`` runs live
as the oracle) and as a benchwalk profile. benchwalk has no three-winding transformer, so each
400/120/30 kV unit enters as its star equivalent (IEC 60909-0 §6.3.2, eq. (10); clause numbers from memory) with K_TAB,
K_TAC, K_TBC applied per winding pair first (§6.3.3, eq. (13)), as pandapower does: a
400/120 kV transformer (star branch A, positive), a line at 120 kV (branch B, whose reactance
is negative), a 120/30 kV transformer (branch C). Those star branches are exempt from the
two-winding K_T (``kt_exempt``); so is the power-station unit T1 (IEC §6.7).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandapower as pp
import pandapower.shortcircuit as pp_sc
import pytest

from meas.model import (
    Bench,
    Branch,
    Bus,
    LineParams,
    Profile,
    SourceParams,
    TransformerParams,
    Zone,
)
from meas.shortcircuit.factors import kt_network_transformer
from meas.shortcircuit.iec60909 import short_circuit

IKSS_KA = [40.3390, 28.4130, 14.2095, 28.7195, 13.4191]
IP_KA = [99.7374, 72.6580, 32.1954, 72.1443, 36.5036]
BUSES = ["b1", "b2", "b3", "b5", "b8"]
LINES = [  # name, from, to, km, r/km, x/km, r0/km, x0/km (pandapower's test)
    ("L1", "b2", "b3", 20, 0.12, 0.39, 0.32, 1.26),
    ("L3a", "b2", "b5", 5, 0.12, 0.39, 0.52, 1.86),
    ("L3b", "b2", "b5", 5, 0.12, 0.39, 0.52, 1.86),
    ("L4", "b5", "b3", 10, 0.096, 0.388, 0.22, 1.1),
]
T3W = dict(
    vn=(400.0, 120.0, 30.0), sn=(350.0, 350.0, 50.0), vk=(21.0, 7.0, 10.0), vkr=(0.26, 0.16, 0.16)
)


def pandapower_small() -> pp.pandapowerNet:
    """As ``iec_60909_4_small()`` in pandapower's test, generators removed."""
    net = pp.create_empty_network(sn_mva=6)
    b = {
        n: pp.create_bus(net, vn_kv=v, name=n)
        for n, v in (
            ("b1", 380.0),
            ("b2", 110.0),
            ("b3", 110.0),
            ("b5", 110.0),
            ("b8", 30.0),
            ("H", 30.0),
            ("HG2", 10.0),
        )
    }
    pp.create_ext_grid(
        net, b["b1"], s_sc_max_mva=38 * 380 * np.sqrt(3), rx_max=0.1, x0x_max=3, r0x0_max=0.15
    )
    pp.create_ext_grid(
        net, b["b5"], s_sc_max_mva=16 * 110 * np.sqrt(3), rx_max=0.1, x0x_max=3.3, r0x0_max=0.2
    )
    pp.create_transformer_from_parameters(
        net,
        b["b3"],
        b["HG2"],
        sn_mva=100,
        pfe_kw=0,
        i0_percent=0,
        vn_hv_kv=120.0,
        vn_lv_kv=10.5,
        vk_percent=12,
        vkr_percent=0.5,
        vk0_percent=12,
        vkr0_percent=0.5,
        mag0_percent=10000,
        mag0_rx=0,
        si0_hv_partial=0.5,
        shift_degree=5,
        vector_group="Yd",
        power_station_unit=True,
    )
    for lv in ("H", "b8"):
        pp.create_transformer3w_from_parameters(
            net,
            hv_bus=b["b1"],
            mv_bus=b["b2"],
            lv_bus=b[lv],
            vn_hv_kv=400,
            vn_mv_kv=120,
            vn_lv_kv=30,
            sn_hv_mva=350,
            sn_mv_mva=350,
            sn_lv_mva=50,
            pfe_kw=0,
            i0_percent=0,
            vk_hv_percent=21,
            vkr_hv_percent=0.26,
            vk_mv_percent=7,
            vkr_mv_percent=0.16,
            vk_lv_percent=10.0,
            vkr_lv_percent=0.16,
        )
    for name, f, t, km, r, x, r0, x0 in LINES:
        pp.create_line_from_parameters(
            net,
            b[f],
            b[t],
            name=name,
            c_nf_per_km=0,
            max_i_ka=0,
            length_km=km,
            r_ohm_per_km=r,
            x_ohm_per_km=x,
            r0_ohm_per_km=r0,
            x0_ohm_per_km=x0,
            c0_nf_per_km=0,
            g0_us_per_km=0,
        )
    return net


def _star_ohm_at_hv() -> tuple[complex, complex, complex]:
    """Star impedances (A = HV, B = MV, C = LV) in ohm at 400 kV, K_T per pair applied first."""
    vn_hv, (s_a, s_b, s_c) = T3W["vn"][0], T3W["sn"]
    pairs = []  # AB, BC, AC with their rated powers (the smaller winding's)
    for (vk, vkr), s in zip(
        zip(T3W["vk"], T3W["vkr"], strict=True),
        (min(s_a, s_b), min(s_b, s_c), min(s_a, s_c)),
        strict=True,
    ):
        kt = kt_network_transformer(1.1, vk, vkr)  # cmax of the HV network, IEC 60909-0 eq. (13)
        z = vn_hv**2 / s * complex(vkr, math.sqrt(vk**2 - vkr**2)) / 100 * kt
        pairs.append(z)
    z_ab, z_bc, z_ac = pairs
    return (z_ab + z_ac - z_bc) / 2, (z_ab + z_bc - z_ac) / 2, (z_ac + z_bc - z_ab) / 2


def _tr(s_va: float, v1: float, v2: float, z_at_2: complex) -> TransformerParams:
    z_base = v2**2 / s_va
    return TransformerParams(
        s_va=s_va,
        v1_ll=v1,
        v2_ll=v2,
        uk_pct=abs(z_at_2) / z_base * 100,
        ur_pct=z_at_2.real / z_base * 100,
        vector_group="YNyn0",
    )


def benchwalk_small() -> Profile:
    zones = (
        Zone("hv380", 380e3, 380e3),
        Zone("hv110", 110e3, 110e3),
        Zone("mv30", 30e3, 30e3),
        Zone("mv10", 10e3, 10e3),
    )
    buses = [
        Bus("b1", "hv380"),
        Bus("b2", "hv110"),
        Bus("b3", "hv110"),
        Bus("b5", "hv110"),
        Bus("b8", "mv30"),
        Bus("H", "mv30"),
        Bus("HG2", "mv10"),
    ]
    za, zb, zc = _star_ohm_at_hv()
    k120, k30 = (120 / 400) ** 2, (30 / 400) ** 2
    branches = [
        Branch(
            "Q1",
            "source",
            "b1",
            model=SourceParams(v_ll=380e3, sc_va=38e3 * 380e3 * math.sqrt(3) / 1.1, x_r=10.0),
        ),
        Branch(
            "Q2",
            "source",
            "b5",
            model=SourceParams(v_ll=110e3, sc_va=16e3 * 110e3 * math.sqrt(3) / 1.1, x_r=10.0),
        ),
        Branch(
            "T1",
            "transformer",
            "b3",
            "HG2",
            model=TransformerParams(100e6, 120e3, 10.5e3, 12.0, "YNyn0", 0.5),
        ),
    ]
    for n, lv in (("TA", "H"), ("TB", "b8")):
        star = f"{n}star"
        buses.append(Bus(star, "hv110"))
        branches += [
            Branch(f"{n}a", "transformer", "b1", star, model=_tr(350e6, 400e3, 120e3, za * k120)),
            Branch(
                f"{n}b",
                "line",
                star,
                "b2",
                model=LineParams(r_ohm=zb.real * k120, x_ohm=zb.imag * k120),
            ),
            Branch(f"{n}c", "transformer", star, lv, model=_tr(350e6, 120e3, 30e3, zc * k30)),
        ]
    for name, f, t, km, r, x, r0, x0 in LINES:
        branches.append(
            Branch(
                name,
                "line",
                f,
                t,
                model=LineParams(r_ohm=r * km, x_ohm=x * km, r0_ohm=r0 * km, x0_ohm=x0 * km),
            )
        )
    bench = Bench("IEC TR 60909-4 small network", 50.0, 1.0, 1e6, zones)
    return Profile("iec_tr_60909_4_small", "", bench, {}, (), tuple(buses), tuple(branches), ())


EXEMPT = frozenset({"T1", "TAa", "TAc", "TBa", "TBc"})


def test_pandapower_reproduces_its_asserted_values() -> None:
    net = pandapower_small()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pp_sc.calc_sc(net, fault="3ph", case="max", ip=True, tk_s=0.1, kappa_method="C")
    assert net.res_bus_sc.ikss_ka.values[:5] == pytest.approx(IKSS_KA, abs=1e-3)
    assert net.res_bus_sc.ip_ka.values[:5] == pytest.approx(IP_KA, abs=1e-3)


def test_star_equivalent_has_the_negative_branch_the_notes_expect() -> None:
    # the MV star branch of this unit is slightly capacitive once K_T is applied per pair:
    # the reason it is entered as a line (a transformer's uk cannot be negative)
    assert _star_ohm_at_hv()[1].imag < 0


@pytest.mark.parametrize(("k", "bus"), list(enumerate(BUSES)))
def test_benchwalk_model_matches_the_tr_values_and_calc_sc(k: int, bus: str) -> None:
    s = short_circuit(benchwalk_small(), bus, "3ph", "max", kappa_method="C", kt_exempt=EXEMPT)
    assert s.meshed and s.kappa_method == "C"
    assert s.ikss_a / 1e3 == pytest.approx(IKSS_KA[k], abs=1e-3)
    assert s.ip_a / 1e3 == pytest.approx(IP_KA[k], abs=1e-3)
