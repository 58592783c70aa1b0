"""Accuracy-class limits and GUM propagation (sources beside each value, tags as in REFERENCES.md)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from meas.errors import BenchwalkError
from meas.model import CheckSettings
from meas.results import Status
from meas.tolerance import (
    Limits,
    class_spec,
    combine,
    expanded,
    judge,
    limit_pct,
    magnitude_limit,
    power_limit,
    resolution_limit,
    rss,
    std_rect,
)


def test_iec_62053_21_class_1_table():
    # IEC 62053-21 class 1 (CT-operated), Table 3 [V, an open-source meter test suite quoting it]:
    # 0.05 In..Imax PF 1: 1.0 %; 0.02..0.05 In: 1.5 %; 0.1 In..Imax at PF 0.5 ind: 1.0 %; 0.05..0.1 In: 1.5 %
    c1 = class_spec("p", "1")
    assert limit_pct(c1, 0.5, False) == 1.0
    assert limit_pct(c1, 0.03, False) == 1.5
    assert limit_pct(c1, 0.5, True) == 1.0
    assert limit_pct(c1, 0.07, True) == 1.5


def test_iec_62053_22_class_05s_table():
    # IEC 62053-22 class 0.5S [M table, REFERENCES.md 3]: 0.5 / 1.0 % at PF 1, 0.6 / 1.0 % at PF 0.5
    c = class_spec("p", "0.5S")
    assert (
        limit_pct(c, 0.2, False),
        limit_pct(c, 0.02, False),
        limit_pct(c, 0.2, True),
        limit_pct(c, 0.05, True),
    ) == (0.5, 1.0, 0.6, 1.0)


def test_vectorized_and_nan_current_takes_wider_limit():
    c = class_spec("p", "0.5S")
    out = limit_pct(c, np.array([0.5, 0.02, np.nan]), np.array([False, False, False]))
    assert out.tolist() == [0.5, 1.0, 1.0]


def test_power_limit_holds_absolute_error_below_the_table():
    c = class_spec("p", "1")
    # at PF 1, 50 % load: 1 % of reading (IEC 62053-21 Table 3 [V])
    assert power_limit(c, 1000.0, 1000.0, 0.5, 2000.0) == pytest.approx(10.0)
    # below PF 0.5 the error is held at the PF 0.5 value of the same S (our rule; REFERENCES.md 3:
    # dP/P ~ -d tan(phi) grows at low PF): P = 100 W of S = 1000 VA -> 1 % of 500 W
    assert power_limit(c, 100.0, 1000.0, 0.5, 2000.0) == pytest.approx(5.0)
    # at zero current the limit is held at its value at the lowest specified current (2 % In)
    assert power_limit(c, 0.0, 0.0, 0.0, 2000.0) == pytest.approx(0.015 * 0.02 * 2000.0)


def test_unknown_class_gets_generic_shape_and_bad_designation_is_one_line_error():
    assert class_spec("p", "0.2S").main_pct == 0.2
    assert class_spec("v", "0.2").main_pct == 0.2
    g = class_spec("p", "0.5")  # not in our table: generic (our rule)
    assert g.main_pct == 0.5 and g.low_i_pct == 0.75
    with pytest.raises(BenchwalkError, match="not a number"):
        class_spec("p", "gold")


def test_gum_worked_bus():
    # REFERENCES.md 3, worked bus [C]: incomer 10.0 MW (class 0.5S), feeders 4.0, 3.5, 2.45 MW (class 1);
    # u_i = 0.02887, 0.02309, 0.02021, 0.01415 MW; u_c = 0.04444 MW; U(k=2) = 0.08888 MW
    a = np.array([0.005 * 10.0, 0.01 * 4.0, 0.01 * 3.5, 0.01 * 2.45])
    u = std_rect(a)  # JCGM 100:2008 4.3.7
    np.testing.assert_allclose(u, [0.02887, 0.02309, 0.02021, 0.01415], atol=5e-6)
    uc = float(rss(*u))  # JCGM 100:2008 5.1.2
    assert uc == pytest.approx(0.04444, abs=5e-6)
    big_u = float(expanded(uc, 2.0))  # 6.2.1
    assert big_u == pytest.approx(0.08888, abs=1e-5)
    residual = 10.0 - (4.0 + 3.5 + 2.45)
    assert judge(residual, big_u, 0.7) is Status.PASS  # 0.05 / 0.0889 = 0.56 of the limit


def test_correlated_terms_add_linearly():
    # JCGM 100:2008 5.2.2: fully correlated (r = +1) inputs add linearly; independent ones RSS (5.1.2)
    assert combine([3.0, 4.0]) == pytest.approx(5.0)
    assert combine([3.0, 4.0], groups=["vt1", "vt1"]) == pytest.approx(7.0)
    # a difference of two readings through one VT: the shared error cancels
    assert combine([3.0, 3.0], groups=["vt1", "vt1"], coeff=[1.0, -1.0]) == pytest.approx(0.0)
    assert combine([3.0, 4.0, 12.0], groups=["a", "a", "b"]) == pytest.approx(math.hypot(7.0, 12.0))


def test_resolution_term():
    # one LSB of an integer register is a rectangular +-scale/2 (JCGM 100:2008 F.2.2.1 [M])
    assert resolution_limit(0.01, 230.0, False) == pytest.approx(0.005)
    # float32: half an ulp relative (IEEE 754 binary32, 24-bit significand)
    assert resolution_limit(1.0, 230.0, True) == pytest.approx(230.0 * 2.0**-24)


def test_magnitude_limit_floor():
    c = class_spec("i", "0.5")  # 61557-12 style: class = % of reading [M]
    assert magnitude_limit(c, 10.0, 100.0) == pytest.approx(0.05)
    assert magnitude_limit(c, 0.0, 100.0) == pytest.approx(0.005 * 0.05 * 100.0)


def test_judge_bands():
    assert judge(0.5, 1.0, 0.7) is Status.PASS
    assert judge(-0.8, 1.0, 0.7) is Status.WARN
    assert judge(1.01, 1.0, 0.7) is Status.FAIL
    assert judge(math.nan, 1.0, 0.7) is Status.NA


def test_overrides():
    lim = Limits(
        CheckSettings(
            overrides={
                "network.p_balance.limit_w": 50.0,
                "meter.p_sum.scale": 2.0,
                "phase.i_unbalance.warn_pct": 30.0,
            }
        )
    )
    assert lim.apply("network.p_balance", "W", 12.0) == 50.0
    assert lim.apply("meter.p_sum", "W", 12.0) == 24.0
    assert lim.apply("meter.q_sum", "var", 12.0) == 12.0
    assert lim.param("phase.i_unbalance", "warn_pct", 50.0) == 30.0
    np.testing.assert_allclose(
        lim.apply("network.p_balance", "W", np.array([1.0, 2.0])), [50.0, 50.0]
    )
