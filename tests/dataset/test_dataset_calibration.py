"""The dataset a calibration tool reads without benchwalk: quantities and bench tables,
uncertainty per value, Parquet metadata, one row per poll, the long step configuration, SQL-safe
names and the model table; read by pyarrow, DuckDB and polars, valid for frictionless.

The session is recorded from the simulated bench (meas.sim) on the invented demo profile, as
the runner journals it: the last settling poll of the step is journalled again as its first
capture.
"""

from __future__ import annotations

import math
from datetime import UTC, datetime, timedelta
from pathlib import Path

import duckdb
import frictionless
import numpy as np
import pyarrow.parquet as pq
import pytest

from meas.checks import CheckEngine
from meas.dataset.export import export_session
from meas.dataset.read import load_dataset
from meas.dataset.schema import FORMAT_VERSION, TABLES
from meas.journal.store import Journal
from meas.network.readings import ideal_readings
from meas.profile import load_profile
from meas.quantities import all_keys

sim_meters = pytest.importorskip("meas.sim.meters")

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "profiles_demo" / "feeder_bench.toml"
NORMAL = {
    "CB1": "closed",
    "SW2": "closed",
    "SW3": "closed",
    "TIE": "open",
    "RX": "open",
    "LB2": "closed",
}
T0 = datetime(2026, 12, 1, 22, 15, 0, tzinfo=UTC)
N_SETTLE, N_CAPTURE = 3, 3
STEP = "load-bank-2"  # a demo step whose own table sets only LB2


@pytest.fixture(scope="module")
def recorded(tmp_path_factory) -> tuple[Path, Path, dict]:
    folder = tmp_path_factory.mktemp("calib")
    profile = load_profile(DEMO)
    engine = CheckEngine(profile)
    ideal = ideal_readings(profile, NORMAL)
    rng = np.random.default_rng(7)
    path = folder / "20261201-221500-kestrel.sqlite"
    j = Journal.create(path, profile, operator="ana", session_id="20261201-221500-kestrel")
    j.record_step(STEP, "settling", operator="ana", expected_switches=NORMAL)
    snaps, rows, prev = [], {}, None
    for seq in range(N_SETTLE + N_CAPTURE - 1):
        snap = sim_meters.snapshot_from_sim(
            profile, NORMAL, [], rng, seq, t_mono=100 + 0.2 * seq, ideal=ideal,
            previous=prev, time_utc=T0 + timedelta(seconds=0.2 * seq),
        )  # fmt: skip
        snaps.append(snap)
        prev = snap
    for k, snap in enumerate(snaps[:N_SETTLE]):
        rows[("settling", k)] = j.record_snapshot(snap, step_id=STEP, role="settling")
    # the runner's first capture is the poll that ended the settling: journalled again
    for k, snap in enumerate(snaps[N_SETTLE - 1 :]):
        row = j.record_snapshot(snap, step_id=STEP, role="capture")
        rows[("capture", k)] = row
        j.record_checks(row, STEP, engine.run(snap, snaps[: N_SETTLE - 1 + k]))
    j.record_step(STEP, "accepted", outcome="pass", operator="ana", actual_switches=NORMAL)
    j.close()
    out = export_session(path, folder / "dataset")
    return path, out, {"rows": rows, "snaps": snaps, "profile": profile}


def test_one_poll_one_row(recorded):
    _, ds, info = recorded
    d = load_dataset(ds)
    snaps = d["snapshots"]
    dup = info["rows"][("settling", N_SETTLE - 1)]
    assert dup not in set(snaps["snapshot"])  # the repeated poll is kept once, as capture
    assert snaps["seq"].is_unique and len(snaps) == N_SETTLE + N_CAPTURE - 1
    assert (snaps["role"] == "capture").sum() == N_CAPTURE
    m = pq.read_table(ds / "data" / "measurements.parquet").to_pandas()
    assert not m.duplicated(["snapshot", "meter", "quantity", "phase"]).any()
    assert dup not in set(m["snapshot"]) and dup not in set(d["polls"]["snapshot"])


