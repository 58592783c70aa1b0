"""Symmetrical components, unbalance definitions and IEEE 1459 apparent powers.

Sources are named beside each value, tagged as in /work/shared/REFERENCES.md
([V] verified, [M] from memory, [C] computed independently from the stated formula).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from meas import phasors as ph

A = np.exp(2j * np.pi / 3)


def test_nema_mg1_example():
    # NEMA MG-1 example (clause 14.36 [M]): 460, 467, 450 V -> avg 459, max deviation 9, 1.96 %;
    # value 1.9608 % [C] (REFERENCES.md 1)
    assert ph.lvur([460.0, 467.0, 450.0]) == pytest.approx(1.9608, abs=5e-4)
    # 462, 463, 455 V: LVUR 1.0870 % [C], published as "1.1 %" in a quote of NEMA MG-1 [V]
    assert ph.lvur([462.0, 463.0, 455.0]) == pytest.approx(1.0870, abs=5e-4)


def test_iec_magnitude_formula_worked_values():
    # IEC 61000-4-30 magnitude form on the same magnitudes: 2.1465 % and 1.0914 % [C] (REFERENCES.md 1);
    # the definitions disagree with NEMA's, so each is tested separately
    assert ph.unbalance_iec_ll([460.0, 467.0, 450.0]) == pytest.approx(2.1465, abs=5e-4)
    assert ph.unbalance_iec_ll([462.0, 463.0, 455.0]) == pytest.approx(1.0914, abs=5e-4)


def test_grainger_stevenson_example_11_1():
    # Grainger & Stevenson, Power System Analysis (1994), Example 11.1 (open conductor) [M example]:
    # Ia = 10 at 0, Ib = 10 at 180, Ic = 0 A -> I0 = 0, I1 = 5.7735 at -30, I2 = 5.7735 at +30 deg [C]
    s012 = ph.sequence(ph.phasor([10.0, 10.0, 0.0], [0.0, 180.0, 0.0]))
    assert abs(s012[0]) == pytest.approx(0.0, abs=1e-12)
    assert abs(s012[1]) == pytest.approx(5.7735, abs=1e-4)
    assert math.degrees(np.angle(s012[1])) == pytest.approx(-30.0, abs=1e-9)
    assert abs(s012[2]) == pytest.approx(5.7735, abs=1e-4)
    assert math.degrees(np.angle(s012[2])) == pytest.approx(30.0, abs=1e-9)
    # and back (Fortescue's transform is invertible)
    np.testing.assert_allclose(
        ph.from_sequence(s012), ph.phasor([10.0, 10.0, 0.0], [0.0, 180.0, 0.0]), atol=1e-12
    )


@settings(max_examples=60, deadline=None)
@given(mag=st.floats(1.0, 1e5), rot=st.floats(-180.0, 180.0))
def test_balanced_set_has_no_negative_or_zero_sequence(mag, rot):
    # Fortescue (AIEE Trans. 37, 1918): a balanced positive-sequence set is all V1 (REFERENCES.md 2)
    v = ph.phasor([mag] * 3, [rot, rot - 120.0, rot + 120.0])
    s = ph.sequence(v)
    assert abs(s[2]) <= 1e-9 * mag and abs(s[0]) <= 1e-9 * mag
    assert abs(s[1]) == pytest.approx(mag, rel=1e-12)
    assert ph.unbalance_u2(v) == pytest.approx(0.0, abs=1e-7)
    assert ph.sequence_sign([rot, rot - 120.0, rot + 120.0]) == 1
    assert ph.sequence_sign([rot, rot + 120.0, rot - 120.0]) == -1


phasor_st = st.tuples(st.floats(150.0, 300.0), st.floats(-180.0, 180.0))


@settings(max_examples=80, deadline=None)
@given(a=phasor_st, b=phasor_st, c=phasor_st)
def test_iec_magnitude_formula_is_exact_for_line_to_line_magnitudes(a, b, c):
    # REFERENCES.md 1: the magnitude-only form is exact for fundamental L-L magnitudes [C];
    # the reference is |U2|/|U1| of the L-L phasors from symmetrical components
    vln = ph.phasor([a[0], b[0], c[0]], [a[1], b[1], c[1]])
    vll = np.array([vln[0] - vln[1], vln[1] - vln[2], vln[2] - vln[0]])
    ref = ph.unbalance_u2(vll)
    if np.abs(vll).min() < 1.0 or not np.isfinite(ref) or ref > 95.0:
        return  # degenerate: a collapsed L-L triangle, or |U1| ~ |U2|
    assert ph.unbalance_iec_ll(np.abs(vll)) == pytest.approx(ref, rel=1e-6, abs=1e-7)


def test_u2_same_from_line_to_neutral_and_line_to_line_phasors():
    # REFERENCES.md 1: phase-to-phase phasors give the same u2 as L-N (zero sequence drops out) [C]
    vln = ph.phasor([230.0, 225.0, 236.0], [0.0, -121.0, 118.0]) + 5.0  # with a zero-sequence part
    vll = np.array([vln[0] - vln[1], vln[1] - vln[2], vln[2] - vln[0]])
    assert ph.unbalance_u2(vln) == pytest.approx(ph.unbalance_u2(vll), rel=1e-12)
    assert ph.unbalance_u0(vln) > 0.5


def test_wiring_fault_signature_table():
    # REFERENCES.md 2, wiring-fault signatures, balanced 1 pu currents at PF 1 [C]
    v = ph.phasor([1.0] * 3, [0.0, -120.0, 120.0])
    i_ok = v.copy()
    cases = {
        "correct": (i_ok, 0.0, 1.0, [1, 1, 1]),
        "ct_b_reversed": (i_ok * np.array([1, -1, 1]), 200.0, 1 / 3, [1, -1, 1]),
        "b_c_swapped": (i_ok[[0, 2, 1]], math.inf, 0.0, [1, -0.5, -0.5]),
        "all_reversed": (-i_ok, 0.0, -1.0, [-1, -1, -1]),
    }
    for name, (cur, i2_i1, p_ratio, p_phase) in cases.items():
        s = ph.phase_powers(v, cur)
        u2 = ph.unbalance_u2(cur)
        if math.isinf(i2_i1):
            assert u2 > 1e6, name  # I1 = 0 exactly on paper; rounding leaves ~1e-16
        else:
            assert u2 == pytest.approx(i2_i1, abs=1e-9), name
        assert s.real.sum() / 3.0 == pytest.approx(p_ratio, abs=1e-12), name
        np.testing.assert_allclose(s.real, p_phase, atol=1e-12, err_msg=name)
    # a swapped pair also shows current-to-voltage angles offset by about 120 degrees
    s = ph.phase_powers(v, i_ok[[0, 2, 1]])
    ang = ph.pf_angle_deg(s.real, s.imag)
    assert sorted(np.round(np.abs(ang), 9)) == [0.0, 120.0, 120.0]


def test_ieee1459_apparent_powers_unbalanced_case():
    # IEEE Std 1459-2010 [M] definitions (REFERENCES.md 4), computed by hand [C]:
    # phase S: A 1000 W + 0 var, B 600 W + 800 var, C 0 W - 500 var
    p = np.array([1000.0, 600.0, 0.0])
    q = np.array([0.0, 800.0, -500.0])
    s = np.abs(p + 1j * q)  # 1000, 1000, 500
    assert ph.apparent_arithmetic(s) == pytest.approx(2500.0)
    assert ph.apparent_vector(p, q) == pytest.approx(math.hypot(1600.0, 300.0))  # 1627.88 VA
    assert ph.apparent_vector(p, q) <= ph.apparent_arithmetic(s)
    # effective: balanced 230 V / 10 A, no neutral current -> Se = 3 x 230 x 10
    assert ph.apparent_effective([230.0] * 3, [10.0] * 3) == pytest.approx(6900.0)
    # with L-L values of a balanced set (400 V) the four-wire Ve equals the L-N value
    assert ph.apparent_effective([230.94] * 3, [10.0] * 3, 0.0, [400.0] * 3) == pytest.approx(
        3 * 230.94 * 10.0, rel=1e-4
    )
    # an unbalanced current raises Se above the arithmetic S (IEEE 1459: Se >= S_arith)
    assert ph.apparent_effective([230.0] * 3, [20.0, 5.0, 5.0], 15.0) > 230.0 * 30.0


def test_vectorized_over_meters():
    v = ph.phasor([[230, 230, 230], [230, 220, 240]], [[0, -120, 120], [0, -120, 120]])
    u2 = ph.unbalance_u2(v)
    assert u2.shape == (2,) and u2[0] == pytest.approx(0.0, abs=1e-9) and u2[1] > 1.0
    assert ph.circular_spread_deg(
        [[10.0, 20.0, 30.0], [170.0, -170.0, 175.0]]
    ).tolist() == pytest.approx([20.0, 20.0])
