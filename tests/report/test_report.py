"""Offline re-check and commissioning report on a session recorded from the simulated bench.

The demo profile (invented bench) and meas.sim produce the snapshots; a reversed CT on the
phase-B input of meter M5 (``ct-reversed:M5:B``) makes real checks fail, so the report must
carry their sentences. The re-check is judged against the checks recorded at capture time by
meas.checks itself: the exported dataset alone must reproduce them exactly.
"""

from __future__ import annotations

import html.parser
import re
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from meas.cautions import REPORT_CAUTION as CAUTION
from meas.dataset.export import export_session
from meas.dataset.read import load_dataset
from meas.journal.store import Journal
from meas.recheck import compare_checks, recheck
from meas.report import write_report
from meas.results import overall
from tui import cli

checks_mod = pytest.importorskip("meas.checks")
sim_meters = pytest.importorskip("meas.sim.meters")
sim_readings = pytest.importorskip("meas.sim.readings")
sim_faults = pytest.importorskip("meas.sim.faults")
from meas.profile import load_profile  # noqa: E402

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"
NORMAL = {
    "CB1": "closed",
    "SW2": "closed",
    "SW3": "closed",
    "TIE": "open",
    "RX": "open",
    "LB2": "closed",
}
T0 = datetime(2026, 12, 1, 22, 15, 0, tzinfo=UTC)


def record_sim_session(folder: Path, faults: list[str]) -> Path:
    """Two steps of the demo walk, every snapshot journalled and checked as the runner does."""
    profile = load_profile(DEMO)
    fl = sim_faults.parse_faults(faults)
    engine = checks_mod.CheckEngine(profile)
    ideal = sim_readings.ideal_readings(profile, NORMAL)
    rng = np.random.default_rng(20261201)
    path = folder / "20261201-221500-kestrel.sqlite"
    j = Journal.create(
        path,
        profile,
        operator="ana",
        session_id="20261201-221500-kestrel",
    )
    seq, prev = 0, None
    for step, n_settle, n_capture in (("radial-sign-off", 4, 4), ("load-bank-2", 3, 5)):
        j.record_step(step, "settling", operator="ana", expected_switches=NORMAL)
        history: list = []
        captured: list = []
        for k in range(n_settle + n_capture):
            snap = sim_meters.snapshot_from_sim(
                profile,
                NORMAL,
                fl,
                rng,
                seq,
                t_mono=100.0 + 0.2 * seq,
                ideal=ideal,
                previous=prev,
                time_utc=T0 + timedelta(seconds=0.2 * seq),
            )
            role = "settling" if k < n_settle else "capture"
            row = j.record_snapshot(snap, step_id=step, role=role)
            if role == "capture":
                results = engine.run(snap, history)
                j.record_checks(row, step, results)
                captured.extend(results)
            history.append(snap)
            seq, prev = seq + 1, snap
        status = overall(captured).value  # as the runner does: the worst result of the captures
        j.record_step(
            step,
            "accepted",
            outcome=status,
            operator="ana",
            reason="M5 phase B CT reversed, rewiring booked" if status == "fail" else None,
            settle_s=0.8,
            actual_switches=NORMAL,
        )
    j.record_event("note", "bench handed back", operator="ana")
    j.close()
    return path


