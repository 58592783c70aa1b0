"""Security proofs: nothing writes to the plant unless allowed, the simulator stays on loopback,
a profile is only data, and exports never clobber a dataset or trip over a killed export.

Writes are observed from outside the code under test: ``write_recorder.WriteRecorder`` sits on
the socket between the poller and the simulated bench and parses every MBAP frame (Modbus
Messaging on TCP/IP Implementation Guide V1.0b), and the bench's pymodbus servers report every
write PDU they receive. Function codes that change a device are from the Modbus Application
Protocol Specification V1.1b3 section 6 (5, 6, 15, 16, 22, 23).
"""

from __future__ import annotations

import ast
import asyncio
import dataclasses
import json
import os
import re
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import psutil
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pymodbus.pdu.bit_message import WriteMultipleCoilsRequest, WriteSingleCoilRequest
from pymodbus.pdu.register_message import (
    MaskWriteRegisterRequest,
    ReadWriteMultipleRegistersRequest,
    WriteMultipleRegistersRequest,
    WriteSingleRegisterRequest,
)
from support.benches import FAST_CAPTURE, write_bench  # noqa: E402
from support.write_recorder import WRITE_FC, parse_pdu, recording_profile  # noqa: E402

from meas.dataset.export import export_session, remove_stale_exports  # noqa: E402
from meas.dataset.read import verify_dataset  # noqa: E402
from meas.errors import BenchwalkError, ProfileError  # noqa: E402
from meas.journal.store import Journal  # noqa: E402
from meas.model import SWITCH_STATES  # noqa: E402
from meas.poll.control import ControlRefused, SwitchControl  # noqa: E402
from meas.poll.cycle import Poller  # noqa: E402
from meas.profile import check_profile, load_profile  # noqa: E402
from meas.sim.bench import WRITE_LOG_ENV, SimulatedBench  # noqa: E402
from meas.sim.faults import parse_fault  # noqa: E402
from tui import cli  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "profiles_demo" / "feeder_bench.toml"


def quick_switches(text: str) -> str:
    """The fast demo bench with quick switch mechanisms, so many commands fit in a test."""
    text = re.sub(r"operate_time_s = [0-9.]+", "operate_time_s = 0.02", text)
    return text.replace("verify_timeout_s = 3.0", "verify_timeout_s = 1.0", 1)


def remote_coils(profile) -> dict[str, int]:
    return {
        s.id: s.command_coil
        for s in profile.switches
        if s.operation == "remote" and s.command_coil is not None
    }


# ---------------------------------------------------------------- the recorder itself


def test_recorder_decodes_what_pymodbus_encodes():
    """Our wire parser against pymodbus's own request encoders, one per writing function code."""
    cases = [
        (WriteSingleCoilRequest(address=4, bits=[True]), 5, 4, (1,)),
        (WriteSingleCoilRequest(address=7, bits=[False]), 5, 7, (0,)),
        (WriteSingleRegisterRequest(address=9, registers=[513]), 6, 9, (513,)),
        (WriteMultipleCoilsRequest(address=3, bits=[True, False, True]), 15, 3, (1, 0, 1)),
        (WriteMultipleRegistersRequest(address=100, registers=[1, 65535]), 16, 100, (1, 65535)),
        (
            MaskWriteRegisterRequest(address=5, and_mask=0x00F2, or_mask=0x0025),
            22,
            5,
            (0x00F2, 0x0025),
        ),
        (
            ReadWriteMultipleRegistersRequest(
                read_address=1, read_count=2, write_address=30, write_registers=[7, 8]
            ),
            23,
            30,
            (7, 8),
        ),
    ]
    for pdu, fc, address, values in cases:
        raw = bytes([pdu.function_code]) + pdu.encode()
        assert parse_pdu(raw) == (fc, address, values), type(pdu).__name__
        assert fc in WRITE_FC


# ---------------------------------------------------------------- 1. control off by default