def test_uncertainty_is_the_class_rule(recorded):
    """M1 is class 0.5 for V with float32 registers: u = sqrt(a^2 + r^2) / sqrt 3 with
    a = 0.5 % of reading and r = half a float32 ulp (JCGM 100:2008 4.3.7, rectangular)."""
    _, ds, _ = recorded
    m = pq.read_table(ds / "data" / "measurements.parquet").to_pandas()
    v = m[(m["meter"] == "M1") & (m["quantity"] == "v_ln") & (m["phase"] == "A")].iloc[0]
    a, r = 0.005 * v["value"], v["value"] * 2.0**-24
    assert v["u"] == pytest.approx(math.hypot(a, r) / math.sqrt(3), rel=1e-9)
    # every power, voltage and current value has one; the residual current and counters none
    ok = m[m["quality"] == "ok"]
    ruled = ok[ok["quantity"].isin(["v_ln", "v_ll", "p", "q", "s", "pf", "f"])]
    assert ruled["u"].notna().all() and (ruled["u"] > 0).all()
    assert ok.loc[ok["quantity"].isin(["e_imp", "e_exp"]), "u"].isna().all()


def test_quantities_table_names_totals_and_energies_apart(recorded):
    _, ds, _ = recorded
    q = pq.read_table(ds / "data" / "quantities.parquet").to_pandas().set_index("reading_key")
    assert set(q.index) == set(all_keys())
    # IEC 61850-7-4: MMXU totals are TotW/TotVAr/TotVA/TotPF; energies are MMTR counters,
    # DmdWh and SupWh by flow direction [from memory]
    assert q.loc["p.T", "iec61850_do"] == "TotW" and q.loc["p.A", "iec61850_do"] == "W"
    assert q.loc["p.A", "iec61850_attribute"] == "phsA.cVal.mag.f"
    assert (q.loc["e_imp.T", "iec61850_ln"], q.loc["e_imp.T", "iec61850_do"]) == ("MMTR", "DmdWh")
    assert q.loc["e_exp.T", "iec61850_do"] == "SupWh"
    assert q.loc["i.N", "iec61850_attribute"].startswith("neut")
    assert "phase-A voltage" in q.loc["i_ang.B", "angle_reference"]
    assert (
        "sign of P" in q.loc["pf.T", "pf_sign"]
        and "meters.apparent_power" in q.loc["s.T", "s_definition"]
    )
    m = pq.read_table(
        ds / "data" / "measurements.parquet", columns=["quantity", "phase"]
    ).to_pandas()
    joined = m.merge(q.reset_index(), on=["quantity", "phase"], how="left")
    assert joined["unit"].notna().all()  # every measured key is described


def test_bench_table_holds_the_numeric_bases(recorded):
    _, ds, _ = recorded
    b = pq.read_table(ds / "data" / "bench.parquet").to_pylist()[0]
    # demo profile: s_base 30 kVA, 400 V bench standing for 33 kV, power scale 333.333 (its file)
    assert b["s_base_va"] == 30000.0 and b["s_base_phase_va"] == pytest.approx(10000.0)
    assert b["i_base"] == pytest.approx(30000 / (math.sqrt(3) * 400), rel=1e-12)
    assert b["v_base_ln"] == pytest.approx(400 / math.sqrt(3), rel=1e-12)
    assert b["voltage_scale"] == pytest.approx(33000 / 400)
    assert b["current_scale"] == pytest.approx(333.3333333 / (33000 / 400))
    meters = pq.read_table(ds / "data" / "meters.parquet").to_pandas().set_index("id")
    assert (
        set(meters["apparent_power"]) <= {"vector", "arithmetic"}
        and meters["apparent_power"].notna().all()
    )


def test_step_configuration_is_long_and_complete(recorded):
    _, ds, _ = recorded
    sw = pq.read_table(ds / "data" / "step_switches.parquet").to_pandas()
    steps = pq.read_table(ds / "data" / "steps.parquet").to_pandas()
    assert len(sw) == len(steps) * len(NORMAL)  # every step, every switch
    mine = sw[sw["step"] == STEP].set_index("switch")
    assert mine["expected"].to_dict() == NORMAL  # all six, not only the step's own entry
    assert mine["actual"].to_dict() == NORMAL


