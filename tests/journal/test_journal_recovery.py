"""Copying and recovering journals, on real files and a real SIGKILL.

After a crash the newest commits live only in the ``-wal`` file; once the session stops (a
writer closes the journal) or is exported, the ``.sqlite`` file alone holds every saved row.
A journal with a bad region is exported as far as it is readable, with the damage listed,
and the damaged file is left as it was.
"""

from __future__ import annotations

import os
import shutil
import signal
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
from support.invented_bench import build_session

from meas.dataset.export import export_session
from meas.dataset.read import load_dataset, read_package, verify_dataset
from meas.errors import BenchwalkError
from meas.journal.errors import JournalDamaged
from meas.journal.store import Journal

ROOT = Path(__file__).resolve().parents[2]

WRITER = """
import os, signal, sys
import numpy as np
from pathlib import Path
sys.path.insert(0, "tests")
from support.invented_bench import make_bench, make_snapshot
from meas.journal.store import Journal
folder = Path(sys.argv[1])
profile = make_bench(folder / "profile")
j = Journal.create(folder / "s.sqlite", profile, operator="ana", session_id="s")
rng = np.random.default_rng(1)
for i in range(int(sys.argv[2])):
    j.record_snapshot(make_snapshot(i, [m.id for m in profile.meters], rng), step_id="S1", role="capture")
print("SAVED", flush=True)
os.kill(os.getpid(), signal.SIGKILL)  # a crash: no close, no checkpoint
"""


def _rows_in_copy_alone(journal: Path, tmp: Path) -> int:
    """Copy only the .sqlite file (as a careless backup would) and count its snapshots."""
    tmp.mkdir(exist_ok=True)
    copy = tmp / "copy.sqlite"
    for suffix in ("", "-wal", "-shm"):
        Path(str(copy) + suffix).unlink(missing_ok=True)
    shutil.copyfile(journal, copy)
    conn = sqlite3.connect(copy)
    try:
        return int(conn.execute("SELECT count(*) FROM snapshot").fetchone()[0])
    except sqlite3.OperationalError:  # even the schema was still only in the WAL
        return 0
    finally:
        conn.close()


def _killed_session(folder: Path, n: int) -> Path:
    child = subprocess.run(
        [sys.executable, "-c", WRITER, str(folder), str(n)],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=120,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
    )
    assert child.returncode == -signal.SIGKILL and "SAVED" in child.stdout, child.stderr
    journal = folder / "s.sqlite"
    assert Path(str(journal) + "-wal").stat().st_size > 0  # the newest rows are in the WAL
    return journal


@pytest.mark.parametrize("then", ["stop", "export"])
def test_after_a_stop_or_an_export_the_sqlite_file_alone_holds_every_saved_row(tmp_path, then):
    n = 40
    journal = _killed_session(tmp_path, n)
    before = _rows_in_copy_alone(journal, tmp_path / "c1")
    print(f"copy of the .sqlite alone right after the kill: {before} of {n} snapshots")
    if then == "stop":
        Journal.open(journal, for_writing=True).close()  # what a resumed session does when it stops
    else:
        export_session(journal, tmp_path / "ds")
    assert _rows_in_copy_alone(journal, tmp_path / "c2") == n


def _damage(journal: Path) -> bytes:
    """Overwrite one page in the middle of the file with garbage; returns the damaged bytes."""
    conn = sqlite3.connect(journal)
    size = conn.execute("PRAGMA page_size").fetchone()[0]
    pages = conn.execute("PRAGMA page_count").fetchone()[0]
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    data = bytearray(journal.read_bytes())
    page = pages // 2
    data[(page - 1) * size : page * size] = bytes(range(256)) * (size // 256)
    journal.write_bytes(bytes(data))
    return bytes(data)


def test_a_damaged_journal_exports_what_is_readable_with_the_damage_listed(tmp_path, capsys):
    journal = build_session(tmp_path, n_snapshots=300, n_meters=3)
    with Journal.open(journal) as j:
        total = j.snapshot_count()
    damaged = _damage(journal)
    with pytest.raises(JournalDamaged, match="export"):
        Journal.open(journal, for_writing=True)  # resume is refused: never write into damage
    from tui import cli

    capsys.readouterr()
    assert cli.main(["export", str(journal), "--out", str(tmp_path / "ds")]) == 0
    out = capsys.readouterr().out
    assert "damaged journal:" in out and "unreadable, left out" in out
    assert journal.read_bytes() == damaged  # the damaged file is left exactly as it was
    pkg = verify_dataset(tmp_path / "ds")
    damage = pkg["benchwalk"]["journal_damage"]
    assert damage[0].startswith(str(journal)) and any("unreadable" in d for d in damage[1:])
    ds = load_dataset(tmp_path / "ds")
    assert 0 < ds["measurements"]["snapshot"].nunique() <= total
    assert read_package(tmp_path / "ds")["benchwalk"]["session"] == "s"


def test_a_journal_with_no_readable_session_is_one_line(tmp_path):
    journal = build_session(tmp_path, n_snapshots=3, n_meters=2)
    data = bytearray(journal.read_bytes())
    data[100:4096] = b"\xff" * (4096 - 100)  # the first page: schema and the session table
    journal.write_bytes(bytes(data))
    with pytest.raises(BenchwalkError) as err:
        export_session(journal, tmp_path / "ds")
    assert "\n" not in str(err.value) and not (tmp_path / "ds").exists()