def test_profile_without_control_table_has_control_off(tmp_path):
    text = quick_switches(DEMO.read_text())
    start, end = text.index("[control]"), text.index("[poll]")
    path = write_bench(tmp_path, edit=lambda t: t[:start] + t[end:])
    profile = load_profile(path)
    assert "[control]" not in path.read_text()
    assert profile.control.enabled is False
    assert remote_coils(profile)  # remote switches with coils exist: only the flag holds them back

    async def go():
        async with SimulatedBench(profile, port_map="free", noise=False) as bench:
            prof, recorders = await recording_profile(profile, bench.bound)
            poller = Poller(prof)
            try:
                await poller.start()
                await poller.poll_once()
                ctl = SwitchControl(prof, poller)
                for sid in remote_coils(profile):
                    for state in SWITCH_STATES:
                        with pytest.raises(ControlRefused, match="control is disabled"):
                            await ctl.operate(sid, state, confirmed_by="A. Tech")
                await poller.poll_once()
            finally:
                await poller.close()
                for r in recorders:
                    await r.stop()
            reads = [q for r in recorders for q in r.requests if q.function_code in (1, 2, 3, 4)]
            assert reads, "the recorder saw no traffic at all: it is not in the path"
            assert [q for r in recorders for q in r.requests if q.is_write] == []
            assert bench.writes_seen == []

    asyncio.run(go())


class _LoopThread:
    """One event loop in a thread, so hypothesis examples share one bench and one poller."""

    def __init__(self) -> None:
        self.loop = asyncio.new_event_loop()
        self.thread = threading.Thread(target=self.loop.run_forever, daemon=True)
        self.thread.start()

    def run(self, coro, timeout: float = 30.0):
        return asyncio.run_coroutine_threadsafe(coro, self.loop).result(timeout)

    def close(self) -> None:
        self.loop.call_soon_threadsafe(self.loop.stop)
        self.thread.join(5)
        self.loop.close()


@pytest.fixture(scope="module")
def live_bench(tmp_path_factory):
    """Simulated demo bench (control enabled) behind wire recorders, with a poller and control."""
    profile = load_profile(write_bench(tmp_path_factory.mktemp("live"), edit=quick_switches))
    assert profile.control.enabled
    lt = _LoopThread()
    state: dict = {}

    async def up():
        bench = SimulatedBench(profile, port_map="free", noise=False)
        await bench.start()
        prof, recorders = await recording_profile(profile, bench.bound)
        poller = Poller(prof)
        await poller.start()
        state.update(
            bench=bench,
            prof=prof,
            recorders=recorders,
            poller=poller,
            control=SwitchControl(prof, poller),
        )

    async def down():
        await state["poller"].close()
        for r in state["recorders"]:
            await r.stop()
        await state["bench"].stop()

    lt.run(up())
    state["lt"] = lt
    yield state
    lt.run(down())
    lt.close()


SWITCH_IDS = ["CB1", "SW2", "SW3", "TIE", "RX", "LB2", "cb1", "CB1 ", "NOPE", ""]
operations = st.lists(
    st.tuples(
        st.one_of(st.sampled_from(SWITCH_IDS), st.text(max_size=6)),
        st.one_of(
            st.sampled_from(["open", "closed"]),
            st.sampled_from(["OPEN", "close", "", "1"]),
            st.text(max_size=4),
        ),
        st.one_of(st.sampled_from(["A. Tech", "", "   ", "\t"]), st.text(max_size=8)),
    ),
    min_size=1,
    max_size=5,
)


