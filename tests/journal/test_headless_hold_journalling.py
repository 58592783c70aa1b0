"""Polling and journalling never pause for a prompt in headless mode (real processes).

``benchwalk sim`` serves the bench on free loopback ports; ``benchwalk run --headless`` walks a
sequence whose only step is a hold point, and nobody answers its prompt for
``HOLD_S`` seconds (60 s, as a technician reading a permit would take). While the prompt waits the
journal keeps one ``live`` snapshot per ``live_every_s`` (1 s, the documented rate while
waiting); then the hold is signed and the session ends.
"""

from __future__ import annotations

import os
import re
import sqlite3
import subprocess
import sys
import threading
import time
from datetime import datetime
from pathlib import Path

import pytest
from support.benches import write_bench

from meas.profile import load_profile

pytestmark = pytest.mark.long  # minutes: pytest -m long (DEVELOPERS.md)

ROOT = Path(__file__).resolve().parents[2]
HOLD_S = float(os.environ.get("BENCHWALK_HOLD_S", "60"))
HOLD_SEQUENCE = """
[[step]]
id = "permit"
title = "Hold for the permit"
kind = "hold"
instruction = "Wait for the switching permit, then sign."
"""
ENDPOINT = re.compile(r"^\s+(meter|plc)\s+(\S+)\s+tcp://127\.0\.0\.1:(\d+)")


def _served_profile(folder: Path, sim_out: list[str]) -> Path:
    """The profile again with every endpoint moved to the port the simulator chose."""
    src = write_bench(folder / "sim", sequence=HOLD_SEQUENCE)
    prof = load_profile(src)
    orig = {m.id: m.transport.port for m in prof.meters} | {
        p.id: p.transport.port for p in prof.plcs
    }
    moved = {}
    for line in sim_out:
        m = ENDPOINT.match(line)
        if m:
            moved[orig[m.group(2)]] = int(m.group(3))
    text = re.sub(
        r"port = (\d+)",
        lambda m: f"port = {moved.get(int(m.group(1)), m.group(1))}",
        src.read_text(),
    )
    dest = folder / "run"
    dest.mkdir()
    (dest / src.name).write_text(text)
    (dest / "feeder_bench.sequence.toml").write_text(HOLD_SEQUENCE)
    return dest / src.name


class _Tail:
    """Everything a process prints, gathered by a thread (a prompt has no newline to wait on)."""

    def __init__(self, proc: subprocess.Popen) -> None:
        self.text = ""
        self._proc = proc
        threading.Thread(target=self._pump, daemon=True).start()

    def _pump(self) -> None:
        assert self._proc.stdout is not None
        for ch in iter(lambda: self._proc.stdout.read(1), ""):  # type: ignore[union-attr]
            self.text += ch

    def wait_for(self, want: str, deadline_s: float) -> str:
        end = time.monotonic() + deadline_s
        while want not in self.text:
            if time.monotonic() > end or self._proc.poll() is not None and want not in self.text:
                raise AssertionError(f"never saw {want!r}: {self.text[-2000:]}")
            time.sleep(0.05)  # polling the gathered text with a deadline
        return self.text


@pytest.mark.slow
def test_a_hold_point_keeps_journalling_while_the_prompt_waits(tmp_path: Path) -> None:
    src = write_bench(tmp_path / "sim", sequence=HOLD_SEQUENCE)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    sim = subprocess.Popen(
        [sys.executable, "-m", "tui.cli", "sim", str(src), "--free-ports"],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
    )
    run = None
    try:
        served = _served_profile(tmp_path, _Tail(sim).wait_for("SIMULATION", 60).splitlines())
        sessions = tmp_path / "sessions"
        run = subprocess.Popen(
            [sys.executable, "-m", "tui.cli", "run", str(served), "--headless"]
            + [
                "--operator",
                "T. Tester",
                "--sessions",
                str(sessions),
                "--out",
                str(tmp_path / "o"),
            ],
            cwd=ROOT,
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            env=env,
        )
        out = _Tail(run)
        out.wait_for("sign NAME", 90)  # the hold point's prompt, unanswered from now on
        journal = next(sessions.glob("*.sqlite"))
        t_prompt = time.time()
        while time.time() - t_prompt < HOLD_S:
            assert run.poll() is None, run.stderr.read() if run.stderr else ""
            time.sleep(0.5)
        conn = sqlite3.connect(f"file:{journal}?mode=ro", uri=True)
        try:
            times = [
                datetime.fromisoformat(r[0].replace("Z", "+00:00")).timestamp()
                for r in conn.execute(
                    "SELECT time_utc FROM snapshot WHERE role = 'live' AND step = 'permit'"
                    " ORDER BY id"
                )
            ]
        finally:
            conn.close()
        assert run.stdin is not None
        run.stdin.write("sign T. Tester\n")
        run.stdin.close()
        code = run.wait(timeout=120)
        assert code == 0, run.stderr.read() if run.stderr else ""
    finally:
        for p in (run, sim):
            if p is not None and p.poll() is None:
                p.terminate()
                try:
                    p.wait(timeout=20)
                except subprocess.TimeoutExpired:
                    p.kill()
                    p.wait()
    # one live snapshot per second while the prompt waited (the documented rate), no gap
    assert len(times) >= 0.9 * HOLD_S, len(times)
    gaps = [b - a for a, b in zip(times, times[1:], strict=False)]
    assert max(gaps) < 2.5, max(gaps)
    print(f"hold of {HOLD_S:.0f} s: {len(times)} live snapshots, largest gap {max(gaps):.2f} s")
