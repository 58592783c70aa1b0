"""Headless runs end to end: the ``benchwalk`` command in a subprocess, the simulated bench on
loopback Modbus, the real journal, dataset and report; and resume in process."""

from __future__ import annotations

import asyncio
import io
import os
import re
import subprocess
import sys
import time
from pathlib import Path

import frictionless
import pytest
from support.benches import write_bench, write_fast_demo

from meas.errors import BenchwalkError
from meas.journal.store import Journal
from meas.session import Session
from meas.walk.sequence import configuration_before

ROOT = Path(__file__).resolve().parents[2]


def benchwalk(*args: str, stdin: str | None = None, timeout: float = 120.0, env=None):
    return subprocess.run(
        [sys.executable, "-m", "tui.cli", *args],
        input=stdin,
        capture_output=True,
        text=True,
        timeout=timeout,
        cwd=ROOT,
        env={**os.environ, **(env or {})},
    )


def datapackage_valid(folder: Path) -> bool:
    report = frictionless.validate(str(folder / "datapackage.json"))
    return bool(report.valid)


@pytest.fixture(scope="module", autouse=True)
def demo_runs(tmp_path_factory):
    """Both demo runs start at once (each mostly waits on the bench's timing, not the CPU)."""
    base = tmp_path_factory.mktemp("demo")
    profile = write_fast_demo(base / "bench")
    runs = {}
    for name, extra in (
        ("clean", ["--seed", "11"]),
        ("ct", ["--seed", "5", "--fault", "ct-reversed:M2:B"]),
    ):
        folder = base / name
        cmd = [
            sys.executable,
            "-m",
            "tui.cli",
            "demo",
            "--headless",
            "--out",
            str(folder / "out"),
            "--profile",
            str(profile),
            "--sessions",
            str(folder / "sessions"),
            *extra,
        ]
        runs[name] = (
            folder,
            subprocess.Popen(
                cmd, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
            ),
        )
    yield runs
    for _, proc in runs.values():
        if proc.poll() is None:
            proc.kill()
            proc.wait()


def finished(runs, name: str):
    folder, proc = runs[name]
    out, err = proc.communicate(timeout=180)
    return folder, proc.returncode, out, err


@pytest.mark.slow
def test_bad_profile_is_one_line_and_exit_2(tmp_path):
    r = benchwalk("run", str(tmp_path / "nope.toml"), "--headless", "--operator", "T")
    assert r.returncode == 2
    assert "Traceback" not in r.stderr and len(r.stderr.strip().splitlines()) == 1
    r = benchwalk(
        "demo", "--headless", "--fault", "ct-reversed:M99:B", "--sessions", str(tmp_path / "s")
    )
    assert r.returncode == 2 and "M99" in r.stderr and "Traceback" not in r.stderr


async def _walk(session: Session, steps: int) -> None:
    """The simulated technician walks ``steps`` steps, then the session is stopped."""
    from tui.commands.technicians import SimTechnician

    tech = SimTechnician(session, out=io.StringIO())
    r = session.runner
    start = r.index
    async for view in session.views():
        if r.index >= start + steps:
            break
        if view.polled:
            await tech.act(r, view)
    r.stop("stopped by the test")


@pytest.mark.slow
async def test_resume_continues_at_the_right_step_and_refuses_a_changed_profile(tmp_path):
    profile = write_fast_demo(tmp_path / "bench")
    sessions = tmp_path / "sessions"
    s = await Session.new(
        profile, "T. Tester", sessions_dir=sessions, session_id="resume-me", simulate=True, seed=3
    )
    try:
        await _walk(s, 3)
        stopped_at = s.runner.step.id
    finally:
        await s.close()
    ids = [st.id for st in s.profile.steps]
    assert stopped_at == ids[3]

    s2 = await Session.resume("resume-me", sessions_dir=sessions)
    try:
        assert s2.runner.step.id == stopped_at and s2.runner.index == 3
        # the new simulated bench is brought to where the sequence had left the old one
        want = configuration_before(s2.profile, 3)
        deadline = time.monotonic() + 5.0
        while s2.bench.switch_states() != want and time.monotonic() < deadline:
            await asyncio.sleep(0.05)
        assert s2.bench.switch_states() == want
        await _walk(s2, 2)  # it goes on from there: two more steps, then stop again
        assert s2.runner.step.id == ids[5]
    finally:
        await s2.close()
    with Journal.open(sessions / "resume-me.sqlite") as j:
        assert j.resume_point() == ids[5]
        accepted = [h["step"] for h in j.step_history() if h["state"] == "accepted"]
        assert accepted == ids[:5]  # each step done exactly once, in order

    # change the profile: resume is refused without the flag, allowed and journalled with it
    text = profile.read_text()
    profile.write_text(text + "\n# edited after the session started\n")
    with pytest.raises(
        BenchwalkError, match="changed since session resume-me started.*--allow-changed-profile"
    ):
        await Session.resume("resume-me", sessions_dir=sessions)
    s3 = await Session.resume("resume-me", sessions_dir=sessions, allow_changed_profile=True)
    try:
        assert s3.runner.step.id == ids[5]
        kinds = [e[0] for e in s3.journal._conn.execute("SELECT kind FROM event ORDER BY id")]
        assert "profile_changed" in kinds
    finally:
        await s3.close()


