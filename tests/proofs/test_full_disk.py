"""A really full disk: a small tmpfs (mount(8), tmpfs(5)) filled by the journal and by an export.

Runs only as root (mounting needs CAP_SYS_ADMIN); skipped with the reason otherwise. What it
proves: the write that does not fit stops the session with one JournalWriteError line (ENOSPC,
"database or disk is full", is SQLite's SQLITE_FULL), everything reported saved stays readable
(``PRAGMA integrity_check`` answers "ok", sqlite.org/pragma.html), recording goes on once space
is freed, and an export into a full disk leaves no partial dataset behind.
"""

from __future__ import annotations

import contextlib
import os
import re
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from support.benches import FAST_CAPTURE, write_bench  # noqa: E402
from support.invented_bench import make_bench, make_snapshot  # noqa: E402

from meas.dataset.export import export_session  # noqa: E402
from meas.dataset.read import verify_dataset  # noqa: E402
from meas.errors import BenchwalkError  # noqa: E402
from meas.journal.errors import JournalWriteError  # noqa: E402
from meas.journal.store import Journal  # noqa: E402
from tui import cli  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]


@contextlib.contextmanager
def tmpfs(folder: Path, size: str):
    if os.geteuid() != 0:
        pytest.skip(
            "mounting a tmpfs needs root; run the suite as root to prove full-disk handling"
        )
    folder.mkdir(parents=True, exist_ok=True)
    r = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(folder)],
        capture_output=True,
        text=True,
    )
    if r.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here ({r.stderr.strip() or r.returncode})")
    try:
        yield folder
    finally:
        subprocess.run(["umount", "-l", str(folder)], capture_output=True)


def remount(folder: Path, size: str) -> None:
    subprocess.run(
        ["mount", "-o", f"remount,size={size}", str(folder)], check=True, capture_output=True
    )


def fill(folder: Path, leave_bytes: int) -> Path:
    """A filler file that leaves about ``leave_bytes`` free on the file system."""
    filler = folder / "filler"
    st = os.statvfs(folder)
    free = st.f_bavail * st.f_frsize
    with open(filler, "wb") as f:
        f.write(b"\0" * max(0, free - leave_bytes))
    return filler