@settings(
    max_examples=14, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(ops=operations)
def test_only_named_command_coils_are_ever_written(live_bench, ops):
    bench, poller, ctl = live_bench["bench"], live_bench["poller"], live_bench["control"]
    prof = live_bench["prof"]
    recorders = live_bench["recorders"]
    plc_port = prof.plcs[0].transport.port
    coils = remote_coils(prof)
    allowed = {(5, c) for c in coils.values()}

    def wire_writes():
        return [q for r in recorders for q in r.requests if q.is_write]

    async def go():
        for sid, state, who in ops:
            before, seen_before = len(wire_writes()), len(bench.writes_seen)
            await poller.poll_once()
            try:
                result = await ctl.operate(sid, state, confirmed_by=who)
            except ControlRefused as exc:
                assert "\n" not in str(exc)
                assert len(wire_writes()) == before and len(bench.writes_seen) == seen_before
                continue
            # accepted: every guard held, so these must be exactly the ones the guards name
            assert sid in coils and state in SWITCH_STATES and who.strip()
            new = wire_writes()[before:]
            assert len(new) == 1, new
            w = new[0]
            assert (w.port, w.unit, w.function_code, w.address, w.values) == (
                plc_port,
                prof.plcs[0].unit_id,
                5,
                coils[sid],
                (1 if state == "closed" else 0,),
            )
            assert result.ok and result.final_status == state and result.confirmed_by == who
            await poller.poll_once()

    live_bench["lt"].run(go(), timeout=60)
    written = {(q.function_code, q.address) for q in wire_writes()}
    assert written <= allowed
    # the bench's own server-side log saw the very same writes (the demo proof relies on it)
    assert [(w.unit, w.function_code, w.address, w.values) for w in bench.writes_seen] == [
        (q.unit, q.function_code, q.address, q.values) for q in wire_writes()
    ]
    # and only the PLC endpoint ever got one; meters only ever read
    assert all(q.port == plc_port for q in wire_writes())
    meter_ports = {m.transport.port for m in prof.meters}
    assert all(
        q.function_code in (1, 2, 3, 4)
        for r in recorders
        if r.port in meter_ports
        for q in r.requests
    )


WRITE_NAMES = {
    "write_coil",
    "write_coils",
    "write_register",
    "write_registers",
    "readwrite_registers",
    "mask_write_register",
}
WRITE_PDUS = {
    "WriteSingleCoilRequest",
    "WriteMultipleCoilsRequest",
    "WriteSingleRegisterRequest",
    "WriteMultipleRegistersRequest",
    "MaskWriteRegisterRequest",
    "ReadWriteMultipleRegistersRequest",
}


def _write_uses(tree: ast.AST) -> list[tuple[int, str]]:
    """Calls of client write methods, write PDU classes, and getattr tricks naming them."""
    hits = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Attribute) and node.attr in WRITE_NAMES | WRITE_PDUS:
            hits.append((node.lineno, node.attr))
        elif isinstance(node, ast.Name) and node.id in WRITE_NAMES | WRITE_PDUS:
            hits.append((node.lineno, node.id))
        elif isinstance(node, ast.alias) and node.name.split(".")[-1] in WRITE_PDUS:
            hits.append((getattr(node, "lineno", 0), node.name))
        elif (
            isinstance(node, ast.Constant)
            and isinstance(node.value, str)
            and node.value in WRITE_NAMES | WRITE_PDUS
        ):
            hits.append((node.lineno, repr(node.value)))
    return hits


def test_static_scan_only_control_writes_to_a_device():
    found: dict[str, list] = {}
    for pkg in ("meas", "tui"):
        for path in sorted((ROOT / pkg).rglob("*.py")):
            hits = _write_uses(ast.parse(path.read_text(encoding="utf-8"), filename=str(path)))
            if hits:
                found[path.relative_to(ROOT).as_posix()] = hits
    assert set(found) == {"meas/poll/control.py"}, found
    # and in control.py exactly one write: the switch's own command coil
    assert [name for _, name in found["meas/poll/control.py"]] == ["write_coil"]
    src = (ROOT / "meas/poll/control.py").read_text()
    assert 'write_coil(sw.command_coil, state == "closed"' in src
    # the scanner does see writes when they are there
    assert _write_uses(ast.parse("c.write_register(1, 2)\ngetattr(c, 'write_coils')")) == [
        (1, "write_register"),
        (2, "'write_coils'"),
    ]


