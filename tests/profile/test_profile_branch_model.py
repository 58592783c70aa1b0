"""A branch's ``model`` table (its nameplate parameters) is checked when the profile is read.

Every problem the simulated bench used to find only at start-up is now a lint problem with its
file and line. Fixtures are edits of ``profiles_demo/minimal_bench.toml`` (GRID = branch[0],
LN1 = branch[1], LD1 = branch[2]); expected lines are found in the text independently of the
loader. Limits (resistance and susceptance >= 0, tap >= -50 %, ur below uk, zip fractions that
sum to 1) are the simulator's rules kept as they were (common practice).
"""

from __future__ import annotations

import math

import pytest
from support.profile_edits import BASE, edit, line_of, problems_of, write

from meas.model import LineParams, LoadParams, ShuntParams, SourceParams, TransformerParams
from meas.profile import load_profile

GRID = "model = { v_ll = 404.0, sc_va = 400000.0, x_r = 6.0 }"
LINE = "model = { r_ohm = 0.18, x_ohm = 0.14, b_us = 30.0 }"
LOAD = 'model = { model = "pq", p_w = 5000.0, q_var = 1500.0 }'
TRAFO = "s_va = 3e4, v1_ll = 400.0, v2_ll = 400.0, uk_pct = 4.0"


def as_transformer(model: str) -> str:
    return edit(LINE, model, edit('kind = "line"', 'kind = "transformer"'))