def test_parquet_carries_units_descriptions_and_the_format(recorded):
    _, ds, _ = recorded
    schema = pq.read_schema(ds / "data" / "measurements.parquet")
    assert schema.metadata[b"benchwalk:format"] == str(FORMAT_VERSION).encode() == b"2"
    assert b"bus into its branch" in schema.metadata[b"benchwalk:sign_convention"]
    assert schema.metadata[b"benchwalk:key"] == b"snapshot,meter,quantity,phase"
    assert b"standard uncertainty" in schema.field("u").metadata[b"description"]
    assert pq.read_schema(ds / "data" / "bench.parquet").field("i_base").metadata[b"unit"] == b"A"


def test_model_table_is_one_join_from_the_measurements(recorded):
    _, ds, info = recorded
    con = duckdb.connect()
    data = ds / "data"
    rows = con.sql(
        f"""
        SELECT m.meter, m.quantity, m.phase, median(m.value) AS measured, any_value(x.value) AS model
        FROM '{data}/measurements.parquet' m
        JOIN '{data}/model.parquet' x USING (step, meter, quantity, phase)
        WHERE m.role = 'capture' AND m.quality = 'ok'
        GROUP BY ALL
        """
    ).fetchall()
    ideal = ideal_readings(info["profile"], NORMAL).meters
    assert len(rows) > 100
    for meter, q, ph, _measured, model in rows:
        assert model == pytest.approx(ideal[meter][f"{q}.{ph}"], rel=1e-12, abs=1e-12)
    # measured against model: the healthy simulated bench agrees within a few percent on P
    p = {r[0]: r for r in rows if r[1] == "p" and r[2] == "T"}
    assert abs(p["M1"][3] - p["M1"][4]) < 0.03 * abs(p["M1"][4])


def test_sql_safe_names_and_three_readers(recorded):
    _, ds, _ = recorded
    con = duckdb.connect()
    # DuckDB's own list of reserved SQL keywords (order, check, limit, ...)
    reserved = {
        r[0]
        for r in con.sql(
            "SELECT keyword_name FROM duckdb_keywords() WHERE keyword_category = 'reserved'"
        ).fetchall()
    }
    assert {"order", "check", "limit"} <= reserved
    for name, spec in TABLES.items():
        assert not {c.name for c in spec["columns"]} & reserved, name
    data = ds / "data"
    # unquoted column names parse in plain SQL
    n = con.sql(
        f"SELECT count(*) FROM '{data}/checks.parquet' WHERE check_id LIKE 'meter.%' AND limit_value > 0"
    ).fetchall()[0][0]
    assert n > 0
    assert (
        con.sql(
            f"SELECT step_number FROM '{data}/steps.parquet' ORDER BY step_number LIMIT 1"
        ).fetchall()[0][0]
        == 1
    )
    polars = pytest.importorskip("polars")
    for table in ("measurements", "quantities", "bench", "model", "step_switches"):
        pl_df = polars.read_parquet(data / f"{table}.parquet")
        assert pl_df.height == pq.read_metadata(data / f"{table}.parquet").num_rows > 0


def test_frictionless_validates_and_check_reproduces(recorded):
    _, ds, _ = recorded
    report = frictionless.validate(str(ds / "datapackage.json"))
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])[:5]
    from meas.recheck import compare_checks, recheck

    exported = load_dataset(ds, tables=["checks"])["checks"]
    assert len(exported) > 0 and compare_checks(exported, recheck(ds)) == []