@pytest.fixture(scope="module")
def sim_dataset(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("sim")
    return export_session(record_sim_session(folder, ["ct-reversed:M5:B"]))


def test_recheck_reproduces_the_recorded_checks(sim_dataset: Path) -> None:
    exported = load_dataset(sim_dataset, tables=["checks"])["checks"]
    assert len(exported) > 50 and (exported["status"] == "fail").any()
    fresh = recheck(sim_dataset)
    assert compare_checks(exported, fresh) == []
    assert len(fresh) == len(exported)


def test_recheck_notices_an_edited_measurement(sim_dataset: Path, tmp_path: Path) -> None:
    """Rewriting one P value (and its hashes, as a careless edit would not) changes a result."""
    import json
    import shutil

    import pandas as pd
    import pyarrow as pa
    import pyarrow.parquet as pq

    from meas.dataset.files import sha256_of as _sha256

    copy = tmp_path / "edited"
    shutil.copytree(sim_dataset, copy)
    p = copy / "data" / "measurements.parquet"
    df = pd.read_parquet(p)
    snap = int(load_dataset(copy, tables=["checks"])["checks"]["snapshot"].iloc[-1])
    sel = (
        (df["snapshot"] == snap)
        & (df["meter"] == "M1")
        & (df["quantity"] == "p")
        & (df["phase"] == "T")
    )
    df.loc[sel, "value"] = df.loc[sel, "value"] * 1.5
    pq.write_table(pa.Table.from_pandas(df, preserve_index=False), p)
    pkg = json.loads((copy / "datapackage.json").read_text())
    alt = next(r for r in pkg["resources"] if r["name"] == "measurements")["benchwalk:parquet"]
    alt.update(bytes=p.stat().st_size, hash="sha256:" + _sha256(p))
    (copy / "datapackage.json").write_text(json.dumps(pkg))
    diffs = compare_checks(load_dataset(copy, tables=["checks"])["checks"], recheck(copy))
    assert diffs and any("value" in d or "status" in d for d in diffs)


def test_check_command_exit_codes(sim_dataset: Path, tmp_path: Path, capsys) -> None:
    assert cli.main(["check", str(sim_dataset)]) == 1  # the reversed CT fails checks
    out = capsys.readouterr().out
    assert "reproduces the exported checks table" in out and "FAIL" in out
    clean = export_session(record_sim_session(tmp_path, []))
    assert not (load_dataset(clean, tables=["checks"])["checks"]["status"] == "fail").any()
    assert cli.main(["check", str(clean)]) == 0  # healthy simulated bench: nothing fails


class _Refs(html.parser.HTMLParser):
    """Every attribute that could fetch something: src, href, xlink:href, url(...) in styles."""

    def __init__(self) -> None:
        super().__init__()
        self.refs: list[str] = []
        self.tags: set[str] = set()

    def handle_starttag(self, tag, attrs):
        self.tags.add(tag)
        for k, v in attrs:
            if k in ("src", "href", "xlink:href", "data", "srcset", "action") and v:
                self.refs.append(f"{tag}.{k}={v}")


def test_report_is_one_self_contained_file_with_failures_and_caution(
    sim_dataset: Path, tmp_path: Path
) -> None:
    html_path, md_path = write_report(sim_dataset, tmp_path / "report.html")
    text = html_path.read_text()
    md = md_path.read_text()
    checks = load_dataset(sim_dataset, tables=["checks"])["checks"]
    failed = checks.loc[checks["status"] == "fail", "message"].unique()
    assert len(failed) > 0
    for sentence in failed:
        assert html_escape(sentence) in text and sentence.replace("|", "\\|") in md
    assert html_escape(CAUTION) in text and CAUTION in md
    assert "waived" in text and "M5 phase B CT reversed, rewiring booked" in text
    for words in (
        "Sign-off",
        "Commissioning engineer",
        "Witness",
        "Sequence",
        "Bench and instruments",
    ):
        assert words in text and words in md
    assert "<svg" in text and "limit" in text
    parser = _Refs()
    parser.feed(text)
    assert parser.refs == [] and "script" not in parser.tags and "link" not in parser.tags
    assert not re.search(r"url\(|@import|https?://(?!www\.w3\.org/2000/svg)", text)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.html", "report.md"]
    # key readings: M1's median P of the radial-sign-off captures, recomputed from the dataset
    m = load_dataset(sim_dataset, tables=["measurements"])["measurements"]
    sel = m[
        (m["step"] == "radial-sign-off")
        & (m["role"] == "capture")
        & (m["meter"] == "M1")
        & (m["quantity"] == "p")
        & (m["phase"] == "T")
    ]
    from meas.report.text import fmt

    assert fmt(float(np.median(sel["value"]))) in text


def html_escape(s: str) -> str:
    import html as h

    return h.escape(s)


def test_report_command_writes_beside_the_dataset(sim_dataset: Path, capsys) -> None:
    assert cli.main(["report", str(sim_dataset)]) == 0
    out = capsys.readouterr().out
    expected = sim_dataset.parent / f"{sim_dataset.name}-report.html"
    assert str(expected) in out and expected.is_file() and expected.with_suffix(".md").is_file()