def test_journal_fills_the_disk_keeps_what_it_saved_and_goes_on_after_space_is_freed(tmp_path):
    profile = make_bench(tmp_path / "profile", n_meters=8)
    meters = [m.id for m in profile.meters]
    rng = np.random.default_rng(1)
    with tmpfs(tmp_path / "disk", "2m") as disk:
        path = disk / "s.sqlite"
        j = Journal.create(path, profile, operator="ana", session_id="s")
        fill(disk, 256 * 1024)
        saved: dict[int, object] = {}
        error = None
        for seq in range(100_000):
            snap = make_snapshot(seq, meters, rng)
            try:
                saved[j.record_snapshot(snap, step_id="S1", role="capture")] = snap
            except JournalWriteError as exc:
                error = exc
                break
        assert error is not None and len(saved) > 10
        msg = str(error)
        assert "\n" not in msg and str(path) in msg and "disk is full" in msg and "resume" in msg
        assert j.snapshot_count() == len(saved)  # the failed one left nothing behind
        j.close()

        with Journal.open(path) as again:
            assert again._conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
            assert again.snapshot_ids() == sorted(saved)
            for row in sorted(saved)[:: max(1, len(saved) // 25)] + [max(saved)]:
                got, want = again.read_snapshot(row), saved[row]
                assert got.seq == want.seq
                assert dict(got.meters[meters[0]].values) == dict(want.meters[meters[0]].values)

        (disk / "filler").unlink()  # space freed: the same session records again
        with Journal.open(path) as again:
            row = again.record_snapshot(
                make_snapshot(10**6, meters, rng), step_id="S1", role="capture"
            )
            assert row == max(saved) + 1 and again.snapshot_count() == len(saved) + 1


SEQUENCE = f"""
[[step]]
id = "radial"
title = "Radial base case"
kind = "capture"
instruction = "Capture."
expect = {{ CB1 = "closed", SW2 = "closed", SW3 = "closed", TIE = "open", RX = "open", LB2 = "closed" }}
{FAST_CAPTURE.replace("snapshots = 2", "snapshots = 30")}
gate = "allow"

[[step]]
id = "remark"
title = "Remark"
kind = "note"
instruction = "Write a remark."
"""


@pytest.mark.slow
def test_demo_on_a_full_disk_stops_with_one_line_and_resumes_after_space_is_freed(tmp_path):
    profile = write_bench(tmp_path / "bench", SEQUENCE)
    with tmpfs(tmp_path / "disk", "3m") as disk:
        sessions = disk / "sessions"
        sessions.mkdir()

        def run(*a):
            return subprocess.run(
                [sys.executable, "-m", "tui.cli", *a],
                capture_output=True,
                text=True,
                timeout=120,
                cwd=ROOT,
            )

        proc = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "tui.cli",
                "demo",
                "--headless",
                "--profile",
                str(profile),
                "--sessions",
                str(sessions),
                "--out",
                str(tmp_path / "out"),
                "--log-saved",
                "--seed",
                "2",
            ],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            cwd=ROOT,
        )
        out_lines: list[str] = []
        reader = threading.Thread(
            target=lambda: out_lines.extend(iter(proc.stdout.readline, "")), daemon=True
        )
        reader.start()
        deadline = time.monotonic() + 60
        while (
            sum("saved snapshot" in line for line in list(out_lines)) < 5
        ):  # recording is under way
            assert proc.poll() is None and time.monotonic() < deadline, out_lines[-5:]
            time.sleep(0.02)
        fill(disk, 0)  # the disk fills up under the running session
        try:
            err = proc.stderr.read()
            proc.wait(60)
        finally:
            if proc.poll() is None:
                proc.kill()
        reader.join(10)
        stdout = "".join(out_lines)
        assert proc.returncode == 2, stdout[-1500:] + err[-1500:]
        assert "Traceback" not in err
        lines = err.strip().splitlines()
        assert (
            len(lines) == 1
            and lines[0].startswith("benchwalk demo: ")
            and "disk is full" in lines[0]
        ), lines
        saved = [int(m.group(1)) for m in re.finditer(r"saved snapshot (\d+)", stdout)]
        assert len(saved) >= 5
        [journal] = sessions.glob("*.sqlite")
        conn = sqlite3.connect(f"file:{journal}?mode=ro", uri=True)
        try:
            assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        finally:
            conn.close()
        with Journal.open(journal) as j:
            assert set(saved) <= set(j.snapshot_ids())
            for row in saved[:: max(1, len(saved) // 20)]:
                assert j.read_snapshot(row).meters  # readable, with its meters

        (disk / "filler").unlink()
        remount(disk, "64m")
        second = run(
            "resume",
            journal.stem,
            "--headless",
            "--sessions",
            str(sessions),
            "--out",
            str(tmp_path / "out"),
        )
        assert second.returncode in (0, 1), second.stdout[-1500:] + second.stderr[-1500:]
        with Journal.open(journal) as j:
            assert j.resume_point() is None  # the sequence was completed after the resume
            assert set(saved) <= set(j.snapshot_ids())
        verify_dataset(tmp_path / "out" / "dataset")


def test_export_into_a_full_disk_is_one_line_and_leaves_nothing(tmp_path, capsys):
    from support.invented_bench import build_session

    journal = build_session(tmp_path / "j", n_snapshots=60, n_meters=6)
    with tmpfs(tmp_path / "disk", "2m") as disk:
        fill(disk, 16 * 1024)
        before = sorted(p.name for p in disk.iterdir())
        with pytest.raises(BenchwalkError) as info:
            export_session(journal, disk / "ds")
        msg = str(info.value)
        assert "\n" not in msg and "No space left on device" in msg and "journal is intact" in msg
        assert msg.startswith(str(disk))  # it names where the space ran out
        assert sorted(p.name for p in disk.iterdir()) == before  # no dataset, no .partial folder
        capsys.readouterr()
        assert cli.main(["export", str(journal), "--out", str(disk / "ds")]) == 2
        err = capsys.readouterr().err
        assert (
            err.count("\n") == 1 and err.startswith("benchwalk export: ") and "Traceback" not in err
        )
        assert sorted(p.name for p in disk.iterdir()) == before
        (disk / "filler").unlink()
        remount(disk, "64m")
        out = export_session(journal, disk / "ds")  # with space, the same export succeeds
        verify_dataset(out)