THREE_REMOTE = f"""
[[step]]
id = "note-first"
title = "Remark"
kind = "note"
instruction = "Write a remark before switching."

[[step]]
id = "rx-in"
title = "Reactor in"
kind = "remote"
instruction = "Close RX from the tool."
operate = {{ RX = "closed" }}
{FAST_CAPTURE}

[[step]]
id = "rx-out"
title = "Reactor out"
kind = "remote"
instruction = "Open RX from the tool."
operate = {{ RX = "open" }}
{FAST_CAPTURE}

[[step]]
id = "sw2-open"
title = "Open SW2"
kind = "remote"
instruction = "Open SW2 from the tool."
operate = {{ SW2 = "open" }}
{FAST_CAPTURE}
gate = "allow"
"""


@pytest.mark.slow
def test_headless_demo_writes_only_confirmed_command_coils(tmp_path):
    """``benchwalk demo --headless`` in a real process; the bench logs every write it receives."""
    profile_path = write_bench(tmp_path / "bench", THREE_REMOTE, edit=quick_switches)
    log = tmp_path / "writes.jsonl"
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "tui.cli",
            "demo",
            "--headless",
            "--profile",
            str(profile_path),
            "--sessions",
            str(tmp_path / "sessions"),
            "--out",
            str(tmp_path / "out"),
            "--seed",
            "3",
        ],
        capture_output=True,
        text=True,
        timeout=120,
        cwd=ROOT,
        env={**os.environ, WRITE_LOG_ENV: str(log)},
    )
    assert proc.returncode in (0, 1), proc.stdout[-2000:] + proc.stderr[-2000:]
    assert "Traceback" not in proc.stderr
    profile = load_profile(profile_path)
    coils = remote_coils(profile)
    writes = [json.loads(line) for line in log.read_text().splitlines()]
    [journal_path] = (tmp_path / "sessions").glob("*.sqlite")
    with Journal.open(journal_path) as j:
        events = [dict(r) for r in j._conn.execute("SELECT * FROM event ORDER BY id")]
    confirmations = [e for e in events if e["kind"] == "remote_confirmed"]
    wanted = [(sid, st_) for s in profile.steps for sid, st_ in s.operate.items()]
    assert [
        (json.loads(e["data"])["switch"], json.loads(e["data"])["state"]) for e in confirmations
    ] == wanted
    assert len(writes) == len(wanted) == 3
    by_coil = {c: s for s, c in coils.items()}
    for w, e in zip(writes, confirmations, strict=True):
        assert w["function_code"] == 5 and w["unit"] == profile.plcs[0].unit_id
        assert w["address"] in by_coil, w  # a remote switch's command coil, nothing else
        data = json.loads(e["data"])
        assert by_coil[w["address"]] == data["switch"]
        assert w["values"] == [1 if data["state"] == "closed" else 0]
        assert e["time_utc"] <= w["time_utc"], (e, w)  # confirmed in the journal before it was sent
        assert e["operator"] == "simulated technician"


# ---------------------------------------------------------------- 2. loopback only


def _listening(pid: int) -> set[tuple[str, int]]:
    conns = psutil.Process(pid).net_connections(kind="inet")
    return {(c.laddr.ip, c.laddr.port) for c in conns if c.status == psutil.CONN_LISTEN}


def test_simulated_bench_listens_on_loopback_only(tmp_path):
    profile = load_profile(write_bench(tmp_path))
    faults = [parse_fault("slow:M2:0.05")]  # M2's port goes through the delaying front

    async def go():
        before = _listening(os.getpid())
        async with SimulatedBench(profile, faults, port_map="free") as bench:
            mine = _listening(os.getpid()) - before
            ports = {e.port for e in bench.endpoints}
            assert mine and {p for _, p in mine} >= ports
            assert {ip for ip, _ in mine} == {"127.0.0.1"}, mine
            assert set(bench.listening()) <= mine
            assert all(e.host == "127.0.0.1" for e in bench.endpoints)

    asyncio.run(go())


