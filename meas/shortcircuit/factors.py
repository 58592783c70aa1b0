"""The factors of IEC 60909-0 that are plain formulas: c, kappa, K_T and the heat factor m.

Sources (clause and equation numbers from memory): IEC 60909-0:2016 Table 1 (voltage factor c), eq. (55) for kappa, §6.3.3 for the
network-transformer correction K_T, eq. (102)/(103) for the thermal factors m and n; the
formulas and the c table are as pandapower implements them (REFERENCES.md §6).
"""

from __future__ import annotations

import math

LV_LIMIT_V = 1000.0  # IEC 60909-0 Table 1: low voltage is 100 V to 1000 V
FC_HZ = {50.0: 20.0, 60.0: 24.0}  # method C equivalent frequency, IEC 60909-0 §8.1.3


def voltage_factors(un_v: float, lv_tol_pct: float = 10.0) -> tuple[float, float]:
    """(cmax, cmin) for a network of nominal line-to-line voltage ``un_v``.

    LV with +6 % tolerance: 1.05 / 0.95; LV with +10 %: 1.10 / 0.90; MV and HV: 1.10 / 1.00
    (IEC 60909-0:2016 Table 1). The LV tolerance must be 6 or 10.
    """
    if un_v <= LV_LIMIT_V:
        if lv_tol_pct == 10.0:
            return 1.10, 0.90
        if lv_tol_pct == 6.0:
            return 1.05, 0.95
        raise ValueError(
            f"LV tolerance must be 6 or 10 percent (IEC 60909-0 Table 1), got {lv_tol_pct}"
        )
    return 1.10, 1.00


def kappa(r_x: float) -> float:
    """kappa = 1.02 + 0.98 e^(-3 R/X), IEC 60909-0 eq. (55)."""
    return 1.02 + 0.98 * math.exp(-3.0 * r_x)


def kappa_b(r_x: float, meshed: bool, lv: bool, all_branches_below_0_3: bool = False) -> float:
    """Method B: 1.15 kappa(R/X at the fault) in a meshed network, at most 1.8 (LV) or 2.0.

    The 1.15 is left out when R/X stays below 0.3 in every branch (IEC 60909-0 §8.1.3 a).
    """
    k = kappa(r_x)
    if meshed and not all_branches_below_0_3:
        k *= 1.15
    return min(k, 1.8 if lv else 2.0)


def kt_network_transformer(cmax: float, uk_pct: float, ur_pct: float) -> float:
    """K_T = 0.95 cmax / (1 + 0.6 x_T), x_T the transformer's reactance in per unit of its
    rating (IEC 60909-0 §6.3.3, eq. (12a)); applied to the transformer's impedance, max case."""
    x_t = math.sqrt(max(uk_pct**2 - ur_pct**2, 0.0)) / 100.0
    return 0.95 * cmax / (1.0 + 0.6 * x_t)


def heat_factor_m(kappa_value: float, f_hz: float, tk_s: float) -> float:
    """m of the DC component's heat, IEC 60909-0 eq. (102); kappa 1 or less gives 0."""
    if kappa_value <= 1.0:
        return 0.0
    ln = math.log(kappa_value - 1.0)
    return (math.exp(4.0 * f_hz * tk_s * ln) - 1.0) / (2.0 * f_hz * tk_s * ln)


def thermal_current(ikss: float, kappa_value: float, f_hz: float, tk_s: float) -> float:
    """Ith = I"k sqrt(m + n) with n = 1 far from generators (IEC 60909-0 §12.2.1)."""
    return ikss * math.sqrt(heat_factor_m(kappa_value, f_hz, tk_s) + 1.0)
