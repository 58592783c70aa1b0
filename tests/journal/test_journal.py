"""The session journal against real SQLite: durability across SIGKILL, append-only triggers,
a real size limit (``PRAGMA max_page_count``) standing in for a full disk, and resume.

``make_bench`` (a small invented bench written as a real TOML file) and ``make_snapshot``
are shared with test_dataset.py, test_report.py and the benchmark; the data is invented
for the test, the checks are against SQLite's own behaviour.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from support.invented_bench import SEQUENCE_TOML, T0, make_bench, make_snapshot

from meas.errors import BenchwalkError
from meas.journal.errors import JournalWriteError
from meas.journal.sessions import new_session_id, resolve_session, session_path
from meas.journal.store import Journal
from meas.model import Profile
from meas.results import CheckResult, Status


@pytest.fixture()
def bench(tmp_path: Path) -> Profile:
    return make_bench(tmp_path / "profile")


def _meters(profile: Profile) -> list[str]:
    return [m.id for m in profile.meters]


def test_snapshots_round_trip_bit_exact(tmp_path: Path, bench: Profile) -> None:
    rng = np.random.default_rng(1)
    j = Journal.create(tmp_path / "s.sqlite", bench, operator="ana")
    snaps = [make_snapshot(i, _meters(bench), rng, bad="M2" if i == 3 else None) for i in range(6)]
    ids = [j.record_snapshot(s, step_id="S1", role="capture") for s in snaps]
    j.close()
    j = Journal.open(tmp_path / "s.sqlite")
    assert j.snapshot_ids() == ids
    for rid, s in zip(ids, snaps, strict=True):
        back = j.read_snapshot(rid)
        assert back.seq == s.seq and back.time_utc == s.time_utc and back.t_mono == s.t_mono
        assert dict(back.switches) == dict(s.switches)
        for m, block in s.meters.items():
            b = back.meters[m]
            assert dict(b.quality) == dict(block.quality)
            assert (
                b.state is block.state
                and b.error == block.error
                and b.error_count == block.error_count
            )
            for k, v in block.values.items():
                assert (math.isnan(v) and math.isnan(b.values[k])) or b.values[
                    k
                ] == v  # bit-exact doubles


def test_session_keeps_profile_text_and_hash(tmp_path: Path, bench: Profile) -> None:
    j = Journal.create(
        tmp_path / "s.sqlite",
        bench,
        operator="ana",
        meta={"site": "lab 2"},
    )
    assert j.profile_sha256 == bench.sha256
    files = j.profile_files()
    assert [n for n, _ in files] == ["plover.toml", "plover.sequence.toml"]
    assert j.profile_text == (tmp_path / "profile" / "plover.toml").read_text()
    assert files[1][1] == SEQUENCE_TOML
    # the stored text is byte for byte what was hashed: sha256 over profile then companion
    assert hashlib.sha256("".join(t for _, t in files).encode()).hexdigest() == j.profile_sha256
    j.close()
    (tmp_path / "profile" / "plover.toml").unlink()  # the session no longer needs the original
    j = Journal.open(tmp_path / "s.sqlite")
    assert j.profile_text.startswith("# invented test bench") and j.meta == {"site": "lab 2"}


def test_journal_stores_the_text_the_loader_validated(tmp_path: Path, bench: Profile) -> None:
    """The files are taken from the loader, not re-read: an edit on disk after loading (or a
    file gone) cannot slip unvalidated text, or a text that does not match the hash, into
    the session."""
    main = tmp_path / "profile" / "plover.toml"
    validated = main.read_text()
    main.write_text(validated.replace("plover", "edited after loading"))
    (tmp_path / "profile" / "plover.sequence.toml").unlink()
    j = Journal.create(tmp_path / "s.sqlite", bench, operator="ana")
    files = j.profile_files()
    assert files == [("plover.toml", validated), ("plover.sequence.toml", SEQUENCE_TOML)]
    assert hashlib.sha256("".join(t for _, t in files).encode()).hexdigest() == bench.sha256
    j.close()


def test_append_only_rejects_update_and_delete(tmp_path: Path, bench: Profile) -> None:
    j = Journal.create(tmp_path / "s.sqlite", bench, operator="ana")
    rid = j.record_snapshot(
        make_snapshot(0, _meters(bench), np.random.default_rng(2)), step_id="S1", role="capture"
    )
    j.record_checks(
        rid, "S1", [CheckResult("meter.p_sum", "M1", Status.FAIL, 12.0, 5.0, "W", "P sum off")]
    )
    j.record_event("note", "hello")
    j.record_step("S1", "accepted", outcome="pass", operator="ana")
    j.close()
    raw = sqlite3.connect(tmp_path / "s.sqlite")
    statements = [
        "UPDATE reading SET vals = x'00'",
        "DELETE FROM reading",
        "UPDATE snapshot SET role = 'live'",
        "DELETE FROM snapshot",
        "UPDATE check_result SET status = 'pass'",
        "DELETE FROM check_result",
        "UPDATE event SET message = 'x'",
        "DELETE FROM step_log",
        "UPDATE session SET profile_sha256 = 'x'",
        "DELETE FROM profile_file",
    ]
    for sql in statements:
        with pytest.raises(sqlite3.IntegrityError, match="append-only"):
            raw.execute(sql)
        raw.rollback()
    assert raw.execute("SELECT status FROM check_result").fetchone()[0] == "fail"
    assert raw.execute("SELECT count(*) FROM reading").fetchone()[0] == len(bench.meters)
    raw.close()


def test_disk_full_raises_journal_write_error_and_keeps_earlier_data(tmp_path: Path) -> None:
    """``PRAGMA max_page_count`` is SQLite's own size cap; hitting it gives SQLITE_FULL,
    the same "database or disk is full" error as a full drive (sqlite.org/pragma.html)."""
    profile = make_bench(tmp_path / "profile", n_meters=8)
    path = tmp_path / "s.sqlite"
    j = Journal.create(path, profile, operator="ana")
    rng = np.random.default_rng(3)
    saved = [
        j.record_snapshot(make_snapshot(i, _meters(profile), rng), step_id="S1", role="capture")
        for i in range(5)
    ]
    before = [j.read_snapshot(r) for r in saved]
    pages = j._conn.execute("PRAGMA page_count").fetchone()[0]
    j._conn.execute(f"PRAGMA max_page_count = {pages}")
    with pytest.raises(JournalWriteError, match=r"disk is full.*free space") as err:
        for i in range(5, 500):
            saved.append(
                j.record_snapshot(
                    make_snapshot(i, _meters(profile), rng), step_id="S1", role="capture"
                )
            )
    assert str(path) in str(err.value) and "\n" not in str(err.value)
    with pytest.raises(JournalWriteError):
        j.record_event("note", "x" * 100_000)
    j.close()
    j = Journal.open(path)
    assert j._conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    assert j.snapshot_ids() == saved  # every id returned is there, nothing half-written
    for rid, s in zip(saved[:5], before, strict=True):
        assert j.read_snapshot(rid) == s
    # with room again, recording continues in the same file
    j.record_snapshot(make_snapshot(999, _meters(profile), rng), step_id="S1", role="capture")
    assert j.snapshot_count() == len(saved) + 1


CHILD = """
import sys
from pathlib import Path
import numpy as np
sys.path.insert(0, {tests!r})
from support.invented_bench import make_bench, make_snapshot
from meas.journal.store import Journal
profile = make_bench(Path({folder!r}), n_meters=8)
j = Journal.create(Path({path!r}), profile, operator="ana")
rng = np.random.default_rng(4)
i = 0
while True:
    rid = j.record_snapshot(make_snapshot(i, [m.id for m in profile.meters], rng), step_id="S1", role="capture")
    print(rid, flush=True)
    i += 1