@pytest.mark.parametrize(
    "text,path,message",
    [
        (edit(LINE, "model = { x_ohm = 0.14 }"), "branch[1].model", "missing required key 'r_ohm'"),
        (
            edit(LINE, "model = { r_ohm = -0.1, x_ohm = 0.14 }"),
            "branch[1].model.r_ohm",
            "must be at least 0, got -0.1",
        ),
        (
            edit(LINE, "model = { r_ohm = 0.1, x_ohm = 0.1, length_km = 2.0 }"),
            "branch[1].model",
            "mixes lumped (r_ohm, x_ohm, b_us) and per-length (*_per_km, length_km) values; "
            "use one form",
        ),
        (
            edit(LINE, 'model = { r_ohm = 0.1, x_ohm = "0.1" }'),
            "branch[1].model.x_ohm",
            "expected a number, got a string '0.1'",
        ),
        (
            edit(LINE, "model = { r_ohm = 0.1, x_ohm = 0.1, r0_ohm = 0.3 }"),
            "branch[1].model.x0_ohm",
            "missing; zero-sequence data needs both r0 and x0",
        ),
        (
            edit(LINE, "model = { r_ohm = 0.1, x_ohm = 0.1, xohm = 1 }"),
            "branch[1].model.xohm",
            "unknown key 'xohm'; did you mean 'x_ohm'?",
        ),
        (
            edit(LINE, "model = { r_ohm = 0.0, x_ohm = 0.0 }"),
            "branch[1].model.x_ohm",
            "series impedance is zero; a line needs r_ohm or x_ohm above 0",
        ),
        (
            edit(LINE, "model = { r_ohm = 0.1, x_ohm = 0.1, r0_ohm = 0.0, x0_ohm = 0.0 }"),
            "branch[1].model.x0_ohm",
            "zero-sequence impedance is zero",
        ),
        (
            edit(LINE, "model = { r_ohm = 0.1, x_ohm = 0.1, long_line = true }"),
            "branch[1].model.long_line",
            "needs per-length data (r_ohm_per_km, x_ohm_per_km, b_us_per_km, length_km)",
        ),
        (
            edit(LINE, 'model = { r_ohm = 0.1, x_ohm = 0.1, long_line = "yes" }'),
            "branch[1].model.long_line",
            "expected true or false, got a string 'yes'",
        ),
        (
            edit(LINE, "model = { r_ohm_per_km = 0.1, x_ohm_per_km = 0.1, length_km = -1.0 }"),
            "branch[1].model.length_km",
            "must be greater than 0, got -1.0",
        ),
        (
            edit(LINE, "model = { r_ohm = 0.1, x_ohm = 0.1, b_us = -30.0 }"),
            "branch[1].model.b_us",
            "must be at least 0, got -30.0",
        ),
        (
            edit(GRID, "model = { v_ll = 404.0, sc_va = 0.0, x_r = 6.0 }"),
            "branch[0].model.sc_va",
            "must be greater than 0, got 0.0",
        ),
        (
            edit(GRID, "model = { v_ll = 404.0, sc_va = 400000.0 }"),
            "branch[0].model",
            "missing required key 'x_r'",
        ),
        (
            edit(GRID, "model = { v_ll = 404.0, sc_va = -inf, x_r = 6.0 }"),
            "branch[0].model.sc_va",
            "must be a finite number, got -inf",
        ),
        (
            edit(GRID, "model = { v_ll = nan, sc_va = 400000.0, x_r = 6.0 }"),
            "branch[0].model.v_ll",
            "must be a finite number, got nan",
        ),
        (
            edit(LOAD, 'model = { model = "zip", p_w = 1.0, zip = [0.5, 0.5, 0.5] }'),
            "branch[2].model.zip",
            "must be 3 fractions [z, i, p] >= 0 that sum to 1, got [0.5, 0.5, 0.5]",
        ),
        (
            edit(LOAD, 'model = { model = "zip", p_w = 1.0 }'),
            "branch[2].model.zip",
            "must be 3 fractions [z, i, p] >= 0 that sum to 1, got None",
        ),
        (
            edit(LOAD, 'model = { model = "pq", p_w = 1.0, zip = [0.3, 0.3, 0.4] }'),
            "branch[2].model.zip",
            "only used with model = \"zip\" (model is 'pq')",
        ),
        (
            edit(LOAD, 'model = { model = "z", p_w = [1.0, 2.0] }'),
            "branch[2].model.p_w",
            "expected a number or a list of 3 finite numbers (A, B, C), got an array [1.0, 2.0]",
        ),
        (
            edit(LOAD, 'model = { model = "const", p_w = 1.0 }'),
            "branch[2].model.model",
            "unknown load model 'const'; expected one of 'pq', 'z', 'i', 'zip'",
        ),
        (
            edit(LOAD, "model = { q_var = 1.0 }"),
            "branch[2].model",
            "missing required key 'p_w' (a three-phase total or a list of 3 per-phase values "
            "A, B, C)",
        ),
        (
            edit('kind = "load"', 'kind = "shunt"', edit(LOAD, "model = { p_w = 1.0 }")),
            "branch[2].model",
            "missing required key 'q_var' (a three-phase total or a list of 3 per-phase values "
            "A, B, C)",
        ),
        (
            as_transformer(f'model = {{ {TRAFO}, vector_group = "Dyn5" }}'),
            "branch[1].model.vector_group",
            "unknown vector group 'Dyn5'; expected one of 'Yy0', 'Yyn0', 'YNyn0', 'Dyn11', "
            "'Dyn1'; did you mean 'Dyn1'?",
        ),
        (
            as_transformer(f"model = {{ {TRAFO} }}"),
            "branch[1].model",
            "missing required key 'vector_group'",
        ),
        (
            as_transformer(f'model = {{ {TRAFO}, ur_pct = 5.0, vector_group = "Dyn11" }}'),
            "branch[1].model.ur_pct",
            "must be below uk_pct (4), got 5",
        ),
        (
            as_transformer(f'model = {{ {TRAFO}, tap_pct = -60.0, vector_group = "Dyn11" }}'),
            "branch[1].model.tap_pct",
            "must be at least -50, got -60.0",
        ),
        (
            edit(GRID, 'model = { v_ll = 404.0, sc_va = 400000.0, x_r = 6.0, angle_deg = "0" }'),
            "branch[0].model.angle_deg",
            "expected a number, got a string '0'",
        ),
        (edit(LINE, "model = 3"), "branch[1].model", "expected a table, got an integer 3"),
        (
            edit(LINE, "sim = { r_ohm = 0.18, x_ohm = 0.14, b_us = 30.0 }"),
            "branch[1].sim",
            "the branch's sim table is now called model: rename sim to model "
            "(the profile-level [sim] table keeps its name)",
        ),
    ],
)
def test_each_bad_model_value_is_one_lint_problem_with_its_line(tmp_path, text, path, message):
    where = write(tmp_path, text)
    problems = problems_of(where)
    base = set(BASE.splitlines())
    changed = next(
        t for t in text.splitlines() if t.startswith(("model =", "sim =")) and t not in base
    )
    assert problems == [f"{where}:{line_of(text, changed)}: {path}: {message}"]


