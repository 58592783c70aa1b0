"""What each reading weighs in the estimate (``meas.estimate.weights``), by hand.

The rules (module docstring of meas/estimate/weights.py): a class limit ±a is read as a
rectangular distribution, u = a/√3 (JCGM 100:2008 §4.3.7); half of it is left per reading
(the rest is the meter's gain), root-sum-square (§5.1.2) with the register's resolution
(float32: half an ulp, a rectangular ±|x|·2⁻²⁴) and the repeatability over the capture.
Class limits: V and I class 0.5 = 0.5 % of reading down to 10 % (V) and 5 % (I) of nominal;
active class 0.5S (IEC 62053-22): 0.5 % in the main range at PF above 0.5; reactive class 2
(IEC 62053-23): 2.5 % of the apparent power's half below sin φ 0.5 (both tables from memory,
as meas/tolerance.py marks them). A current's angle: max(0.5°/√3, the angle a current error of
its own size makes).
"""

from __future__ import annotations

import math

import numpy as np
from support.estimate_bench import demo

from meas.estimate.weights import SLOT_KEYS, ReadingStd

S3 = math.sqrt(3.0)
ULP = 2.0**-24


def _u(a: float, x: float, rep: float) -> float:
    return math.sqrt((0.5 * a / S3) ** 2 + (abs(x) * ULP / S3) ** 2 + rep**2)


def test_the_uncertainty_of_each_reading_follows_the_stated_rules():
    prof = demo()
    m2 = next(m for m in prof.meters if m.id == "M2")  # V, I class 0.5; P 0.5S; Q 2; CT 60 A
    v_n, i_n = 400 / S3, 60.0  # the bench's 400 V and M2's CT primary
    vals = {"v_ln.A": 231.0, "i.A": 30.0, "p.A": 6000.0, "q.A": 2000.0}
    vals["i_ang.A"] = -math.degrees(math.atan2(2000.0, 6000.0))
    keys = tuple(vals)
    slot = np.array([[vals.get(k, math.nan) for k in SLOT_KEYS]])
    rep = np.array([0.01, 0.02, 3.0, 4.0, 0.05])
    got = ReadingStd(prof).from_slots([(m2, keys)], slot, rep)[0]

    s = math.hypot(6000.0, 2000.0)
    want = [
        _u(0.005 * 231.0, 231.0, 0.01),  # 0.5 % of reading, above 10 % of nominal
        _u(0.005 * 30.0, 30.0, 0.02),  # 0.5 % of reading, above 5 % of rated
        _u(0.005 * 6000.0, 6000.0, 3.0),  # 0.5S main range: PF 0.95, half of rated current
        _u(0.025 * 0.5 * s, 2000.0, 4.0),  # class 2 below sin φ 0.5: 2.5 % of S/2
    ]
    angle_deg = max(0.5 / S3, math.degrees(0.005 * 30.0 / S3 / 30.0))
    want.append(math.radians(math.hypot(angle_deg, 0.05)))
    np.testing.assert_allclose(got, want, rtol=1e-12)
    assert v_n * 0.1 < 231.0 and i_n * 0.05 < 30.0  # the main ranges the expectations assume


def test_a_small_reading_is_held_at_the_class_floor():
    prof = demo()
    m2 = next(m for m in prof.meters if m.id == "M2")
    keys = ("v_ln.A", "i.A")
    slot = np.array([[{"v_ln.A": 5.0, "i.A": 0.5}.get(k, math.nan) for k in SLOT_KEYS]])
    got = ReadingStd(prof).from_slots([(m2, keys)], slot, np.zeros(2))[0]
    # below 10 % of nominal voltage and 5 % of rated current the absolute error is held
    v_floor = 0.005 * 0.1 * 400 / S3
    i_floor = 0.005 * 0.05 * 60.0
    np.testing.assert_allclose(got, [_u(v_floor, 5.0, 0.0), _u(i_floor, 0.5, 0.0)], rtol=1e-12)
