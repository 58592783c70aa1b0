"""The dataset's meter_gains and coverage tables: the session's joint estimate against the
network model, written at export and made again by ``benchwalk check`` from the dataset alone.

Readings: the simulated bench on the invented demo profile with a true network that is not the
nameplate model (every parameter drawn within its tolerance, meter gains within their classes,
tests/support/estimate_bench.py), journalled as the runner journals captures. The expected
outcomes are the estimator's contract (issue 11), not numbers from a source: a VT ratio set
10 % high on the lone lateral meter M5 (``vt-ratio:M5:1.1``) is a voltage gain of 1.1 beyond
its class (class 0.5: limit 0.005, IEC 61557-12 class index, common practice), named with its
cause; a clean bench has no gain beyond its class.
"""

from __future__ import annotations

import dataclasses
import json
import shutil
from pathlib import Path

import duckdb
import frictionless
import numpy as np
import polars as pl
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest
from support.estimate_bench import as_built, capture, demo, meter_gains, sequence_states
from support.invented_bench import build_session

from meas.dataset.estimate_tables import NO_MODEL, _findings_by_row, estimate_session
from meas.dataset.export import export_session
from meas.dataset.files import sha256_of
from meas.dataset.read import load_dataset
from meas.dataset.schema import FORMAT_MINOR, TABLES
from meas.estimate.results import Finding
from meas.journal.store import Journal
from meas.recheck import compare_estimate, estimate_recorded, recheck_estimate
from meas.report import write_report
from meas.sim.faults import parse_fault
from tui import cli

SEED = 5
# the first two steps that load the lateral (SW3 closed); the exact identification of a fault
# refits once per suspect, so a longer session makes this test minutes long on a loaded machine
STEPS = ("pick-up-lateral", "load-bank-2")


def record(folder: Path, faults: list[str]) -> Path:
    """Three captured steps of the demo walk journalled as the runner does (role capture)."""
    prof = demo()
    true, gains = as_built(prof, SEED), meter_gains(prof, SEED)
    states = dict(sequence_states(prof))
    fl = tuple(parse_fault(f) for f in faults)
    rng = np.random.default_rng(11)
    path = folder / "20261201-221500-kestrel.sqlite"
    j = Journal.create(path, prof, operator="ana", session_id="20261201-221500-kestrel")
    for sid in STEPS:
        j.record_step(sid, "settling", operator="ana", expected_switches=states[sid])
        for snap in capture(true, states[sid], fl, rng, gains, n=3):
            j.record_snapshot(snap, step_id=sid, role="capture")
        j.record_step(sid, "accepted", outcome="passed", operator="ana")
    j.close()
    return path


