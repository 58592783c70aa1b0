"""The invented check inputs follow the textbook definitions they claim (P = 3 V I cos phi)."""

from __future__ import annotations

import math

import pytest
from support.check_inputs import balanced, values


def test_values_follow_the_definitions():
    v, i = balanced(230.0, 10.0, 36.87)
    vals = values(v, i, vector=True)
    assert vals["p.T"] == pytest.approx(3 * 2300 * 0.8, rel=1e-4)  # P = 3 V I cos(phi)
    assert vals["pf.A"] == pytest.approx(0.8, rel=1e-4)
    assert vals["v_ll.AB"] == pytest.approx(230.0 * math.sqrt(3), rel=1e-12)
