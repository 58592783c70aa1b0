"""A record a technician can sign: the verdict first, honest outcomes, notes at their step.

A real session on the fast demo bench (Modbus over loopback, real SQLite, real files): one
step captured and accepted, one skipped, a note; then the dataset and the report.
"""

from __future__ import annotations

import asyncio
import contextlib
import io
import json
import re
import shutil
import subprocess
import time
from pathlib import Path

import pandas as pd
import pytest
from support.benches import FAST_CAPTURE, write_bench

from meas.session import Session
from meas.walk.states import State

SEQUENCE = f"""
[[step]]
id = "radial"
title = "Radial base case"
kind = "capture"
instruction = "Check the bench is radial, then capture."
expect = {{ CB1 = "closed", SW2 = "closed", SW3 = "closed", TIE = "open", RX = "open", LB2 = "closed" }}
{FAST_CAPTURE}

[[step]]
id = "tie"
title = "Tie closed"
kind = "manual"
instruction = "Close the tie by hand."
expect = {{ TIE = "closed" }}
{FAST_CAPTURE}
"""


async def _until(session: Session, pred, timeout_s: float = 20.0):
    deadline = time.monotonic() + timeout_s
    async with contextlib.aclosing(session.views()) as views:
        async for view in views:
            if pred(view):
                return view
            assert time.monotonic() < deadline, "condition not reached"
    raise AssertionError("session ended")


@pytest.mark.slow
async def test_a_skipped_step_makes_the_report_say_incomplete_first_and_never_pass(tmp_path):
    from tui.commands.headless import summarize

    profile = write_bench(tmp_path / "bench", SEQUENCE)
    s = await Session.new(
        profile, "T. Tester", sessions_dir=tmp_path / "s", session_id="rec-1", simulate=True, seed=3
    )
    try:
        r = s.runner
        await _until(s, lambda v: v.state is State.WAITING and v.polled)
        r.note("cabinet door latch loose")
        r.capture()
        await _until(s, lambda v: v.state is State.REVIEWING)
        r.accept()
        r.skip("tie switch locked out by the site")
        assert r.finished
        out = io.StringIO()
        code = summarize(s, out)
        dataset, html_path = s.export(tmp_path / "out")
    finally:
        await s.close()
    line = "INCOMPLETE: 1 of 2 steps skipped (tie)"
    assert code == 1 and out.getvalue().rstrip().endswith(f"Session rec-1: {line}")

    md = html_path.with_suffix(".md").read_text()
    assert md.splitlines()[0].startswith(f"**Verdict: {line}**")
    assert "SIMULATED BENCH" in md.splitlines()[0]
    html = html_path.read_text()
    body = html.split("<body>", 1)[1]
    assert body.lstrip().startswith('<p class="verdict bad">Verdict: ' + line)
    # the skipped step's row says skipped, never pass
    tie_row = next(ln for ln in md.splitlines() if ln.startswith("| 2 | tie |"))
    assert "skipped" in tie_row and "pass" not in tie_row.lower().replace("passed", "")
    assert "note (T. Tester): cabinet door latch loose" in md
    assert "cabinet door latch loose" in html

    steps = pd.read_csv(dataset / "data" / "steps.csv")
    assert dict(zip(steps["id"], steps["outcome"], strict=True)) == {
        "radial": "passed",
        "tie": "skipped",
    }
    pkg = json.loads((dataset / "datapackage.json").read_text())
    assert pkg["benchwalk"]["verdict"]["line"] == line
    assert pkg["benchwalk"]["verdict"]["exit_code"] == code
    assert pkg["benchwalk"]["simulated"] is True


COVER = """
[report]
project = "Kestrel Hollow feeder bench commissioning"
site = "Test hall 2, bay 4"
document = "KH-CR-0042"
revision = "B"

[[report.test_equipment]]
name = "Voltage tester, two-pole"
serial = "VT-7781"
calibration_due = 2027-01-15
"""


def _with_cover(text: str) -> str:
    text = text.replace(
        'id = "M5"\n', 'id = "M5"\nserial = "WR-5512"\ncalibration_due = "2027-03-31"\n', 1
    )
    return text + COVER


