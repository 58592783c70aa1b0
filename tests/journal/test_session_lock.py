"""One process at a time owns a session: two real processes, the real ``fcntl.flock``, the real
journal. The second ``resume`` is refused with who holds it (exit 2) and the journal is unchanged.
"""

from __future__ import annotations

import hashlib
import os
import socket
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest
from support.benches import write_fast_demo

from meas.journal.lock import SessionBusy, SessionLock, lock_path
from meas.journal.schema import DATA_TABLES
from meas.journal.store import Journal
from meas.session import Session

ROOT = Path(__file__).resolve().parents[2]


def _content(journal: Path) -> str:
    """Every row of every table, read only: equal text = unchanged journal."""
    conn = sqlite3.connect(f"file:{journal}?mode=ro", uri=True)
    try:
        h = hashlib.sha256()
        for t in DATA_TABLES:
            for row in conn.execute(f"SELECT * FROM {t}"):  # noqa: S608 - our own table names
                h.update(repr(tuple(row)).encode())
        return h.hexdigest()
    finally:
        conn.close()


def _wait_line(proc: subprocess.Popen, want: str, deadline_s: float) -> str:
    end = time.monotonic() + deadline_s
    assert proc.stdout is not None
    while time.monotonic() < end:
        line = proc.stdout.readline()
        if want in line:
            return line
        if not line and proc.poll() is not None:
            break
    raise AssertionError(f"holder never printed {want!r} (exit {proc.poll()})")


@pytest.fixture()
def stopped_demo(tmp_path: Path) -> tuple[Path, Path]:
    """A demo session started and stopped at its first step (a real journal on disk)."""
    import asyncio

    profile = write_fast_demo(tmp_path / "bench")
    sessions = tmp_path / "sessions"

    async def make() -> None:
        s = await Session.new(
            profile, "T", sessions_dir=sessions, session_id="held", simulate=True, seed=3
        )
        await s.close()

    asyncio.run(make())
    return sessions, sessions / "held.sqlite"


@pytest.mark.slow
def test_second_resume_is_refused_while_another_process_holds_the_session(stopped_demo):
    sessions, journal = stopped_demo
    holder_code = textwrap.dedent(
        f"""
        import asyncio, sys
        from meas.session import Session
        async def main():
            s = await Session.resume("held", sessions_dir=__import__("pathlib").Path({str(sessions)!r}))
            print("HOLDING", flush=True)
            await asyncio.get_running_loop().run_in_executor(None, sys.stdin.readline)
            await s.close()
            print("RELEASED", flush=True)
        asyncio.run(main())
        """
    )
    holder = subprocess.Popen(
        [sys.executable, "-c", holder_code],
        cwd=ROOT,
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
    )
    try:
        _wait_line(holder, "HOLDING", 60)
        before = _content(journal)
        second = subprocess.run(
            [sys.executable, "-m", "tui.cli", "resume", "held", "--headless"]
            + ["--sessions", str(sessions)],
            cwd=ROOT,
            capture_output=True,
            text=True,
            timeout=120,
        )
        assert second.returncode == 2, second.stderr
        err = second.stderr.strip().splitlines()
        assert len(err) == 1 and "Traceback" not in second.stderr
        assert f"pid {holder.pid}" in err[0] and socket.gethostname() in err[0]
        assert "since 20" in err[0] and "held" in err[0]
        assert _content(journal) == before  # the refused resume wrote nothing
        # the holder lets go: the session can be taken again
        assert holder.stdin is not None
        holder.stdin.write("\n")
        holder.stdin.flush()
        _wait_line(holder, "RELEASED", 60)
        holder.wait(timeout=30)
        with Journal.open(journal, for_writing=True) as j:
            assert j.session_id == "held"
    finally:
        if holder.poll() is None:
            holder.kill()
            holder.wait()


def test_a_killed_holder_leaves_no_stale_lock(tmp_path: Path) -> None:
    """The kernel releases a flock when its process dies, however it dies (SIGKILL here)."""
    journal = tmp_path / "s.sqlite"
    journal.write_bytes(b"")
    code = (
        "import sys,time; from meas.journal.lock import SessionLock; "
        f"SessionLock(__import__('pathlib').Path({str(journal)!r})).acquire(); "
        "print('HOLDING', flush=True); time.sleep(600)"
    )
    p = subprocess.Popen(
        [sys.executable, "-c", code],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        text=True,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
    )
    try:
        _wait_line(p, "HOLDING", 30)
        with pytest.raises(SessionBusy, match=f"pid {p.pid}"):
            SessionLock(journal).acquire()
        p.kill()
        p.wait(timeout=30)
        lock = SessionLock(journal).acquire()  # taken at once after the kill
        assert lock.held and lock_path(journal).exists()
        lock.release()
    finally:
        if p.poll() is None:
            p.kill()
            p.wait()


def test_same_process_cannot_open_a_session_twice_for_writing(tmp_path: Path) -> None:
    """flock locks belong to the open file description: a second open in one process is refused too."""
    from support.invented_bench import make_bench

    profile = make_bench(tmp_path / "p")
    j = Journal.create(tmp_path / "s.sqlite", profile, operator="ana")
    try:
        with pytest.raises(SessionBusy, match=f"pid {os.getpid()}"):
            Journal.open(tmp_path / "s.sqlite", for_writing=True)
        with Journal.open(tmp_path / "s.sqlite") as reader:  # export's read is not a writer
            assert reader.session_id == "s"
    finally:
        j.close()
    with Journal.open(tmp_path / "s.sqlite", for_writing=True) as again:
        assert again.session_id == "s"


async def test_sessions_started_in_the_same_second_get_distinct_ids(tmp_path: Path) -> None:
    from support.invented_bench import make_bench

    profile_path = make_bench(tmp_path / "p").path
    sessions = tmp_path / "sessions"
    made = []
    try:
        for _ in range(3):
            s = await Session.new(profile_path, "T", sessions_dir=sessions)
            made.append(s)
        ids = [s.session_id for s in made]
        assert len(set(ids)) == 3
        assert all(s.path.is_file() for s in made)
    finally:
        for s in made:
            await s.close()
