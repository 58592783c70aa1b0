"""lint finds a network model whose load flow diverges where the walk would take the bench.

The check value is the maximum power a source can deliver through a series resistance R to a
load, V^2 / (4 R) per phase (maximum power transfer theorem, any circuits textbook): with
R = 40 ohm and 230 V phase voltage that is about 330 W per phase, far below the minimal demo
bench's 5 kW load (1.67 kW per phase), so no load-flow solution exists.
"""

from __future__ import annotations

import subprocess
import sys

from support.profile_edits import BASE, edit, write

LINE = "model = { r_ohm = 0.18, x_ohm = 0.14, b_us = 30.0 }"


def _lint(path):
    return subprocess.run(
        [sys.executable, "-m", "tui.cli", "lint", str(path)], capture_output=True, text=True
    )


def test_a_model_that_cannot_carry_its_load_is_a_lint_problem_naming_the_file(tmp_path):
    text = edit(LINE, "model = { r_ohm = 40.0, x_ohm = 0.14, b_us = 30.0 }")
    where = write(tmp_path, text)
    run = _lint(where)
    assert run.returncode == 2, run.stdout + run.stderr
    assert "Traceback" not in run.stdout + run.stderr
    first = run.stdout.splitlines()[0]
    assert first.startswith(f"{where}"), first
    assert "load flow does not converge" in first


def test_the_demo_model_solves_everywhere_and_lints_clean(tmp_path):
    run = _lint(write(tmp_path, BASE))
    assert run.returncode == 0, run.stdout + run.stderr
