"""SIGINT, SIGTERM and SIGHUP stop a headless walk resumably: the stop is journalled, the
session id and the exact resume command are printed, the exit code is 3, and the printed
command, run as printed, finishes the session with the same verdict as an uninterrupted run.

Real subprocesses of ``benchwalk`` on the fast demo bench (simulated bench over loopback).
"""

from __future__ import annotations

import re
import shlex
import signal
import subprocess
import sys
import threading
from pathlib import Path

import pytest
from support.benches import TEST_SEQUENCE, write_bench

from meas.journal.read import JournalView

ROOT = Path(__file__).resolve().parents[2]
RESUME = re.compile(r"continue with: (benchwalk resume .*)$")
VERDICT = re.compile(r"^Session \S+: ((PASS|FAIL|INCOMPLETE).*)$")


def _cli(args: list[str], **kw) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "tui.cli", *args],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
        **kw,
    )


def _run_until(proc: subprocess.Popen, marker: str, timeout_s: float = 60) -> list[str]:
    """Read the process's lines until one contains ``marker`` (the reader keeps draining)."""
    lines: list[str] = []
    seen = threading.Event()

    def read() -> None:
        assert proc.stdout is not None
        for line in proc.stdout:
            lines.append(line.rstrip("\n"))
            if marker in line:
                seen.set()
        seen.set()

    t = threading.Thread(target=read, daemon=True)
    t.start()
    assert seen.wait(timeout_s), f"{marker!r} not seen: {lines[-20:]}"
    proc._reader = t  # type: ignore[attr-defined]
    return lines


def _verdict(lines: list[str]) -> str:
    found = [m.group(1) for ln in lines if (m := VERDICT.match(ln))]
    assert found, lines[-15:]
    return found[-1]


@pytest.mark.slow
@pytest.mark.parametrize(
    "sig, marker",
    [
        (signal.SIGTERM, "[2/5]"),  # the remote step has begun
        (signal.SIGINT, "[2/5]"),
        (signal.SIGHUP, "[2/5]"),
        (signal.SIGTERM, "[1/5]"),  # the first capture step: settling or capturing
        (signal.SIGTERM, "[4/5]"),  # the manual step after the hold point
    ],
)
def test_a_stop_signal_exits_3_and_the_printed_resume_command_finishes(tmp_path, sig, marker):
    profile = write_bench(tmp_path / "bench", TEST_SEQUENCE)
    # reference: the same walk uninterrupted
    ref = subprocess.run(
        [sys.executable, "-m", "tui.cli", "demo", "--headless", "--seed", "9"]
        + [
            "--profile",
            str(profile),
            "--sessions",
            str(tmp_path / "ref"),
            "--out",
            str(tmp_path / "ref-out"),
        ],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=180,
    )
    ref_verdict = _verdict(ref.stdout.splitlines())

    sessions = tmp_path / "my sessions"  # a space: the printed command must quote it
    proc = _cli(
        [
            "demo",
            "--headless",
            "--seed",
            "9",
            "--profile",
            str(profile),
            "--sessions",
            str(sessions),
        ]
    )
    lines = _run_until(proc, marker)
    proc.send_signal(sig)
    assert proc.wait(30) == 3, lines[-20:]
    proc._reader.join(10)  # type: ignore[attr-defined]
    text = "\n".join(lines)
    assert f"interrupted by {sig.name}" in text
    cmds = [m.group(1) for ln in lines if (m := RESUME.search(ln))]
    assert len(cmds) == 1, lines[-10:]
    argv = shlex.split(cmds[0])
    assert argv[:2] == ["benchwalk", "resume"] and "--sessions" in argv
    assert argv[argv.index("--sessions") + 1] == str(sessions)
    (journal,) = sessions.glob("*.sqlite")
    jv = JournalView(journal)
    assert [e.kind for e in jv.events()][-1] == "stopped"
    jv.close()

    # the command as printed (``benchwalk`` is this checkout's ``python -m tui.cli``)
    done = subprocess.run(
        [sys.executable, "-m", "tui.cli", *argv[1:], "--out", str(tmp_path / "out")],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=180,
    )
    out = done.stdout.splitlines()
    assert done.returncode == ref.returncode, done.stdout[-3000:] + done.stderr[-2000:]
    assert "skipp" not in _verdict(out) and "refused" not in done.stdout
    assert _verdict(out) == ref_verdict


@pytest.mark.slow
def test_resuming_a_finished_session_offers_to_re_export_and_writes_nothing_silently(tmp_path):
    profile = write_bench(tmp_path / "bench", TEST_SEQUENCE)
    sessions = tmp_path / "s"
    first = subprocess.run(
        [sys.executable, "-m", "tui.cli", "demo", "--headless", "--seed", "9"]
        + ["--profile", str(profile), "--sessions", str(sessions), "--out", str(tmp_path / "a")],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=180,
    )
    verdict = _verdict(first.stdout.splitlines())
    (journal,) = sessions.glob("*.sqlite")
    base = [sys.executable, "-m", "tui.cli", "resume", journal.stem, "--headless"]
    base += ["--sessions", str(sessions), "--out", str(tmp_path / "b")]
    again = subprocess.run(
        base, cwd=ROOT, capture_output=True, text=True, timeout=60, stdin=subprocess.DEVNULL
    )
    assert again.returncode == first.returncode
    assert f"is already finished: {verdict}" in again.stdout
    assert "Nothing written" in again.stdout and "--reexport" in again.stdout
    assert not (tmp_path / "b").exists()
    redo = subprocess.run(
        [*base, "--reexport"], cwd=ROOT, capture_output=True, text=True, timeout=60
    )
    assert redo.returncode == first.returncode, redo.stdout + redo.stderr
    assert (tmp_path / "b" / "dataset" / "datapackage.json").is_file()
    assert (tmp_path / "b" / "report.html").read_text().count(verdict) >= 1