"""


def test_sigkill_mid_stream_loses_nothing_reported_saved(tmp_path: Path) -> None:
    path = tmp_path / "s.sqlite"
    code = CHILD.format(
        tests=str(Path(__file__).resolve().parents[1]),
        folder=str(tmp_path / "profile"),
        path=str(path),
    )
    child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    reported: list[int] = []
    deadline = time.monotonic() + 30.0
    try:
        while len(reported) < 60 and time.monotonic() < deadline:
            line = child.stdout.readline()
            if not line:
                break
            reported.append(int(line))
        child.send_signal(signal.SIGKILL)
    finally:
        child.wait(timeout=10)
    assert child.returncode == -signal.SIGKILL
    assert len(reported) >= 60, "child did not report enough saved snapshots"
    conn = sqlite3.connect(path)
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    ids = {r[0] for r in conn.execute("SELECT id FROM snapshot")}
    assert set(reported) <= ids
    # each saved snapshot is whole: one reading per meter
    counts = conn.execute("SELECT count(*) FROM reading GROUP BY snapshot").fetchall()
    assert {c[0] for c in counts} == {8}
    conn.close()


def test_resume_point_and_step_history(tmp_path: Path, bench: Profile) -> None:
    j = Journal.create(tmp_path / "s.sqlite", bench, operator="ana")
    assert j.resume_point() == "S1"
    j.record_step("S1", "settling", settle_s=None, expected_switches={"CB1": "closed"})
    j.record_step(
        "S1",
        "accepted",
        outcome="pass",
        operator="ana",
        settle_s=1.2,
        actual_switches={"CB1": "closed"},
    )
    assert j.resume_point() == "S2"
    j.record_step("S2", "failed", outcome="fail", operator="ana", reason="CB1 did not open")
    assert j.resume_point() == "S2"
    j.record_step("S2", "skipped", operator="ana", reason="breaker out for repair")
    assert j.resume_point() is None
    hist = Journal.open(tmp_path / "s.sqlite").step_history()
    assert [(h["step"], h["state"]) for h in hist] == [
        ("S1", "settling"),
        ("S1", "accepted"),
        ("S2", "failed"),
        ("S2", "skipped"),
    ]
    assert hist[1]["actual_switches"] == {"CB1": "closed"} and hist[1]["settle_s"] == 1.2
    assert hist[3]["reason"] == "breaker out for repair"


def test_session_files_resolve_and_refuse(
    tmp_path: Path, bench: Profile, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("BENCHWALK_SESSIONS", str(tmp_path / "sess"))
    sid = new_session_id(bench.bench.name, T0)
    assert sid == "20261201-221500-plover"
    path = session_path(sid)
    assert path == tmp_path / "sess" / "20261201-221500-plover.sqlite"
    Journal.create(path, bench, operator="ana", session_id=sid).close()
    assert resolve_session(sid) == path and resolve_session(str(path)) == path
    assert Journal.open(path).session_id == sid
    with pytest.raises(BenchwalkError, match="already exists"):
        Journal.create(path, bench, operator="ana")
    with pytest.raises(BenchwalkError, match="no session"):
        resolve_session("20260101-000000-nope")
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(os.urandom(4096))
    with pytest.raises(BenchwalkError, match="not a readable benchwalk journal"):
        Journal.open(junk)
    with pytest.raises(BenchwalkError, match="no session journal"):
        Journal.open(tmp_path / "missing.sqlite")


def test_events_and_checks_are_stored(tmp_path: Path, bench: Profile) -> None:
    j = Journal.create(tmp_path / "s.sqlite", bench, operator="ana")
    rid = j.record_snapshot(
        make_snapshot(0, _meters(bench), np.random.default_rng(5)), step_id=None, role="live"
    )
    res = [
        CheckResult("meter.p_sum", "M1", Status.PASS, 1.5, 10.0, "W"),
        CheckResult("bus.p_balance", "B1", Status.NA, message="no meters on B1"),
    ]
    j.record_checks(rid, None, res)
    eid = j.record_event(
        "operate", "CB1 open", step_id="S2", operator="ana", data={"switch": "CB1"}
    )
    rows = j._conn.execute(
        'SELECT "check", status, value, "limit" FROM check_result ORDER BY id'
    ).fetchall()
    assert [tuple(r) for r in rows] == [
        ("meter.p_sum", "pass", 1.5, 10.0),
        ("bus.p_balance", "n/a", None, None),
    ]
    ev = j._conn.execute("SELECT * FROM event WHERE id=?", (eid,)).fetchone()
    assert json.loads(ev["data"]) == {"switch": "CB1"} and ev["step"] == "S2"
    with pytest.raises(ValueError, match="role"):
        j.record_snapshot(
            make_snapshot(1, _meters(bench), np.random.default_rng(5)), step_id=None, role="bogus"
        )