SERVE = """
import asyncio, sys
from meas.profile import load_profile
from meas.sim.bench import SimulatedBench

async def main():
    bench = SimulatedBench(load_profile(sys.argv[1]), port_map=None, seed=1)
    await bench.start()
    print("serving", flush=True)
    await asyncio.Event().wait()

asyncio.run(main())
"""


@pytest.mark.slow
def test_run_headless_prompts_on_stdin_and_eof_stops_resumably(tmp_path):
    """``benchwalk run`` against "real" meters: a simulated bench served from a helper process
    on the profile's own (free) ports; the technician's answers come on standard input."""
    from meas.sim.ports import free_port

    def own_ports(text: str) -> str:
        for port in sorted(set(re.findall(r"port = (\d+)", text))):
            text = text.replace(f"port = {port}", f"port = {free_port()}")
        return text

    profile = write_bench(tmp_path / "bench", edit=own_ports)
    server = subprocess.Popen(
        [sys.executable, "-c", SERVE, str(profile)],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    try:
        line = server.stdout.readline()
        assert line, "simulated bench did not start"
        # step 1 (capture): capture, accept; then stdin ends at the remote step
        r = benchwalk(
            "run",
            str(profile),
            "--headless",
            "--operator",
            "R. Field",
            "--sessions",
            str(tmp_path / "sessions"),
            stdin="capture\naccept\n",
        )
    finally:
        server.terminate()
        server.wait(timeout=10)
    assert r.returncode == 3, r.stdout[-3000:] + r.stderr[-2000:]
    assert "benchwalk resume" in r.stdout
    (journal_path,) = (tmp_path / "sessions").glob("*.sqlite")
    with Journal.open(journal_path) as j:
        assert j.resume_point() == "rx-in"
        assert j.operator == "R. Field"


# the demo runs started with the module (autouse fixture); their checks come last


@pytest.mark.slow
def test_demo_headless_clean_exits_0_and_exports(demo_runs):
    folder, code, stdout, stderr = finished(demo_runs, "clean")
    assert code == 0, stdout[-3000:] + stderr[-3000:]
    assert (
        "qualified persons only" in stdout
        and "lockout/tagout" in stdout
        and "no interlock" in stdout
    )
    assert "PASS" in stdout and "Failing checks" not in stdout
    out = folder / "out"
    assert datapackage_valid(out / "dataset")
    assert (out / "report.html").is_file() and (out / "report.md").is_file()
    assert "Dataset written to" in stdout
    (journal_path,) = (folder / "sessions").glob("*.sqlite")
    with Journal.open(journal_path) as j:
        assert j.resume_point() is None
        done = {h["step"] for h in j.step_history() if h["state"] == "accepted"}
        assert done == set(j.step_ids())  # every step of the demo accepted
        assert j.meta["simulated"] is True and j.meta["seed"] == 11
    # the dataset alone reproduces its checks table (benchwalk check), and they all passed
    recheck = benchwalk("check", str(out / "dataset"))
    assert recheck.returncode == 0, recheck.stdout[-3000:] + recheck.stderr[-2000:]
    assert_recheck_identical(out / "dataset")


def assert_recheck_identical(dataset: Path) -> None:
    from meas.dataset.read import load_dataset
    from meas.recheck import compare_checks, recheck

    exported = load_dataset(dataset, tables=["checks"])["checks"]
    assert len(exported) > 0
    assert compare_checks(exported, recheck(dataset)) == []


@pytest.mark.slow
def test_demo_headless_reversed_ct_exits_1_naming_m2_phase_b(demo_runs):
    folder, code, stdout, stderr = finished(demo_runs, "ct")
    assert code == 1, stdout[-3000:] + stderr[-3000:]
    table = stdout.split("Failing checks:", 1)[1]
    m2_rows = [line for line in table.splitlines() if re.search(r"\bM2\b", line)]
    assert m2_rows, table[:2000]
    assert any(re.search(r"(phase B|:B\b)", line) for line in m2_rows), m2_rows[:5]
    assert datapackage_valid(folder / "out" / "dataset")  # the dataset is written anyway
    assert benchwalk("check", str(folder / "out" / "dataset")).returncode == 1  # fails offline too
    assert_recheck_identical(folder / "out" / "dataset")
