"""The adjustable model parameters, their tolerances and the ``tolerance_pct`` profile key.

The rectangular rule u = a/√3 for a stated ± limit is JCGM 100:2008 §4.3.7 (common practice).
Fixtures are edits of ``profiles_demo/minimal_bench.toml`` (GRID, LN1, LD1).
"""

from __future__ import annotations

import math

import pytest
from support.profile_edits import BASE, edit, line_of, problems_of, write

from meas.model import LoadParams
from meas.network.parameters import DEFAULT_TOLERANCE_PCT, model_parameters, with_values
from meas.profile import load_profile

LINE = "model = { r_ohm = 0.18, x_ohm = 0.14, b_us = 30.0 }"


def test_every_parameter_has_the_default_tolerance_unless_the_profile_states_one(tmp_path):
    text = edit(LINE, LINE[:-2] + ", tolerance_pct = { r_ohm = 5.0 } }")
    profile = load_profile(write(tmp_path, text))
    params = {p.name: p for p in model_parameters(profile.branches)}
    r, x = params["LN1.r_ohm"], params["LN1.x_ohm"]
    assert (r.tolerance, r.stated) == (5.0, True)
    assert (x.tolerance, x.stated) == (DEFAULT_TOLERANCE_PCT["line"]["x_ohm"], False)
    assert r.limit == pytest.approx(0.18 * 0.05)
    assert r.std == pytest.approx(0.18 * 0.05 / math.sqrt(3))
    assert {"GRID.v_ll", "GRID.sc_va", "GRID.x_r", "LD1.p_w", "LD1.q_var"} <= set(params)


@pytest.mark.parametrize(
    "tolerance,message",
    [
        ("{ r_ohm = -1.0 }", "a ± limit in percent from 0 to 90, got -1"),
        ("{ r_ohm = 150.0 }", "a ± limit in percent from 0 to 90, got 150"),
        ("{ uk_pct = 5.0 }", "not a line parameter that takes a tolerance; use one of r_ohm"),
        ('{ r_ohm = "lots" }', "expected a number"),
    ],
)
def test_a_negative_absurd_or_misplaced_tolerance_is_a_lint_error_at_its_line(
    tmp_path, tolerance, message
):
    text = edit(LINE, LINE[:-2] + f", tolerance_pct = {tolerance} }}")
    lines = problems_of(write(tmp_path, text))
    assert len(lines) == 1, lines
    assert f":{line_of(text, 'tolerance_pct')}: branch[1].model.tolerance_pct." in lines[0]
    assert message in lines[0]


def test_with_values_changes_only_the_named_parameters_and_scales_per_phase_loads(tmp_path):
    profile = load_profile(write(tmp_path, BASE))
    changed = with_values(profile.branches, {"LN1.x_ohm": 0.21, "LD1.p_w": 6000.0})
    by_id = {b.id: b for b in changed}
    assert by_id["LN1"].model.x_ohm == 0.21 and by_id["LN1"].model.r_ohm == 0.18
    load = by_id["LD1"].model
    assert isinstance(load, LoadParams) and load.p_w == 6000.0 and load.q_var == 1500.0
    assert by_id["GRID"] == {b.id: b for b in profile.branches}["GRID"]
    with pytest.raises(KeyError, match="LN1.z_ohm"):
        with_values(profile.branches, {"LN1.z_ohm": 1.0})