@pytest.fixture(scope="module")
def faulty(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("vt")
    return export_session(record(folder, ["vt-ratio:M5:1.1"]), folder / "dataset")


@pytest.fixture(scope="module")
def clean(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("clean")
    return export_session(record(folder, []), folder / "dataset")


@pytest.mark.slow
def test_a_vt_ratio_set_wrong_is_a_gain_beyond_class_with_its_cause(faulty: Path) -> None:
    g = load_dataset(faulty, tables=["meter_gains"])["meter_gains"]
    assert len(g) == 16  # 8 meters x (voltage, current)
    m5 = g[(g["meter"] == "M5") & (g["quantity"] == "voltage")].iloc[0]
    assert m5["gain"] == pytest.approx(1.1, abs=0.005)
    assert 0 < m5["u"] < 0.005 and m5["class_limit"] == pytest.approx(0.005)
    assert bool(m5["beyond_class"]) and m5["basis"] == "refit"
    assert m5["cause"].startswith("vt_ratio:") and "VT ratio" in m5["message"]
    others = g[~((g["meter"] == "M5") & (g["quantity"] == "voltage"))]
    assert not others["beyond_class"].any()  # one fault, one meter blamed
    pkg = json.loads((faulty / "datapackage.json").read_text())
    assert pkg["benchwalk"]["format"] == 2 and pkg["benchwalk"]["format_minor"] == FORMAT_MINOR
    est = pkg["benchwalk"]["estimate"]
    assert est["estimated"] and est["steps"] == 2
    assert [f["meters"] for f in est["findings"]] == [["M5"]]


@pytest.mark.slow
def test_a_clean_bench_has_no_gain_beyond_class_and_says_what_it_covers(clean: Path) -> None:
    ds = load_dataset(clean, tables=["meter_gains", "coverage"])
    g, c = ds["meter_gains"], ds["coverage"]
    assert len(g) == 16 and not g["beyond_class"].any()
    assert g["message"].isna().all() and (g["basis"] == "joint fit").all()
    # every gain within its class limit of 1 (the simulated classes, tests/support)
    assert ((g["gain"] - 1).abs() <= g["class_limit"] + 2 * g["u"]).all()
    # one row per meter and error kind: 2 ratios, 3 reversed CTs, 3 swapped pairs; then an
    # offset per reading measured and, as both steps measured every meter, frozen per meter
    kinds = c["error_kind"]
    offset, frozen = kinds.str.startswith("offset:"), kinds == "frozen"
    assert len(c[~offset & ~frozen]) == 8 * 8
    assert set(kinds) >= {"vt_ratio", "ct_ratio", "ct_reversed:B", "offset:v_ln.A", "offset:i.B"}
    assert sorted(c.loc[frozen, "meter"]) == [f"M{k}" for k in range(1, 9)]
    assert offset.sum() > 8 * 10 and not c.duplicated(["meter", "error_kind"]).any()
    ratio = c[c["error_kind"].isin(["vt_ratio", "ct_ratio"]) & c["detectable"]]
    assert len(ratio) and ((ratio["min_factor"] > 0) & (ratio["min_factor"] < 0.1)).all()
    assert c.loc[c["detectable"], "why_not"].isna().all()
    assert c.loc[~c["detectable"], "why_not"].notna().all()


@pytest.mark.slow
def test_the_check_command_makes_the_same_tables_from_the_dataset_alone(faulty: Path) -> None:
    fresh = recheck_estimate(faulty)
    assert fresh.gains and compare_estimate(faulty, fresh) == []


@pytest.mark.slow
def test_an_edited_reading_changes_the_rechecked_tables(clean: Path, tmp_path: Path) -> None:
    """The comparison above can fail: M5's phase voltages raised 0.05 % in the copy (its hashes
    updated, as a careless edit would not) move M5's voltage gain."""
    copy = tmp_path / "copy"
    shutil.copytree(clean, copy)
    p = copy / "data" / "measurements.parquet"
    t = pq.read_table(p)
    hit = pc.and_(pc.equal(t["meter"], "M5"), pc.equal(t["quantity"], "v_ln"))
    t = t.set_column(
        t.schema.get_field_index("value"),
        t.schema.field("value"),
        pc.if_else(hit, pc.multiply(t["value"], pa.scalar(1.0005)), t["value"]),
    )
    pq.write_table(t, p)
    pkg = json.loads((copy / "datapackage.json").read_text())
    alt = next(r for r in pkg["resources"] if r["name"] == "measurements")["benchwalk:parquet"]
    alt.update(bytes=p.stat().st_size, hash="sha256:" + sha256_of(p))
    (copy / "datapackage.json").write_text(json.dumps(pkg))
    diffs = compare_estimate(copy, recheck_estimate(copy))
    assert any(d.startswith("meter_gains M5 voltage: gain") for d in diffs), diffs


@pytest.mark.slow
def test_the_tables_load_in_pyarrow_duckdb_polars_and_validate(faulty: Path) -> None:
    """frictionless 5 validates types, keys and foreign keys of the new tables (REFERENCES.md 8)."""
    report = frictionless.validate(faulty / "datapackage.json")
    assert report.valid, report.flatten(["resourceName", "type", "note"])[:5]
    for name in ("meter_gains", "coverage"):
        schema = pq.read_schema(faulty / "data" / f"{name}.parquet")
        assert schema.metadata[b"benchwalk:table"] == name.encode()
        assert schema.metadata[b"benchwalk:format_minor"] == str(FORMAT_MINOR).encode()
        for col in TABLES[name]["columns"]:
            assert schema.field(col.name).metadata[b"description"] == col.description.encode()
    n = duckdb.sql(
        f"SELECT count(*) FROM '{faulty}/data/meter_gains.parquet' WHERE beyond_class"
    ).fetchall()
    assert n == [(1,)]
    cov = pl.read_parquet(faulty / "data" / "coverage.parquet")
    ratio_and_wiring = cov.filter(
        ~pl.col("error_kind").str.starts_with("offset:") & (pl.col("error_kind") != "frozen")
    )
    assert cov.schema["detectable"] == pl.Boolean and ratio_and_wiring.height == 64
    m5 = pl.read_csv(faulty / "data" / "meter_gains.csv").filter(
        (pl.col("meter") == "M5") & (pl.col("quantity") == "voltage")
    )
    assert m5["beyond_class"].to_list() == [True]


def test_without_model_data_the_tables_are_empty_with_the_reason(tmp_path: Path) -> None:
    ds = export_session(build_session(tmp_path))  # the invented bench has no model tables
    got = load_dataset(ds, tables=["meter_gains", "coverage"])
    assert got["meter_gains"].empty and got["coverage"].empty
    pkg = json.loads((ds / "datapackage.json").read_text())
    res = {r["name"]: r for r in pkg["resources"]}
    assert res["meter_gains"]["description"] == f"Empty: {NO_MODEL}."
    assert res["coverage"]["benchwalk:rows"] == 0
    assert pkg["benchwalk"]["estimate"] == {"estimated": False, "reason": NO_MODEL, "steps": 0}
    assert frictionless.validate(ds / "datapackage.json").valid
    assert compare_estimate(ds, recheck_estimate(ds)) == []


def test_captures_with_a_switch_unknown_give_a_reason_not_an_exception() -> None:
    prof = demo()
    states = dict(sequence_states(prof))["pick-up-lateral"]
    snaps = capture(prof, states, (), np.random.default_rng(1), meter_gains(prof, 1), n=2)
    unknown = [dataclasses.replace(s, switches={**s.switches, "SW3": "unknown"}) for s in snaps]
    est = estimate_session(prof, [("pick-up-lateral", unknown)])
    assert not est.gains and not est.coverage
    assert est.reason == "no step was captured with every switch state known"
    assert est.description("coverage") == f"Empty: {est.reason}."
    assert estimate_session(None, []).reason == "the dataset's profile no longer loads"
    assert estimate_session(prof, []).reason == "no step was captured in this session"


@pytest.mark.slow
def test_an_older_dataset_without_the_tables_still_loads_and_reports(
    clean: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """A format 2.0 dataset (written before the tables existed) reads with them empty."""
    copy = tmp_path / "old"
    shutil.copytree(clean, copy)
    pkg = json.loads((copy / "datapackage.json").read_text())
    pkg["resources"] = [r for r in pkg["resources"] if r["name"] not in ("meter_gains", "coverage")]
    del pkg["benchwalk"]["format_minor"], pkg["benchwalk"]["estimate"]
    (copy / "datapackage.json").write_text(json.dumps(pkg))
    for name in ("meter_gains", "coverage"):
        for ext in ("csv", "parquet"):
            (copy / "data" / f"{name}.{ext}").unlink()
    got = load_dataset(copy)
    assert got["meter_gains"].empty and list(got["coverage"].columns)[:2] == ["meter", "error_kind"]
    html_path, _ = write_report(copy, tmp_path / "old-report.html")
    assert "predates the session estimate" in html_path.read_text()
    assert estimate_recorded(clean) and not estimate_recorded(copy)
    assert cli.main(["check", str(copy)]) == 0
    assert "predates the meter_gains and coverage tables" in capsys.readouterr().out


@pytest.mark.slow
def test_the_check_command_says_the_tables_reproduce(clean: Path, capsys) -> None:
    assert cli.main(["check", str(clean), "--json"]) == 0
    out = json.loads(capsys.readouterr().out.strip().splitlines()[-1])
    assert out["estimate_reproduces"] is True and out["estimate_differences"] == []


@pytest.mark.slow
def test_the_report_first_page_names_the_meter_beyond_class(faulty: Path, tmp_path: Path) -> None:
    html_path, md_path = write_report(faulty, tmp_path / "report.html")
    page = html_path.read_text()
    page = page[: page.index("<h2>Bench and instruments</h2>")]
    assert "Verified against the network model" in page
    assert "beyond class ±0.5 %" in page and "M5: voltages 1.1" in page
    assert "the VT ratio looks set wrong" in page
    assert "M5: voltages 1.1" in md_path.read_text().split("## Bench and instruments")[0]


def test_each_finding_lands_on_the_gain_rows_it_is_about() -> None:
    """An offset on a voltage reading is a voltage-row matter, a frozen meter both rows'."""

    def f(meter: str, cause: str) -> Finding:
        return Finding((meter,), cause, f"{meter}: {cause}", 9.0, 4.0)

    rows = _findings_by_row(
        [
            f("M1", "offset:v_ln.A:+5.000"),
            f("M2", "offset:i.B:+2.991"),
            f("M3", "frozen:3"),
            f("M4", "vt_ratio:1.100"),
            f("M6", "ct_reversed:B"),
        ]
    )
    assert {k: v.cause for k, v in rows.items()} == {
        ("M1", "voltage"): "offset:v_ln.A:+5.000",
        ("M2", "current"): "offset:i.B:+2.991",
        ("M3", "voltage"): "frozen:3",
        ("M3", "current"): "frozen:3",
        ("M4", "voltage"): "vt_ratio:1.100",
        ("M6", "current"): "ct_reversed:B",
    }


def test_a_2_1_dataset_compares_its_coverage_without_the_later_kinds(
    clean: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """Format 2.1 had no offset or frozen coverage rows: such a dataset still reproduces, and
    the check says what it left out; a row of a 2.1 kind missing is still a difference."""
    copy = tmp_path / "v21"
    shutil.copytree(clean, copy)
    pkg = json.loads((copy / "datapackage.json").read_text())
    pkg["benchwalk"]["format_minor"] = 1
    cov_file = copy / "data" / "coverage.parquet"
    cov = pq.read_table(cov_file)
    kinds = cov.column("error_kind")
    later = pc.or_(pc.starts_with(kinds, "offset:"), pc.equal(kinds, "frozen"))
    assert pc.any(later).as_py()  # the clean session has such rows to drop
    alt = next(r for r in pkg["resources"] if r["name"] == "coverage")["benchwalk:parquet"]

    def rewrite(table: pa.Table) -> None:  # hashes updated, as a careless edit would not
        pq.write_table(table, cov_file)
        alt.update(bytes=cov_file.stat().st_size, hash="sha256:" + sha256_of(cov_file))
        (copy / "datapackage.json").write_text(json.dumps(pkg))

    rewrite(cov.filter(pc.invert(later)))
    fresh = recheck_estimate(copy)
    assert compare_estimate(copy, fresh) == []
    assert cli.main(["check", str(copy)]) == 0
    out = capsys.readouterr().out
    assert "format 2.1) predates the frozen and offset coverage rows" in out
    assert "reproduces the meter_gains and coverage tables" in out
    # a 2.1 kind missing from the dataset is still found
    rewrite(cov.filter(pc.invert(later)).slice(1))
    assert compare_estimate(copy, fresh) != []