@pytest.fixture(scope="module")
def faulty_report(tmp_path_factory):
    """A real session with M5's phase-B CT reversed: step radial skipped with the failure."""
    tmp = tmp_path_factory.mktemp("faulty")

    async def record():
        profile = write_bench(tmp / "bench", SEQUENCE, _with_cover)
        s = await Session.new(
            profile,
            "T. Tester",
            sessions_dir=tmp / "s",
            session_id="rec-2",
            simulate=True,
            seed=5,
            faults=["ct-reversed:M5:B"],
        )
        try:
            await _until(s, lambda v: v.state is State.WAITING and v.polled)
            s.runner.capture()
            await _until(s, lambda v: v.state is State.REVIEWING)
            s.runner.skip("M5 phase B CT polarity to be corrected")
            s.runner.skip("not reached today")
            return s.export(tmp / "out")
        finally:
            await s.close()

    dataset, html_path = asyncio.run(record())
    return dataset, html_path


@pytest.mark.slow
def test_the_report_groups_findings_and_names_checks_in_plain_words(faulty_report):
    from meas.dataset.read import load_dataset

    dataset, html_path = faulty_report
    html = html_path.read_text()
    checks = load_dataset(dataset, tables=["checks"])["checks"]
    checks = checks.rename(columns={"check_id": "check"})  # the dataset's SQL-safe name
    bad = checks[checks["status"] == "fail"].fillna({"cause": ""})
    groups = bad.groupby(["step", "check", "subject", "cause"]).size()
    findings = html.split("<h2>Findings</h2>", 1)[1].split("<h2>", 1)[0]
    assert findings.count("<tr>") - 1 == len(groups)  # one row per group (+ the header)
    # each group's count of snapshots is shown in its row
    assert ("phase.wiring", "M5") in {(c, s) for _, c, s, _ in groups.index}
    assert "CT and VT wiring (polarity and phase order)" in findings
    assert '<span class="id">phase.wiring</span>' in findings
    # the step that failed on a meter check has a chart of that check against its limit
    radial = html.split("(radial;", 1)[1].split("<h3>", 1)[0]
    assert "<title>failed checks against their limits</title>" in radial
    assert "M5 phase.wiring" in radial
    # numbers rounded to a resolution: no e-notation anywhere in the report body
    assert not re.search(r"\d\.\d+e[-+]\d\d", html.split("<body>", 1)[1])


@pytest.mark.slow
def test_the_report_shows_per_phase_readings_a_reversed_ct_shows_on(faulty_report):
    from meas.dataset.read import read_table

    dataset, html_path = faulty_report
    html = html_path.read_text()
    m = read_table(
        dataset, "measurements", columns=["step", "meter", "quantity", "phase", "value", "role"]
    )
    sel = m[(m.step == "radial") & (m.meter == "M5") & (m.quantity == "p") & (m.role == "capture")]
    med = sel.groupby("phase")["value"].median()
    assert med["B"] < 0 < med["A"]  # the reversed phase-B CT (REFERENCES.md section 2 signature)
    from meas.report.text import fmt_res

    phases = html.split('<table class="phases">', 1)[1].split("</table>", 1)[0]
    row = next(r for r in phases.split("<tr>") if r.startswith("<td>M5</td>"))
    assert fmt_res(float(med["B"]), "W") in row and fmt_res(float(med["A"]), "W") in row


@pytest.mark.slow
def test_the_report_shows_the_cover_facts_and_instrument_calibration(faulty_report):
    _, html_path = faulty_report
    html = html_path.read_text()
    for fact in (
        "KH-CR-0042",
        "Test hall 2, bay 4",
        "WR-5512",
        "2027-03-31",
        "VT-7781",
        "2027-01-15",
    ):
        assert fact in html
    assert "Kestrel Hollow feeder bench commissioning" in html
    # the print stylesheet: A4, page numbers, a running header with session and revision
    assert "size:A4" in html and 'counter(page) " of " counter(pages)' in html
    assert "session rec-2 \u00b7 document KH-CR-0042 \u00b7 revision B" in html
    # step start and end times
    assert "started (UTC" in html and "ended (UTC)" in html


def test_a_bad_calibration_date_is_one_line_naming_the_key(tmp_path):
    from meas.errors import ProfileError
    from meas.profile import load_profile

    profile = write_bench(
        tmp_path / "b", SEQUENCE, lambda t: _with_cover(t).replace("2027-01-15", '"next spring"')
    )
    with pytest.raises(ProfileError) as err:
        load_profile(profile)
    assert "calibration_due must be a date like 2027-03-31" in str(err.value)


CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"


@pytest.mark.slow
@pytest.mark.skipif(
    not (Path(CHROMIUM).exists() and shutil.which("pdfinfo") and shutil.which("pdftotext")),
    reason="needs headless Chromium and poppler-utils",
)
def test_the_report_prints_to_a4_with_page_numbers_and_running_header(faulty_report, tmp_path):
    _, html_path = faulty_report
    pdf = tmp_path / "report.pdf"
    subprocess.run(
        [
            CHROMIUM,
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--no-pdf-header-footer",
            f"--print-to-pdf={pdf}",
            html_path.as_uri(),
        ],
        capture_output=True,
        timeout=120,
        check=False,
    )
    assert pdf.is_file() and pdf.stat().st_size > 0
    info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True, check=True).stdout
    assert "(A4)" in info
    pages = int(re.search(r"Pages:\s+(\d+)", info).group(1))
    text = subprocess.run(
        ["pdftotext", "-layout", str(pdf), "-"], capture_output=True, text=True, check=True
    ).stdout
    assert f"Page 1 of {pages}" in text and f"Page {pages} of {pages}" in text
    assert text.count("session rec-2") >= pages  # the running header on every page
    lines = [ln.strip() for ln in text.splitlines() if ln.strip()]
    assert lines[0].startswith("Commissioning report, session rec-2")  # the running header
    assert lines[1].startswith("Verdict: FAIL"), lines[:3]  # then the verdict, first


@pytest.mark.slow
def test_the_report_includes_a_staged_fault_validation_found_in_the_dataset(
    faulty_report, tmp_path
):
    """``fault check --out DATASET/fault`` leaves summary.json where the session report finds
    it: the report shows its verdict, the measured-against-predicted table and the caution."""
    from support.benches import DEMO

    from meas.cautions import STAGED_FAULT_CAUTION
    from tui.cli import main

    dataset = tmp_path / "dataset"
    shutil.copytree(faulty_report[0], dataset)
    stem = tmp_path / "staged"
    assert main(["fault", "simulate", str(DEMO), "--bus", "B2", "--out", str(stem)]) == 0
    cfg = stem.with_suffix(".cfg")
    rc = main(
        ["fault", "check", str(cfg), "--profile", str(DEMO), "--bus", "B2"]
        + ["--out", str(dataset / "fault")]
    )
    assert rc == 0
    assert main(["report", str(dataset), "--out", str(tmp_path / "r.html")]) == 0
    page = (tmp_path / "r.html").read_text(encoding="utf-8")
    md = (tmp_path / "r.md").read_text(encoding="utf-8")
    for text in (page, md):
        assert "Staged fault validation" in text
        assert "Staged fault at B2 (3ph)" in text and ": pass" in text
    assert html_text(STAGED_FAULT_CAUTION) in page and STAGED_FAULT_CAUTION in md
    assert page.count("<tr>") > 6  # the comparison table has a row per figure
    # a summary that cannot be read is named in the report, which is still written
    (dataset / "fault" / "summary.json").write_text("{not json", encoding="utf-8")
    assert main(["report", str(dataset), "--out", str(tmp_path / "r2.html")]) == 0
    assert "summary.json cannot be read" in (tmp_path / "r2.html").read_text(encoding="utf-8")


def html_text(s: str) -> str:
    import html

    return html.escape(s)


@pytest.mark.slow
def test_the_report_draws_a_phasor_diagram_per_meter_and_step(faulty_report):
    """A diagram per meter with angle registers and step: its voltages and currents drawn
    from the per-phase medians (angles by their circular mean)."""
    import xml.etree.ElementTree as ET

    page = faulty_report[1].read_text(encoding="utf-8")
    assert '<div class="phasors">' in page and "Phasors referred to each meter" in page
    figures = re.findall(r'<figure class="phasor">(<svg.*?</svg>)<figcaption>(\w+)', page)
    assert len(figures) >= 3  # the meters whose maps have angle registers
    svg = figures[0][0]
    root = ET.fromstring(svg)
    labels = {t.text for t in root.iter("{http://www.w3.org/2000/svg}text")}
    assert {"VA", "VB", "VC"} <= labels
