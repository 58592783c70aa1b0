"""Sequence impedances from the phase-frame model, 1ph/2ph faults, K_T and the delta method.

Hand formulas (common practice; Grainger & Stevenson, Power System Analysis, 1994, ch. 12):
a Dyn transformer passes no zero sequence from its delta side, so at its LV terminals Z0 = Z_T
and Z1 = Z_T + Z_Q (referred); a floating star (Yy0) blocks it, so a line-to-earth fault there
draws no current; YNyn0 passes it. I"k1 = sqrt3 c Un / |2 Z1 + Z0|, I"k2 = c Un / |2 Z1|.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.benches import DEMO

from meas.model import Bench, Branch, Bus, Profile, SourceParams, TransformerParams, Zone
from meas.profile import load_profile
from meas.shortcircuit.factors import kt_network_transformer
from meas.shortcircuit.iec60909 import short_circuit
from meas.shortcircuit.thevenin import thevenin
from meas.shortcircuit.uncertainty import Covariance, nameplate_covariance, propagate

ZQ = 400.0**2 / 5e6 * complex(1, 10) / math.sqrt(101)  # 5 MVA feeder, X/R 10
ZT = 400.0**2 / 250e3 * complex(1.0, math.sqrt(4.0**2 - 1.0)) / 100  # 250 kVA, uk 4 %, ur 1 %


def _bench(group: str) -> Profile:
    zone = Zone("lv", 400.0, 400.0)
    branches = (
        Branch("Q", "source", "B0", model=SourceParams(v_ll=400.0, sc_va=5e6, x_r=10.0)),
        Branch(
            "T",
            "transformer",
            "B0",
            "B1",
            model=TransformerParams(250e3, 400.0, 400.0, 4.0, group, 1.0),
        ),  # type: ignore[arg-type]
    )
    bench = Bench("sequence bench", 50.0, 1.0, 250e3, (zone,))
    return Profile("seq", "", bench, {}, (), (Bus("B0", "lv"), Bus("B1", "lv")), branches, ())


def test_dyn11_zero_sequence_is_the_transformer_alone() -> None:
    th = thevenin(_bench("Dyn11"), "B1")
    assert th.z1 == pytest.approx(ZQ + ZT, rel=1e-9)
    assert th.z2 == pytest.approx(ZQ + ZT, rel=1e-9)
    assert th.z0 == pytest.approx(ZT, rel=1e-9)
    s1 = short_circuit(_bench("Dyn11"), "B1", "1ph", "min", lv_tol_pct=10.0)
    assert s1.c == 0.90
    assert s1.ikss_a == pytest.approx(math.sqrt(3) * 0.90 * 400 / abs(2 * (ZQ + ZT) + ZT), rel=1e-9)
    s2 = short_circuit(_bench("Dyn11"), "B1", "2ph", "min")
    assert s2.ikss_a == pytest.approx(0.90 * 400 / abs(2 * (ZQ + ZT)), rel=1e-9)


def test_floating_star_blocks_an_earth_fault_and_yn_passes_it() -> None:
    blocked = short_circuit(_bench("Yy0"), "B1", "1ph", "min")
    assert blocked.ikss_a == 0.0 and math.isinf(blocked.z0_ohm.real)
    assert short_circuit(_bench("Yy0"), "B1", "3ph", "min").ikss_a == pytest.approx(
        0.9 * 400 / (math.sqrt(3) * abs(ZQ + ZT)), rel=1e-9
    )
    grounded = thevenin(_bench("YNyn0"), "B1")
    assert grounded.z0 == pytest.approx(ZQ + ZT, rel=1e-9)  # the source is grounded wye, Z0 = Z1


def test_kt_multiplies_the_transformer_in_the_max_case_only() -> None:
    kt = kt_network_transformer(1.10, 4.0, 1.0)
    s_max = short_circuit(_bench("Dyn11"), "B1", "3ph", "max")
    assert s_max.kt == {"T": pytest.approx(kt)}
    assert s_max.z1_ohm == pytest.approx(ZQ + kt * ZT, rel=1e-9)
    assert short_circuit(_bench("Dyn11"), "B1", "3ph", "min").kt == {}
    assert short_circuit(
        _bench("Dyn11"), "B1", "3ph", "max", apply_kt=False
    ).z1_ohm == pytest.approx(ZQ + ZT, rel=1e-9)


def test_delta_method_against_an_analytic_gradient() -> None:
    # I"k = c Un / (sqrt3 |Zs + ZL1 + ZL2|) at B2 of the demo; dI/dR_L1 = -I R / |Z|^2
    profile = load_profile(DEMO)
    cov = Covariance(("L1.r_ohm",), (0.16,), np.array([[0.01**2]]))
    u = propagate(profile, cov, lambda p: {"ikss": short_circuit(p, "B2").ikss_a})
    s = short_circuit(profile, "B2")
    grad = -s.ikss_a * s.zk_ohm.real / abs(s.zk_ohm) ** 2
    assert u["ikss"] == pytest.approx(abs(grad) * 0.01, rel=1e-6)


def test_nameplate_covariance_takes_the_series_parameters() -> None:
    cov = nameplate_covariance(load_profile(DEMO))
    assert "SRC.sc_va" in cov.names and "L2.x_ohm" in cov.names
    assert not any(n.startswith(("LD", "SH")) or n.endswith("b_us") for n in cov.names)
    k = cov.names.index("L1.r_ohm")
    assert math.sqrt(cov.matrix[k, k]) == pytest.approx(
        0.16 * 0.20 / math.sqrt(3)
    )  # ±20 %, u = a/sqrt3
