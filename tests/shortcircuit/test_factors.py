"""The plain IEC 60909-0 formulas: c table, kappa, method B, K_T, Ith, and the exact RL peak."""

from __future__ import annotations

import math

import pytest

from meas.shortcircuit.factors import (
    heat_factor_m,
    kappa,
    kappa_b,
    kt_network_transformer,
    thermal_current,
    voltage_factors,
)
from meas.shortcircuit.rl import kappa_exact, peak_factor, rl_current


def test_voltage_factor_table() -> None:
    # IEC 60909-0:2016 Table 1 as pandapower implements it (REFERENCES.md §6)
    assert voltage_factors(400.0, 10.0) == (1.10, 0.90)
    assert voltage_factors(400.0, 6.0) == (1.05, 0.95)
    assert voltage_factors(1000.0, 6.0) == (1.05, 0.95)  # LV is up to 1000 V
    assert voltage_factors(11_000.0) == (1.10, 1.00)
    assert voltage_factors(380_000.0) == (1.10, 1.00)
    with pytest.raises(ValueError, match="6 or 10"):
        voltage_factors(400.0, 8.0)


def test_kappa_formula() -> None:
    # REFERENCES.md §6: R/X = 0.1 gives kappa = 1.7460 [C]
    assert kappa(0.1) == pytest.approx(1.7460, abs=5e-5)
    # CALIBRATION_NOTES §4.10 table, "kappa IEC" row
    for rx, k in ((0.05, 1.8635), (0.2, 1.5578), (0.3, 1.4184), (0.5, 1.2387), (1.0, 1.0688)):
        assert kappa(rx) == pytest.approx(k, abs=5e-5)


@pytest.mark.parametrize(
    ("rx", "k_exact"),
    # CALIBRATION_NOTES §6.9 / §4.10: exact worst-case RL peak, to 1e-3
    [(0.05, 1.8566), (0.1, 1.7368), (0.2, 1.5503), (0.3, 1.4151), (0.5, 1.2418), (1.0, 1.0694)],
)
def test_exact_worst_case_peak_against_the_formula(rx: float, k_exact: float) -> None:
    k, _ = kappa_exact(rx)
    assert k == pytest.approx(k_exact, abs=1e-3)
    # the notes: the formula is within 0.6 %, high for R/X <= 0.3 and low for R/X >= 0.5
    assert abs(kappa(rx) / k - 1) < 0.006
    assert (kappa(rx) > k) == (rx <= 0.3)


def test_peak_factor_agrees_with_a_dense_time_series() -> None:
    # the closed form sampled at 1 MHz over two cycles (common practice: brute force)
    import numpy as np

    t = np.arange(0, 0.04, 1e-6)
    for rx, alpha in ((0.5028, 0.0), (0.1, 1.0), (0.8, -2.0)):
        dense = float(np.abs(rl_current(t, 1.0, rx, 50.0, alpha)).max()) / math.sqrt(2)
        assert peak_factor(rx, alpha) == pytest.approx(dense, rel=2e-6)


def test_method_b_factor_and_caps() -> None:
    # IEC 60909-0 §8.1.3 a): 1.15 kappa in meshed networks, at most 1.8 (LV) / 2.0 (MV, HV)
    assert kappa_b(0.5, meshed=True, lv=False) == pytest.approx(1.15 * kappa(0.5))
    assert kappa_b(0.5, meshed=False, lv=False) == pytest.approx(kappa(0.5))
    assert kappa_b(0.05, meshed=True, lv=True) == 1.8
    assert kappa_b(0.05, meshed=True, lv=False) == 2.0
    assert kappa_b(0.2, meshed=True, lv=False, all_branches_below_0_3=True) == pytest.approx(
        kappa(0.2)
    )


def test_kt_and_heat_factor() -> None:
    # K_T = 0.95 cmax/(1 + 0.6 x_T), IEC 60909-0 eq. (12a); uk 6 %, ur 1.2 % -> x_T 0.058788
    assert kt_network_transformer(1.05, 6.0, 1.2) == pytest.approx(
        0.95 * 1.05 / (1 + 0.6 * 0.0587878), rel=1e-6
    )
    # m = 0 at kappa 1 (no DC); Ith of the POC, CALIBRATION_NOTES §4.9: 0.36921 kA at Tk 0.2 s
    assert heat_factor_m(1.0, 50.0, 1.0) == 0.0
    assert thermal_current(362.9607, kappa(0.50282), 50.0, 0.2) == pytest.approx(369.21, abs=0.01)