def test_dataset_carries_the_bench_model_for_pandapower(recorded):
    import json

    _, ds, info = recorded
    pkg = json.loads((ds / "datapackage.json").read_text())
    assert (
        pkg["benchwalk"]["format"] == 2 and pkg["benchwalk"]["network"] == "network/pandapower.json"
    )
    tables = json.loads((ds / "network" / "pandapower.json").read_text())
    names = {r["name"] for rows in tables["elements"].values() for r in rows}
    # every branch of the profile is one element (tests/dataset/test_pandapower_export.py
    # loads such tables into pandapower and compares the load flow)
    assert {b.id for b in info["profile"].branches} <= names
    assert tables["switches"] == NORMAL


def test_text_columns_written_back_as_large_strings_still_read(recorded, tmp_path):
    """pandas 3 writes text columns back as Arrow large_string; the reader takes them as the
    schema's string (found by the CI run with the newest pandas in range)."""
    import json
    import shutil

    import pyarrow as pa

    from meas.dataset.files import sha256_of

    _, ds, _ = recorded
    copy = tmp_path / "copy"
    shutil.copytree(ds, copy)
    p = copy / "data" / "steps.parquet"
    t = pq.read_table(p)
    i = t.schema.get_field_index("title")
    pq.write_table(t.set_column(i, "title", t["title"].cast(pa.large_string())), p)
    pkg = json.loads((copy / "datapackage.json").read_text())
    for r in pkg["resources"]:
        if r["name"] == "steps":
            r["benchwalk:parquet"]["hash"] = "sha256:" + sha256_of(p)
            r["benchwalk:parquet"]["bytes"] = p.stat().st_size
    (copy / "datapackage.json").write_text(json.dumps(pkg))
    steps = load_dataset(copy, tables=["steps"])["steps"]
    assert steps["title"].tolist() == load_dataset(ds, tables=["steps"])["steps"]["title"].tolist()


def test_summary_xlsx_holds_numbers_and_times(recorded, tmp_path):
    import statistics

    from openpyxl import load_workbook

    from meas.dataset.summary import COLUMNS, write_summary

    _, ds, _ = recorded
    out = write_summary(ds, tmp_path / "summary.xlsx")
    ws = load_workbook(out).active
    rows = list(ws.iter_rows(values_only=True))
    assert list(rows[0]) == COLUMNS
    by = {(r[1], r[2], r[3], r[4]): dict(zip(COLUMNS, r, strict=True)) for r in rows[1:]}
    m = pq.read_table(ds / "data" / "measurements.parquet").to_pandas()
    cap = m[(m["role"] == "capture") & (m["quality"] == "ok")]
    assert len(by) == len(cap.groupby(["step", "meter", "quantity", "phase"]))
    # M5 reads voltage from an int16 register with a scale of 0.01 V (demo profile, wren-i16
    # map): its median is rounded to 0.01 V
    vals = cap[(cap["meter"] == "M5") & (cap["quantity"] == "v_ln") & (cap["phase"] == "A")]
    row = by[(STEP, "M5", "v_ln", "A")]
    assert row["captures"] == N_CAPTURE
    assert row["median"] == pytest.approx(round(statistics.median(vals["value"]), 2), abs=1e-12)
    assert isinstance(row["median"], float) and isinstance(row["u"], float)
    assert row["expanded_u"] == pytest.approx(2 * row["u"], rel=0.05)  # k = 2, two digits each
    assert isinstance(row["first_utc"], datetime)  # a date-time cell, not text
    cell = next(c for c in ws[2] if c.column == COLUMNS.index("median") + 1)
    assert cell.data_type == "n"


def test_summary_csv_for_decimal_comma_locales(recorded, tmp_path):
    import pandas as pd

    from meas.dataset.summary import write_summary

    _, ds, _ = recorded
    out = write_summary(ds, tmp_path / "summary.csv")
    text = out.read_text(encoding="utf-8-sig")
    assert ";" in text.splitlines()[0] and "." not in text.splitlines()[1].split(";")[7]
    df = pd.read_csv(out, sep=";", decimal=",", encoding="utf-8-sig", parse_dates=["first_utc"])
    assert df["median"].dtype == float and df["u"].dtype == float
    assert pd.api.types.is_datetime64_any_dtype(df["first_utc"])
