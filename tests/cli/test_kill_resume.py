"""Kill a headless demo run with SIGKILL at random moments; nothing reported saved may be lost.

The run prints ``saved snapshot <row> ...`` after each journal write returns (``--log-saved``).
After every kill the journal must hold every row the process reported, ``resume`` must pick
up, and the final resume must complete the sequence with an export that validates.
5 kills by default, 20 with BENCHWALK_LONG=1. The random moments come from a seeded
generator printed on failure, so a failing run can be repeated.
"""

from __future__ import annotations

import os
import random
import re
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import frictionless
import pytest
from support.benches import TEST_SEQUENCE, write_bench

from meas.journal.store import Journal

ROOT = Path(__file__).resolve().parents[2]
KILLS = 20 if os.environ.get("BENCHWALK_LONG") == "1" else 5
SAVED = re.compile(r"^saved snapshot (\d+) ")


def start(args: list[str]) -> tuple[subprocess.Popen, list[int], threading.Event, threading.Thread]:
    proc = subprocess.Popen(
        [sys.executable, "-m", "tui.cli", *args],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    rows: list[int] = []
    first = threading.Event()
    lines: list[str] = []

    def read() -> None:
        for line in proc.stdout:  # only complete lines reach here
            lines.append(line)
            m = SAVED.match(line)
            if m:
                rows.append(int(m.group(1)))
                first.set()
        first.set()

    reader = threading.Thread(target=read, daemon=True)
    reader.start()
    proc.lines = lines  # type: ignore[attr-defined]
    return proc, rows, first, reader


@pytest.mark.slow
def test_sigkill_at_random_moments_loses_nothing_and_resume_completes(tmp_path):
    seed = random.randrange(2**32)
    rng = random.Random(seed)
    # a short sequence of every step kind keeps each walk quick
    profile = write_bench(tmp_path / "bench", TEST_SEQUENCE)
    kills, sessions_used, runs = 0, 0, 0
    while kills < KILLS:
        # one session: start, kill, resume, kill, ... until enough kills or it completes
        sessions_used += 1
        sessions = tmp_path / f"sessions{sessions_used}"
        common = ["--sessions", str(sessions), "--log-saved"]
        args = ["demo", "--headless", "--seed", "9", "--profile", str(profile), *common]
        reported: set[int] = set()
        journal_path: Path | None = None
        finished = False
        while kills < KILLS and not finished:
            proc, rows, first, reader = start(args)
            assert first.wait(60), f"no snapshot saved (seed {seed})"
            time.sleep(
                rng.uniform(0.0, 1.5)
            )  # the random moment of the kill, not a synchronization
            killed = proc.poll() is None
            if killed:
                proc.send_signal(signal.SIGKILL)
                kills += 1
            proc.wait(30)
            reader.join(10)  # the reader drains what the pipe still holds, up to EOF
            assert not reader.is_alive()
            runs += 1
            assert runs <= 4 * KILLS, f"too many runs without reaching {KILLS} kills (seed {seed})"
            if not killed:  # it ended by itself: it must have completed the sequence
                assert proc.returncode == 0, "".join(proc.lines[-30:]) + f" (seed {seed})"
            reported.update(rows)
            if journal_path is None:
                (journal_path,) = sessions.glob("*.sqlite")
            with Journal.open(journal_path) as j:
                stored = set(j.snapshot_ids())
                assert reported <= stored, (
                    f"lost rows {sorted(reported - stored)[:10]} (seed {seed})"
                )
                finished = j.resume_point() is None
            args = ["resume", str(journal_path), "--headless", *common]
    print(
        f"seed {seed}: {kills} kills over {sessions_used} session(s); "
        f"{len(reported)} snapshots reported saved in the last, all in the journal"
    )

    out = tmp_path / "out"
    final = subprocess.run(
        [
            sys.executable,
            "-m",
            "tui.cli",
            "resume",
            str(journal_path),
            "--headless",
            "--out",
            str(out),
            "--sessions",
            str(sessions),
        ],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=180,
    )
    assert final.returncode == 0, final.stdout[-3000:] + final.stderr[-2000:] + f" (seed {seed})"
    with Journal.open(journal_path) as j:
        assert j.resume_point() is None
        assert reported <= set(j.snapshot_ids())
        accepted = [h["step"] for h in j.step_history() if h["state"] == "accepted"]
        assert sorted(set(accepted)) == sorted(j.step_ids())
    report = frictionless.validate(str(out / "dataset" / "datapackage.json"))
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])[:10]
