"""Dataset export against the outside world: the frictionless library validates the package,
pandas reads the tables back equal to the journal, DuckDB reads a hive collection as one
table, a real OS file-size limit makes an export fail half-way, and damaged folders give one
clear line. The session data is invented for the test (see support/invented_bench.py).
"""

from __future__ import annotations

import json
import math
import shutil
import subprocess
import sys
from pathlib import Path

import duckdb
import frictionless
import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from support.invented_bench import KEYS, build_session

from meas.dataset.collection import write_collection
from meas.dataset.export import ESTIMATE_STAGE, export_session
from meas.dataset.read import load_dataset
from meas.dataset.schema import TABLES
from meas.errors import BenchwalkError
from meas.journal.store import Journal
from meas.recheck import compare_checks
from tui import cli


@pytest.fixture(scope="module")
def exported(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    folder = tmp_path_factory.mktemp("ds")
    journal = build_session(folder)
    return journal, export_session(journal)


def test_package_validates_with_frictionless(exported: tuple[Path, Path]) -> None:
    """frictionless 5 checks the Data Package v2 descriptor, each Table Schema, types,
    required fields, primary and foreign keys, byte counts and sha256 hashes (REFERENCES.md 8)."""
    _, ds = exported
    report = frictionless.validate(ds / "datapackage.json")
    assert report.valid, report.flatten(["resourceName", "type", "note"])[:5]
    pkg = json.loads((ds / "datapackage.json").read_text())
    assert pkg["$schema"] == "https://datapackage.org/profiles/2.0/datapackage.json"
    assert {r["name"] for r in pkg["resources"]} == set(TABLES)
    meas = next(r for r in pkg["resources"] if r["name"] == "measurements")
    units = {f["name"]: f.get("unit") for f in meas["schema"]["fields"]}
    assert units["value_pu"] == "pu" and meas["schema"]["primaryKey"] == [
        "snapshot",
        "meter",
        "quantity",
        "phase",
    ]
    assert pkg["benchwalk"]["session"] == "s" and len(pkg["benchwalk"]["profile_sha256"]) == 64


def test_a_broken_table_fails_frictionless_validation(
    exported: tuple[Path, Path], tmp_path: Path
) -> None:
    """The validation above can fail: a bad number in a CSV cell is reported."""
    _, ds = exported
    copy = tmp_path / "copy"
    shutil.copytree(ds, copy)
    csv = copy / "data" / "checks.csv"
    csv.write_text(csv.read_text().replace(",13.5,", ",twelve,", 1))
    pkg = json.loads((copy / "datapackage.json").read_text())
    for r in pkg["resources"]:  # keep hashes consistent so the type error itself is what is found
        r.pop("hash", None)
        r.pop("bytes", None)
    (copy / "datapackage.json").write_text(json.dumps(pkg))
    report = frictionless.validate(copy / "datapackage.json")
    assert not report.valid
    assert "type-error" in {e[1] for e in report.flatten(["resourceName", "type"])}


def test_tables_read_back_equal_the_journal(exported: tuple[Path, Path]) -> None:
    journal_path, ds = exported
    j = Journal.open(journal_path)
    expected = []
    for rid in j.snapshot_ids():
        s = j.read_snapshot(rid)
        for m, block in s.meters.items():
            for k, v in block.values.items():
                q, ph = k.split(".")
                expected.append((rid, m, q, ph, v, str(block.quality[k])))
    exp = pd.DataFrame(
        expected, columns=["snapshot", "meter", "quantity", "phase", "value", "quality"]
    )
    from_pq = pd.read_parquet(ds / "data" / "measurements.parquet")
    from_csv = pd.read_csv(
        ds / "data" / "measurements.csv",
        float_precision="round_trip",
        keep_default_na=False,
        na_values=[""],
    )
    for got in (from_pq, from_csv):
        assert len(got) == len(exp) == 12 * 3 * len(KEYS)
        for col in ("snapshot", "meter", "quantity", "phase", "quality"):
            assert got[col].astype(str).tolist() == exp[col].astype(str).tolist()
        a, b = got["value"].to_numpy(float), exp["value"].to_numpy(float)
        assert np.array_equal(np.isnan(a), np.isnan(b)) and np.array_equal(
            a[~np.isnan(a)], b[~np.isnan(b)]
        )  # exact
    assert exp["quality"].eq("timeout").sum() == len(KEYS)  # meter M2 in snapshot 4
    # time column: Parquet timestamps and CSV text agree with the journal
    snaps = pd.read_parquet(ds / "data" / "snapshots.parquet")
    assert snaps["time_utc"].iloc[1] == j.read_snapshot(int(snaps["snapshot"].iloc[1])).time_utc
    assert from_csv["time_utc"].iloc[0] == "2026-12-01T22:15:00.000000Z"


def test_network_and_per_unit_values(exported: tuple[Path, Path]) -> None:
    """Per-unit bases, common practice (per-unit chapter of Grainger & Stevenson, from memory):
    V_base(L-N) = V_LL/sqrt 3, S_base per phase = S_3ph/3, I_base = S_3ph/(sqrt 3 V_LL).
    Bench: 400 V, 30 kVA, network 11 kV, power_scale 100 (invented, test_journal)."""
    _, ds = exported
    m = pd.read_parquet(ds / "data" / "measurements.parquet")
    m = m[m["quality"] == "ok"]

    def one(q: str, ph: str) -> pd.Series:
        return m[(m["quantity"] == q) & (m["phase"] == ph)].iloc[0]

    v = one("v_ln", "A")
    assert v["value_network"] == pytest.approx(v["value"] * 11000 / 400, rel=1e-12)
    assert v["value_pu"] == pytest.approx(v["value"] / (400 / math.sqrt(3)), rel=1e-12)
    vll = one("v_ll", "AB")
    assert vll["value_pu"] == pytest.approx(vll["value"] / 400, rel=1e-12)
    i = one("i", "B")
    assert i["value_network"] == pytest.approx(i["value"] * 100 / (11000 / 400), rel=1e-12)
    assert i["value_pu"] == pytest.approx(
        i["value"] / 43.30127018922193, rel=1e-12
    )  # 30000/(sqrt3*400)
    p = one("p", "T")
    assert p["value_network"] == pytest.approx(p["value"] * 100) and p["value_pu"] == pytest.approx(
        p["value"] / 30000
    )
    pa_ = one("p", "A")
    assert pa_["value_pu"] == pytest.approx(pa_["value"] / 10000)
    f = one("f", "T")
    assert (
        math.isnan(f["value_pu"])
        and f["value_network"] == f["value"]
        and f["iec61850"] == "MMXU.Hz.mag.f"
        and f["unit"] == "Hz"
    )
    # IEC 61850-7-4 MMXU: line-to-line voltages in the DEL object PPV, totals in Tot* [from memory]
    assert one("v_ll", "BC")["iec61850"] == "MMXU.PPV.phsBC.cVal.mag.f"
    assert one("q", "T")["unit"] == "var" and one("q", "T")["iec61850"] == "MMXU.TotVAr.mag.f"


def test_steps_checks_meters_events(exported: tuple[Path, Path]) -> None:
    journal_path, ds = exported
    d = load_dataset(ds)
    steps = d["steps"].set_index("id")
    assert steps.loc["S1", "state"] == "accepted" and steps.loc["S1", "settle_s"] == 1.25
    sw = d["step_switches"].set_index(["step", "switch"])
    assert sw.loc[("S1", "CB1"), "actual"] == "closed"
    assert sw.loc[("S2", "CB1"), "expected"] == "open"
    assert steps.loc["S2", "reason"] == "CT of M1 replaced after the test"
    conn = Journal.open(journal_path)._conn
    n_checks = conn.execute("SELECT count(*) FROM check_result").fetchone()[0]
    assert len(d["checks"]) == n_checks == 2 * 8
    fail = d["checks"][d["checks"]["status"] == "fail"].iloc[0]
    assert fail["residual"] == pytest.approx(abs(fail["value"]) / 10.0)
    assert (
        d["meters"]
        .set_index("id")
        .loc["M1", "sign_convention"]
        .startswith("positive P and Q = power flowing from bus B1")
    )
    assert d["meters"]["endpoint"].iloc[0] == "tcp://127.0.0.1:15001"
    topo = d["topology"]
    assert set(topo["element"]) == {"bus", "branch", "switch"} and (topo["id"] == "CB1").any()
    assert d["events"]["message"].tolist() == ["CB1 opened by hand"]
    assert (ds / "profile" / "profile.toml").read_text().startswith("# invented test bench")
    assert (ds / "profile" / "plover.sequence.toml").is_file()


def test_export_refuses_to_overwrite_and_replaces_with_flag(
    exported: tuple[Path, Path], tmp_path: Path
) -> None:
    journal_path, _ = exported
    out = export_session(journal_path, tmp_path / "out")
    marker = out / "note.txt"
    marker.write_text("mine")
    with pytest.raises(BenchwalkError, match="already exists.*--overwrite"):
        export_session(journal_path, out)
    assert marker.read_text() == "mine"
    export_session(journal_path, out, overwrite=True)
    assert not marker.exists() and (out / "datapackage.json").is_file()
    assert [p.name for p in tmp_path.iterdir()] == ["out"]  # no temporary folder left beside it


def test_export_says_when_it_moves_on_to_the_session_estimate(
    exported: tuple[Path, Path], tmp_path: Path
) -> None:
    """The estimate counts nothing and can take a while: the bar is told what it is doing."""
    journal_path, _ = exported
    calls: list[tuple[int, int, str]] = []

    def record(done: int, total: int, /, stage: str = "") -> None:
        calls.append((done, total, stage))

    export_session(journal_path, tmp_path / "out", progress=record)
    stages = [i for i, c in enumerate(calls) if c[2]]
    assert [calls[i] for i in stages] == [(0, 0, ESTIMATE_STAGE)]
    counted = [c for c in calls[: stages[0]] if not c[2]]
    assert counted and counted[-1][0] == counted[-1][1] > 0  # the readings were all counted first


CHILD = """
import resource, signal, sys
from pathlib import Path
from meas.dataset.export import ESTIMATE_STAGE, export_session
from meas.errors import BenchwalkError
signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
resource.setrlimit(resource.RLIMIT_FSIZE, (150_000, resource.RLIM_INFINITY))
try:
    export_session(Path({journal!r}), Path({out!r}))
except BenchwalkError as exc:
    print(exc, file=sys.stderr)
    sys.exit(2)
"""


def test_failed_export_leaves_no_partial_folder(tmp_path: Path) -> None:
    """RLIMIT_FSIZE is a real kernel limit (setrlimit(2)): writes past it fail with EFBIG."""
    journal = build_session(tmp_path, n_snapshots=60, n_meters=4)
    out = tmp_path / "exports" / "ds"
    out.parent.mkdir()
    proc = subprocess.run(
        [sys.executable, "-c", CHILD.format(journal=str(journal), out=str(out))],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert proc.returncode == 2, proc.stderr
    assert "File too large" in proc.stderr and "Traceback" not in proc.stderr
    assert list(out.parent.iterdir()) == []
    assert Journal.open(journal).snapshot_count() == 60  # journal untouched


def test_hive_collection_reads_as_one_table_in_duckdb(tmp_path: Path) -> None:
    a = export_session(build_session(tmp_path / "a", n_snapshots=6, name="20261201-100000-plover"))
    b = export_session(build_session(tmp_path / "b", n_snapshots=9, name="20261202-100000-plover"))
    coll = write_collection([a, b], tmp_path / "coll")
    files = sorted(
        p.relative_to(coll / "measurements").as_posix()
        for p in (coll / "measurements").rglob("*.parquet")
    )
    assert files == [
        "bench=plover-test-bench/session=20261201-100000-plover/part-0.parquet",
        "bench=plover-test-bench/session=20261202-100000-plover/part-0.parquet",
    ]
    # every table of the dataset has its own folder (the small tables too)
    assert {p.name for p in coll.iterdir()} == set(TABLES)
    steps = duckdb.sql(
        f"SELECT session, count(*) FROM read_parquet('{coll}/steps/**/*.parquet', hive_partitioning=true) GROUP BY ALL"
    ).fetchall()
    assert len(steps) == 2
    glob = str(coll / "measurements" / "**" / "*.parquet")
    rows = duckdb.sql(
        f"SELECT session, bench, count(*) n, sum(value) s FROM read_parquet('{glob}', hive_partitioning=true)"
        " GROUP BY ALL ORDER BY session"
    ).fetchall()
    direct = [pd.read_parquet(d / "data" / "measurements.parquet") for d in (a, b)]
    assert [(r[0], r[1], r[2]) for r in rows] == [
        ("20261201-100000-plover", "plover-test-bench", len(direct[0])),
        ("20261202-100000-plover", "plover-test-bench", len(direct[1])),
    ]
    assert rows[0][3] == pytest.approx(direct[0]["value"].sum(), rel=1e-12)
    # re-adding a session replaces its partition, it does not duplicate it
    write_collection([a], coll)
    n = duckdb.sql(
        f"SELECT count(*) FROM read_parquet('{glob}', hive_partitioning=true)"
    ).fetchall()[0][0]
    assert n == len(direct[0]) + len(direct[1])


def test_compare_checks_spots_a_difference(exported: tuple[Path, Path]) -> None:
    _, ds = exported
    checks = load_dataset(ds, tables=["checks"])["checks"]
    assert compare_checks(checks, checks.copy()) == []
    other = checks.copy()
    other.loc[other.index[0], "value"] = other["value"].iloc[0] + 1e-3
    diffs = compare_checks(checks, other)
    assert len(diffs) == 1 and "value" in diffs[0]
    assert "the dataset has" in compare_checks(checks, other.iloc[1:])[0]


# ---------------------------------------------------------------- damaged folders

FILES = ["datapackage.json", "profile/profile.toml", "profile/plover.sequence.toml"] + [
    f"data/{t}.{ext}" for t in TABLES for ext in ("csv", "parquet")
]


def _damage(folder: Path, rel: str, how: str, pos: float) -> None:
    p = folder / rel
    data = p.read_bytes()
    if how == "delete":
        p.unlink()
    elif how == "truncate":
        p.write_bytes(data[: int(len(data) * pos)])
    elif how == "flip":
        i = min(len(data) - 1, int(len(data) * pos))
        p.write_bytes(data[:i] + bytes([data[i] ^ 0x5A]) + data[i + 1 :])
    elif how == "garbage":
        p.write_bytes(b"\x00\xffnot what it should be" * 3)


@settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    rel=st.sampled_from(FILES),
    how=st.sampled_from(["delete", "truncate", "flip", "garbage"]),
    pos=st.floats(0.0, 0.999),
)
def test_damaged_dataset_gives_benchwalk_error(
    exported: tuple[Path, Path], tmp_path_factory, rel, how, pos
) -> None:
    _, ds = exported
    copy = tmp_path_factory.mktemp("damaged") / "ds"
    shutil.copytree(ds, copy)
    _damage(copy, rel, how, pos)
    try:
        got = load_dataset(copy)
    except BenchwalkError as err:
        msg = str(err)
        assert "\n" not in msg and str(copy) in msg
        return
    # only the descriptor is not covered by a hash: a harmless change there (a flipped letter in
    # a description, a dropped final newline) may load, but then every table must be intact
    assert rel == "datapackage.json", f"damage to {rel} ({how}) went unnoticed"
    original = load_dataset(ds)
    for name in TABLES:
        pd.testing.assert_frame_equal(got[name], original[name])


def test_not_a_dataset_and_cli_exit_codes(
    exported: tuple[Path, Path], tmp_path: Path, capsys
) -> None:
    with pytest.raises(BenchwalkError, match="no such dataset folder"):
        load_dataset(tmp_path / "nope")
    (tmp_path / "empty").mkdir()
    with pytest.raises(BenchwalkError, match="datapackage.json is missing"):
        load_dataset(tmp_path / "empty")
    _, ds = exported
    copy = tmp_path / "copy"
    shutil.copytree(ds, copy)
    (copy / "data" / "measurements.parquet").write_bytes(b"PAR1 nonsense")
    for cmd in (
        ["check", str(copy)],
        ["report", str(copy)],
        ["export", str(tmp_path / "missing.sqlite")],
    ):
        capsys.readouterr()
        assert cli.main(cmd) == 2
        err = capsys.readouterr().err
        assert (
            err.startswith(f"benchwalk {cmd[0]}: ")
            and err.count("\n") == 1
            and "Traceback" not in err
        )


def test_cli_export_in_a_real_process(exported: tuple[Path, Path], tmp_path: Path) -> None:
    journal, _ = exported
    out = tmp_path / "cli-ds"

    def run(*a):
        return subprocess.run(
            [sys.executable, "-m", "tui.cli", *a], capture_output=True, text=True, timeout=60
        )

    first = run("export", str(journal), "--out", str(out))
    assert first.returncode == 0, first.stderr
    assert f"dataset written: {out}" in first.stdout
    again = run("export", str(journal), "--out", str(out))
    assert (
        again.returncode == 2
        and "already exists" in again.stderr
        and "Traceback" not in again.stderr
    )
    assert pq.read_metadata(out / "data" / "measurements.parquet").num_rows == 12 * 3 * len(KEYS)
