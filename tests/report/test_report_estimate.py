"""The report's first-page block beside the verdict: meter gains ± u flagged beyond their class,
what the session could detect per meter, and the unverified readings each with why.

The dataset is the invented bench of tests/support/invented_bench.py (no model data: the block
says why there is no estimate); the gains and coverage rows rendered on top of it are invented
for the test, in the dataset's own columns. The whole chain on a simulated session with
``vt-ratio:M5:1.1`` is in tests/dataset/test_dataset_estimate.py (slow).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pandas as pd
import pytest
from support.invented_bench import build_session

from meas.dataset.estimate_tables import NO_MODEL
from meas.dataset.export import export_session
from meas.report import gather, render_html, render_markdown
from meas.report.model_section import unverified_groups
from meas.verdict import Verdict


@pytest.fixture(scope="module")
def plain_dataset(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return export_session(build_session(tmp_path_factory.mktemp("inv")))


GAINS = pd.DataFrame(
    {
        "meter": ["M1", "M1", "M2", "M2"],
        "quantity": ["current", "voltage", "current", "voltage"],
        "gain": [1.0001, 0.9999, 1.0002, 1.1],
        "u": [0.0012, 0.0011, 0.0013, 0.001],
        "class_limit": [0.005] * 4,
        "beyond_class": [False, False, False, True],
        "basis": ["joint fit", "joint fit", "joint fit", "refit"],
        "cause": [None, None, None, "vt_ratio:1.100"],
        "message": [
            None,
            None,
            None,
            "M2: voltages 1.100 ± 0.001 of what the network implies: the VT ratio looks set "
            "wrong by a factor 1.10",
        ],
    }
)
COVERAGE = pd.DataFrame(
    {
        "meter": ["M1", "M1", "M1", "M1", "M2", "M2", "M2", "M2"],
        "error_kind": ["vt_ratio", "ct_ratio", "ct_reversed:A", "ct_reversed:B"] * 2,
        "detectable": [True, False, True, False, True, True, True, True],
        "min_factor": [0.015, None, None, None, 0.016, 0.029, None, None],
        "why_not": [None, "no other reading predicts it", None, "too little current"] + [None] * 4,
        "message": ["..."] * 8,
    }
)
UNVERIFIED = (
    "radial M1: M1 CT ratio: no other reading predicts it",
    "tie M1: M1 CT ratio: no other reading predicts it",
    "tie M3: this snapshot's fit is disturbed by the fault named on M2",
)


def _first_page(html: str) -> str:
    return html[: html.index("<h2>Bench and instruments</h2>")]


def test_first_page_flags_the_gain_beyond_class_with_its_cause(plain_dataset: Path) -> None:
    rd = gather(plain_dataset)
    rd = dataclasses.replace(
        rd,
        gains=GAINS,
        coverage=COVERAGE,
        verdict=Verdict("PASS with unverified readings", "all 2 steps passed", 0, UNVERIFIED),
    )
    page = _first_page(render_html(rd))
    assert page.index("Verdict:") < page.index("Verified against the network model")
    assert '<span class="fail">1.1000 ± 0.0010 beyond class ±0.5 %</span>' in page
    assert "the VT ratio looks set wrong by a factor 1.10" in page
    assert "1.0001 ± 0.0012" in page and "±1.5 %" in page
    # M1: reversed CT on A is detectable, on B not; its CT ratio is not
    assert "A (not B)" in page
    assert "M1 CT ratio, M1 reversed CT B" not in page  # two different reasons, two groups
    assert "M1 CT ratio: no other reading predicts it" in page
    assert "M1 reversed CT B: too little current" in page
    assert "Unverified readings (3), each with why" in page
    assert "(M1; steps radial, tie)" in page
    md = render_markdown(rd)
    assert "**1.1000 ± 0.0010 beyond class ±0.5 %**" in md
    assert md.index("Verified against the network model") < md.index("## Bench and instruments")


def test_without_model_data_the_first_page_says_why(plain_dataset: Path) -> None:
    page = _first_page(render_html(gather(plain_dataset)))
    assert f"No estimate against the network model: {NO_MODEL}." in page
    assert "beyond class" not in page
    assert "The verdict lists no unverified reading." in page


def test_unverified_lines_group_by_why() -> None:
    groups = unverified_groups(UNVERIFIED)
    assert [(g.meters, g.steps) for g in groups] == [
        (("M1",), ("radial", "tie")),
        (("M3",), ("tie",)),
    ]
    assert unverified_groups(["a line that names no step"])[0].why == "a line that names no step"