def test_benchwalk_sim_command_listens_on_loopback_only(tmp_path):
    profile = write_bench(tmp_path)
    proc = subprocess.Popen(
        [sys.executable, "-m", "tui.cli", "sim", str(profile), "--free-ports"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        cwd=ROOT,
    )
    try:
        lines: list[str] = []
        reader = threading.Thread(
            target=lambda: lines.extend(iter(proc.stdout.readline, "")), daemon=True
        )
        reader.start()
        deadline = time.monotonic() + 30
        while not any(line.startswith("SIMULATION") for line in lines):
            assert proc.poll() is None and time.monotonic() < deadline, (
                proc.stderr.read() if proc.poll() else lines
            )
            time.sleep(0.05)
        printed = {
            int(m.group(1))
            for line in lines
            for m in [re.search(r"tcp://127\.0\.0\.1:(\d+)", line)]
            if m
        }
        listening = _listening(proc.pid)
        assert printed and printed <= {p for _, p in listening}
        assert {ip for ip, _ in listening} == {"127.0.0.1"}, listening
    finally:
        proc.send_signal(signal.SIGINT)
        try:
            proc.wait(15)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
    assert proc.returncode == 0


# ---------------------------------------------------------------- 3. a profile is only data

MINIMAL = (ROOT / "profiles_demo" / "minimal_bench.toml").read_text()


def _payloads(marker: Path) -> dict[str, str]:
    code = f"__import__('os').system('touch {marker}')"
    return {
        "python-in-strings": MINIMAL.replace('name = "Minimal spur bench"', f'name = "{code}"')
        .replace('label = "Spur head"', f'label = "{code}"')
        .replace(
            'instruction = "Note the panel',
            f'instruction = """{{{code}}} $(touch {marker}) `touch {marker}`"""\n#',
        )
        .replace("[sim]\n", f'[sim]\nfile = "/etc/hostname"\nhook = "{code}"\n', 1),
        "python-as-key": MINIMAL + f'\n[sim.more]\n"{code}" = 1\n',
        "yaml-merge": MINIMAL + "\n<<: *include\n",
        "bang-include": "!include /etc/passwd\n" + MINIMAL,
        "hash-include": '#include "/etc/passwd"\n' + MINIMAL,
        "sequence-etc-passwd": MINIMAL.split("[[step]]")[0]
        + '\n[sequence]\nfile = "/etc/passwd"\n',
        "sequence-outside": MINIMAL.split("[[step]]")[0]
        + '\n[sequence]\nfile = "../outside/seq.toml"\n',
        "sequence-symlink-out": MINIMAL.split("[[step]]")[0] + '\n[sequence]\nfile = "link.toml"\n',
        "huge-int": MINIMAL.replace("frequency_hz = 50.0", "frequency_hz = 1" + "0" * 5000),
        "huge-float": MINIMAL.replace("frequency_hz = 50.0", "frequency_hz = 1e999"),
        "huge-port": MINIMAL.replace("port = 15121", "port = 18446744073709551617"),
        "negative-address": MINIMAL.replace(
            '"v_ln.A" = { address = 0 }', '"v_ln.A" = { address = -1 }'
        ),
        "deep-arrays": MINIMAL + "\n[sim.deep]\nx = " + "[" * 5000 + "]" * 5000 + "\n",
        "deep-inline": MINIMAL + "\n[sim.deeper]\nx = " + "{a=" * 3000 + "1" + "}" * 3000 + "\n",
        "deep-headers": MINIMAL + "\n[" + ".".join(["t"] * 3000) + "]\nx = 1\n",
        "nul-byte": MINIMAL.replace('label = "Spur line"', 'label = "Spur\\u0000line"'),
        "not-utf8": MINIMAL.replace("Spur line", "Spur \x00 line"),  # written as bytes 0xff below
    }


@pytest.mark.parametrize("case", list(_payloads(Path("/x"))))
def test_hostile_profile_is_plain_data_or_one_clear_problem(tmp_path, case, capsys):
    marker = tmp_path / "PWNED"
    folder = tmp_path / "bench"
    folder.mkdir()
    (tmp_path / "outside").mkdir()
    (tmp_path / "outside" / "seq.toml").write_text(
        MINIMAL.split("[[step]]", 1)[1].join(["[[step]]", ""])
    )
    (folder / "link.toml").symlink_to(tmp_path / "outside" / "seq.toml")
    text = _payloads(marker)[case]
    path = folder / "p.toml"
    raw = text.encode("utf-8")
    path.write_bytes(
        raw.replace(b"Spur \x00 line", b"Spur \xff line") if case == "not-utf8" else raw
    )
    profile, problems = check_profile(path)
    if profile is None:
        assert problems
        for p in problems:
            assert "\n" not in str(p) and str(p).startswith(str(path)), str(p)
        with pytest.raises(ProfileError):
            load_profile(path)
    capsys.readouterr()
    rc = cli.main(["lint", str(path)])
    err = capsys.readouterr()
    assert rc in (0, 2) and "Traceback" not in err.err + err.out
    assert not marker.exists()
    expected_to_load = {"python-in-strings", "python-as-key", "hash-include", "nul-byte"}
    assert (profile is not None) == (case in expected_to_load), problems
    if case.startswith("sequence-"):
        assert any("not inside the profile's folder" in str(p) for p in problems)
        assert not any("root:" in str(p) for p in problems)  # nothing of /etc/passwd is echoed
    if profile is not None and case == "python-in-strings":
        code = f"__import__('os').system('touch {marker}')"
        assert profile.bench.name == code and profile.meter("MA").label == code  # kept as text


def test_hostile_strings_travel_as_text_through_journal_export_and_report(tmp_path):
    marker = tmp_path / "PWNED"
    folder = tmp_path / "bench"
    folder.mkdir()
    text = _payloads(marker)["python-in-strings"].replace(
        'label = "Load bank (via CT 20/5 A)"', 'label = "<script>alert(1)</script>"'
    )
    path = folder / "p.toml"
    path.write_text(text)
    profile = load_profile(path)
    j = Journal.create(
        tmp_path / "s.sqlite",
        profile,
        operator="<script>alert(2)</script>",
        session_id="s",
    )
    # [sim.extra] file = "/etc/hostname" is data: the journal copies only the sequence file
    assert [name for name, _ in j.profile_files()] == ["p.toml"]
    j.record_event("note", "$(touch " + str(marker) + ")", operator="ana")
    j.close()
    ds = export_session(tmp_path / "s.sqlite", tmp_path / "ds")
    html_path = tmp_path / "r.html"
    assert cli.main(["report", str(ds), "--out", str(html_path)]) == 0
    page = html_path.read_text()
    assert "<script>" not in page
    assert (
        "&lt;script&gt;alert(1)&lt;/script&gt;" in page
        and "&lt;script&gt;alert(2)&lt;/script&gt;" in page
    )
    assert not marker.exists()
    assert sorted(p.name for p in (ds / "profile").iterdir()) == ["profile.toml"]


# ---------------------------------------------------------------- 4. exports never clobber


@pytest.fixture(scope="module")
def small_journal(tmp_path_factory) -> Path:
    from support.invented_bench import build_session

    return build_session(tmp_path_factory.mktemp("sj"), n_snapshots=6, n_meters=2)


def test_export_never_replaces_anything_without_the_flag(small_journal, tmp_path, capsys):
    stranger = tmp_path / "notes"
    stranger.mkdir()
    (stranger / "mine.txt").write_text("keep me")
    a_file = tmp_path / "a-file"
    a_file.write_text("keep me too")
    for target, why in ((stranger, "not a benchwalk dataset"), (a_file, "is a file")):
        for flag in ([], ["--overwrite"]):  # never replaced, not even with the flag
            with pytest.raises(BenchwalkError, match=why):
                export_session(small_journal, target, overwrite=bool(flag))
            capsys.readouterr()
            assert cli.main(["export", str(small_journal), "--out", str(target), *flag]) == 2
            err = capsys.readouterr().err
            assert err.count("\n") == 1 and why in err and "choose another --out" in err
    assert (stranger / "mine.txt").read_text() == "keep me" and a_file.read_text() == "keep me too"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a-file", "notes"]
    ds = export_session(small_journal, tmp_path / "ds")
    # a report aimed into the dataset folder would change the dataset: refused
    capsys.readouterr()
    assert cli.main(["report", str(ds), "--out", str(ds / "data" / "measurements.csv")]) == 2
    assert "inside the dataset folder" in capsys.readouterr().err
    verify_dataset(ds)


KILLED_EXPORT = """
import os, signal, sys
from pathlib import Path
from meas.dataset.export import export_session
def die(done, total):
    os.kill(os.getpid(), signal.SIGKILL)  # a pulled plug half-way through the measurements
export_session(Path(sys.argv[1]), Path(sys.argv[2]), progress=die)
"""


def test_a_killed_export_leaves_a_partial_folder_that_the_next_export_clears(
    small_journal, tmp_path
):
    target = tmp_path / "ds"
    child = subprocess.run(
        [sys.executable, "-c", KILLED_EXPORT, str(small_journal), str(target)],
        capture_output=True,
        text=True,
        timeout=60,
        cwd=ROOT,
    )
    assert child.returncode == -signal.SIGKILL, child.stderr
    left = sorted(p.name for p in tmp_path.iterdir())
    assert len(left) == 1 and re.fullmatch(r"\.ds\.partial-\d+", left[0]), (
        left
    )  # what SIGKILL leaves
    partial = tmp_path / left[0]
    assert (partial / "data").is_dir() and not target.exists()
    # things that look alike but are not ours, or not stale, must survive the clean-up
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        live = tmp_path / f".ds.partial-{sleeper.pid}"
        live.mkdir()
        other = tmp_path / ".dsx.partial-1"
        other.mkdir()
        a_file = tmp_path / ".ds.partial-999999999"
        a_file.write_text("not a folder")
        out = export_session(small_journal, target)
        assert out == target and not partial.exists()
        assert live.is_dir() and other.is_dir() and a_file.is_file()
        verify_dataset(target)
        assert remove_stale_exports(target) == []  # nothing stale left to remove
    finally:
        sleeper.kill()
        sleeper.wait()


def test_session_export_refuses_another_sessions_dataset_and_redoes_its_own(
    small_journal, tmp_path
):
    """A session's end-of-walk export replaces only its own earlier dataset (a resumed
    session whose export was killed); another session's dataset is refused untouched."""
    from support.invented_bench import build_session

    from meas.session import Session

    other = build_session(tmp_path / "other", n_snapshots=3, n_meters=2, name="other")
    export_session(other, tmp_path / "theirs" / "dataset")
    stamp = (tmp_path / "theirs" / "dataset" / "datapackage.json").read_bytes()
    s = Session(None, Journal.open(small_journal), None, None)  # export needs only the journal
    try:
        with pytest.raises(BenchwalkError, match="already exists"):
            s.export(tmp_path / "theirs")
        assert (tmp_path / "theirs" / "dataset" / "datapackage.json").read_bytes() == stamp
        assert not (tmp_path / "theirs" / "report.html").exists()
        s.export(tmp_path / "out")
        (tmp_path / "out" / "report.html").unlink()  # as a kill before the report would leave it
        dataset, report = s.export(tmp_path / "out")  # the same session again: redone
        verify_dataset(dataset)
        assert report.is_file()
    finally:
        s.journal.close()


def test_bound_profile_copy_keeps_hosts_on_loopback(tmp_path):
    """A profile naming another host is served on loopback unless ``host`` says otherwise."""
    profile = load_profile(write_bench(tmp_path))
    far = dataclasses.replace(
        profile,
        meters=tuple(
            dataclasses.replace(m, transport=dataclasses.replace(m.transport, host="192.0.2.10"))
            for m in profile.meters
        ),
    )

    async def go():
        async with SimulatedBench(far, port_map="free") as bench:
            assert {ip for ip, _ in bench.listening()} == {"127.0.0.1"}
            assert {m.transport.host for m in bench.bound.meters} == {"127.0.0.1"}

    asyncio.run(go())


def test_stale_cleanup_helper_ignores_a_missing_folder(tmp_path):
    assert remove_stale_exports(tmp_path / "nowhere" / "ds") == []
