"""The command line as scripts drive it: --json that parses, -q, no hard wrapping when piped,
shell completion that completes, collect and sessions, and console commands that check their
arguments and refuse without a terminal in one line instead of waiting for keys."""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from support.benches import write_bench
from support.invented_bench import build_session

from meas.dataset.export import export_session
from meas.dataset.schema import TABLES
from meas.verdict import VERDICT_WORDS

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "profiles_demo" / "feeder_bench.toml"


def bw(*args: str, cwd: Path = ROOT, timeout: float = 120.0, env: dict | None = None):
    return subprocess.run(
        [sys.executable, "-m", "tui.cli", *args],
        cwd=cwd,
        capture_output=True,
        text=True,
        timeout=timeout,
        stdin=subprocess.DEVNULL,
        env={**os.environ, "PYTHONPATH": str(ROOT), **(env or {})},
    )


@pytest.fixture(scope="module")
def dataset(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("ds")
    return export_session(build_session(folder, n_snapshots=12, name="20261201-100000-plover"))


def test_lint_json_clean_and_broken(tmp_path):
    r = bw("lint", str(DEMO), "--json")
    got = json.loads(r.stdout)
    assert r.returncode == 0 and got["ok"] and got["problems"] == []
    assert got["counts"]["meters"] == 8  # demo profile: M1..M8 (its file)
    bad = tmp_path / "bad.toml"
    bad.write_text(DEMO.read_text().replace('name = "Kestrel Hollow feeder bench"', "name = 3", 1))
    r = bw("lint", str(bad), "--json")
    got = json.loads(r.stdout)
    assert r.returncode == 2 and not got["ok"] and any("bench.name" in p for p in got["problems"])


def test_plan_json_totals_add_up():
    got = json.loads(bw("plan", str(DEMO), "--json").stdout)
    assert got["requests"] == sum(len(m["requests"]) for m in got["meters"])
    assert got["registers_read"] == sum(m["registers_read"] for m in got["meters"])
    # lumen-f32 needs two reads (its float64 block lies past max_gap; tests/proofs explains)
    assert len(next(m for m in got["meters"] if m["meter"] == "M1")["requests"]) == 2


def test_check_json_and_piped_fail_lines_are_whole(dataset):
    r = bw("check", str(dataset), "--json")
    got = json.loads(r.stdout)
    # the invented session's recorded checks are made by hand, so the re-check differs: both
    # facts are in the JSON
    assert got["results"] == sum(sum(c.values()) for c in got["counts"].values())
    assert got["reproduces"] is (got["differences"] == []) and got["reproduces"] is False
    assert r.returncode == (1 if got["failed"] else 0)
    # piped: every FAIL line holds its whole message on one line (no wrapping at 80 columns)
    text = bw("check", str(dataset)).stdout
    printed = [x for x in text.splitlines() if x.startswith("FAIL ")]
    wanted = [
        f"FAIL step {f['step']} {f['check']} {f['subject']}: {f['message']}" for f in got["failed"]
    ]
    assert printed == wanted
    assert max(len(x) for x in wanted) > 80  # longer than the old hard wrap


def test_quiet_prints_nothing_but_keeps_the_exit_code(tmp_path):
    r = bw("-q", "lint", str(DEMO))
    assert r.returncode == 0 and r.stdout == ""
    r = bw("lint", str(tmp_path / "nope.toml"), "-q")
    assert r.returncode == 2 and r.stdout == ""


def test_console_commands_refuse_without_a_terminal_and_check_arguments_first(tmp_path):
    cases = [
        (("demo",), "needs a terminal"),
        (("resume", "NOSUCH", "--sessions", str(tmp_path)), "no session 'NOSUCH'"),
        (("demo", "--fault", "bogus:M1"), "unknown kind 'bogus'"),
        (("demo", "--fault", "ct-reversed:M99:B"), "M99"),
        (("run", str(tmp_path / "none.toml")), "none.toml"),
    ]
    for args, words in cases:
        r = bw(*args, timeout=60)
        assert r.returncode == 2, (args, r.stderr)
        assert words in r.stderr and len(r.stderr.strip().splitlines()) == 1, (args, r.stderr)
        assert "Traceback" not in r.stderr


@pytest.mark.skipif(shutil.which("bash") is None, reason="no bash here")
def test_bash_completion_completes_commands_and_options():
    script = bw("completion", "bash").stdout

    def complete(*words: str) -> list[str]:
        line = " ".join(words)
        prog = (
            f"{script}\nCOMP_WORDS=({line}); COMP_CWORD={len(words) - 1}; _benchwalk; "
            'printf "%s\\n" "${COMPREPLY[@]}"'
        )
        out = subprocess.run(["bash", "-c", prog], capture_output=True, text=True, timeout=30)
        return out.stdout.split()

    assert complete("benchwalk", "li") == ["lint"]
    assert "collect" in complete("benchwalk", "co")
    assert "--json" in complete("benchwalk", "check", "--j")
    assert "--headless" in complete("benchwalk", "demo", "--h")


def test_zsh_completion_names_every_command():
    from tui.cli import COMMANDS

    script = bw("completion", "zsh").stdout
    assert script.startswith("#compdef benchwalk")
    for name in COMMANDS:
        if (ROOT / "tui" / "commands" / f"{name}.py").is_file():
            assert re.search(rf"\b{name}\b", script), name


def test_collect_and_sessions(dataset, tmp_path):
    r = bw("collect", str(dataset), "--out", str(tmp_path / "coll"), "--json")
    got = json.loads(r.stdout)
    assert r.returncode == 0 and set(got["tables"]) == set(TABLES)
    assert (tmp_path / "coll" / "steps").is_dir()
    sessions = dataset.parent  # the journal sits beside its dataset
    got = json.loads(bw("sessions", "--sessions", str(sessions), "--json").stdout)
    (s,) = got
    assert s["session"] == "20261201-100000-plover" and s["snapshots"] == 12
    assert s["state"] in ("finished", "stopped", "not started")
    assert s["steps_done"] <= s["steps_total"]


@pytest.mark.slow
def test_poll_json_lines_against_the_simulated_bench(tmp_path):
    server = subprocess.Popen(
        [sys.executable, str(ROOT / "tests" / "support" / "sim_bench_server.py"), str(DEMO)],
        cwd=ROOT,
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        text=True,
        env={**os.environ, "PYTHONPATH": f"{ROOT}{os.pathsep}{ROOT / 'tests'}"},
    )
    try:
        ports = json.loads(server.stdout.readline())["ports"]
        text = DEMO.read_text()
        for hostport, bound in ports.items():
            port = hostport.rsplit(":", 1)[1]
            text = text.replace(f"port = {port} ", f"port = {bound} ")
        profile = write_bench(tmp_path / "bench", edit=lambda _t: text)
        r = bw("poll", str(profile), "--cycles", "3", "--interval", "0.2", "--json", timeout=60)
        lines = [json.loads(x) for x in r.stdout.splitlines()]
        assert r.returncode == 0 and len(lines) == 3, r.stderr
        assert set(lines[-1]["meters"]) == {f"M{i}" for i in range(1, 9)}
        m1 = lines[-1]["meters"]["M1"]
        assert m1["state"] == "ok" and 200 < m1["values"]["v_ln.A"] < 260  # 400 V bench
    finally:
        server.stdin.write("quit\n")
        server.stdin.flush()
        server.wait(timeout=30)


@pytest.mark.slow
def test_headless_json_verdict_is_the_only_stdout_line(tmp_path):
    profile = write_bench(tmp_path / "bench")
    r = bw(
        "demo", "--headless", "--json", "--seed", "11", "--profile", str(profile),
        "--sessions", str(tmp_path / "s"), "--out", str(tmp_path / "out"), timeout=300,
    )  # fmt: skip
    lines = r.stdout.splitlines()
    assert len(lines) == 1, r.stdout[-2000:]
    v = json.loads(lines[0])
    assert v["verdict"] in VERDICT_WORDS and v["exit_code"] == r.returncode
    assert Path(v["dataset"]).is_dir() and v["steps"] and "Session" in r.stderr


def test_summary_command_writes_xlsx_and_refuses_other_names(dataset, tmp_path):
    from openpyxl import load_workbook

    r = bw("summary", str(dataset), "--out", str(tmp_path / "s.xlsx"))
    assert r.returncode == 0, r.stderr
    assert load_workbook(tmp_path / "s.xlsx").active.max_row > 1
    r = bw("summary", str(dataset), "--out", str(tmp_path / "s.ods"))
    assert r.returncode == 2 and ".xlsx or .csv" in r.stderr and "Traceback" not in r.stderr


@pytest.mark.slow
def test_scan_command_json_and_profile_skeleton(tmp_path):
    server = subprocess.Popen(
        [sys.executable, str(ROOT / "tests" / "support" / "sim_bench_server.py"), str(DEMO)],
        cwd=ROOT,
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        text=True,
        env={**os.environ, "PYTHONPATH": f"{ROOT}{os.pathsep}{ROOT / 'tests'}"},
    )
    try:
        gateway = json.loads(server.stdout.readline())["ports"]["127.0.0.1:15030"]
        skel = tmp_path / "new.toml"
        r = bw(
            "scan", f"tcp://127.0.0.1:{gateway}", "--units", "1-6", "--timeout", "0.3",
            "--json", "--write-profile", str(skel), timeout=60,
        )  # fmt: skip
        assert r.stdout.strip(), r.stderr
        got = json.loads(r.stdout)
        # demo profile: M2, M3 and M4 answer as unit ids 2, 3 and 4 behind port 15030
        assert r.returncode == 0 and [u["unit_id"] for u in got["units"]] == [2, 3, 4]
        assert all(u["identification"]["product_code"] == "BW-SIM" for u in got["units"])
        lint = bw("lint", str(skel), "--json")
        assert "register" in " ".join(json.loads(lint.stdout)["problems"])
        again = bw("scan", f"tcp://127.0.0.1:{gateway}", "--write-profile", str(skel))
        assert again.returncode == 2 and "already exists" in again.stderr
    finally:
        server.stdin.write("quit\n")
        server.stdin.flush()
        server.wait(timeout=30)