def test_all_problems_of_all_model_tables_at_once(tmp_path):
    text = as_transformer(f'model = {{ {TRAFO}, vector_group = "Dyn5" }}')
    text = edit(LOAD, "model = {}", text)
    where = write(tmp_path, text)
    problems = problems_of(where)
    assert [p.split(": ")[1] for p in problems] == [
        "branch[1].model.vector_group",
        "branch[2].model",
    ]
    assert "missing required key 'p_w'" in problems[1]


def test_a_model_table_on_its_own_lines_reports_the_key_line(tmp_path):
    text = edit(LINE, "\n[branch.model]\nr_ohm = 0.18\nx_ohm = 0.14\nb_us = -30.0\n")
    where = write(tmp_path, text)
    assert problems_of(where) == [
        f"{where}:{line_of(text, 'b_us = -30.0')}: branch[1].model.b_us: "
        "must be at least 0, got -30.0"
    ]


def test_two_ideal_sources_on_one_bus(tmp_path):
    text = edit(GRID, "model = { v_ll = 404.0, sc_va = inf }")
    text = edit(
        '[[branch]]\nid = "LN1"',
        '[[branch]]\nid = "GRID2"\nkind = "source"\nfrom_bus = "S0"\n'
        'model = { v_ll = 400.0, sc_va = inf }\n\n[[branch]]\nid = "LN1"',
        text,
    )
    where = write(tmp_path, text)
    line = line_of(text, "model = { v_ll = 400.0, sc_va = inf }")
    assert problems_of(where) == [
        f"{where}:{line}: branch[1].model.sc_va: bus 'S0' already has the ideal source 'GRID'; "
        "give one of them a finite sc_va"
    ]


def test_model_tables_become_typed_parameters(tmp_path):
    text = edit(GRID, "model = { v_ll = 404.0, sc_va = inf, angle_deg = -5 }")
    text = edit(
        LINE,
        "model = { r_ohm_per_km = 0.2, x_ohm_per_km = 0.1, b_us_per_km = 3, length_km = 2, "
        "r0_ohm_per_km = 0.6, x0_ohm_per_km = 0.3, long_line = true }",
        text,
    )
    text = edit(LOAD, 'model = { model = "zip", p_w = [1, 2, 3], zip = [0.2, 0.3, 0.5] }', text)
    p = load_profile(write(tmp_path, text))
    assert p.branch("GRID").model == SourceParams(404.0, math.inf, 1.0, -5.0)
    assert p.branch("LN1").model == LineParams(0.2, 0.1, 3.0, 0.6, 0.3, None, 2.0, True)
    assert p.branch("LD1").model == LoadParams((1.0, 2.0, 3.0), 0.0, "zip", (0.2, 0.3, 0.5))
    shunt = edit('kind = "load"', 'kind = "shunt"', edit(LOAD, "model = { q_var = -400 }"))
    assert load_profile(write(tmp_path, shunt)).branch("LD1").model == ShuntParams(-400.0, 0.0)
    trafo = as_transformer(f'model = {{ {TRAFO}, tap_pct = 2.5, vector_group = "Dyn11" }}')
    assert load_profile(write(tmp_path, trafo)).branch("LN1").model == TransformerParams(
        3e4, 400.0, 400.0, 4.0, "Dyn11", 0.0, 2.5
    )


def test_a_profile_without_model_tables_loads(tmp_path):
    """A real bench needs no nameplate data; only the simulated bench does."""
    text = edit(GRID, "", edit(LINE, "", edit(LOAD, "")))
    p = load_profile(write(tmp_path, text))
    assert [b.model for b in p.branches] == [None, None, None]
