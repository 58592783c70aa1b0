"""The profile loader and ``benchwalk lint`` against real files on disk.

Broken profiles are the minimal demo profile with one edit; the expected line is found by
searching the edited text for the offending line, independently of the loader's scanner.
Check values come from the files themselves, Python's hashlib and tomllib, the Modbus
Application Protocol Specification V1.1b3 (0..65535 addresses, at most 125 registers per
read) and the Modbus over Serial Line Specification V1.02 (RTU unit ids 1..247).
"""

from __future__ import annotations

import contextlib
import copy
import hashlib
import io
import math
import re
import sys
import tempfile
import tomllib
import types
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from support.profile_edits import BASE, MINIMAL, edit, line_of, problems_of, write

from meas.errors import ProfileError
from meas.model import CapturePolicy, LoadParams, RtuTransport, SettleCriterion
from meas.profile import format_path, load_profile, locate_keys
from meas.walk.sequence import sequence_problems
from tui import cli

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "profiles_demo" / "feeder_bench.toml"

REMOTE_SWITCH = """
[[plc]]
id = "PLC1"
tcp = { host = "127.0.0.1", port = 15140 }

[[switch]]
id = "Q2"
branch = "LD1"
operation = "remote"
plc = "PLC1"
command_coil = 0
status = { kind = "discrete", address = 0 }
"""


# ----------------------------------------------------------------------------- good profiles


def test_demo_profile_loads_with_its_sequence():
    p = load_profile(DEMO)
    raw = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    companion = DEMO.parent / raw["sequence"]["file"]
    seq = tomllib.loads(companion.read_text(encoding="utf-8"))
    assert p.path == str(DEMO)
    # sha256 over the profile bytes followed by the companion's (hashlib)
    assert p.sha256 == hashlib.sha256(DEMO.read_bytes() + companion.read_bytes()).hexdigest()
    assert p.bench.name == raw["bench"]["name"]
    assert [m.id for m in p.meters] == [m["id"] for m in raw["meter"]]
    assert [b.id for b in p.buses] == [b["id"] for b in raw["bus"]]
    assert [b.id for b in p.branches] == [b["id"] for b in raw["branch"]]
    assert [s.id for s in p.switches] == [s["id"] for s in raw["switch"]]
    assert [s.id for s in p.steps] == [s["id"] for s in seq["step"]]
    assert set(p.maps) == set(raw["maps"])
    assert p.sim == raw["sim"]
    assert p.control.enabled is True
    # defaults of the map applied, the register's own keys win
    f = p.maps["corvid-i32"].spec("f.T")
    assert (f.kind, f.dtype, f.word_order, f.byte_order, f.scale, f.address) == (
        "holding",
        "uint16",
        "little",
        "big",
        0.001,
        1050,
    )
    assert p.maps["corvid-i32"].spec("v_ln.A").dtype == "int32"
    assert p.maps["lumen-f32"].spec("e_imp.T").count == 4
    # unit defaults to the quantity's unit from meas.quantities
    assert p.maps["lumen-f32"].spec("p.T").unit == "W"
    assert p.maps["lumen-f32"].spec("pf.T").unit == "1"
    assert p.maps["wren-i16"].max_read == 60
    assert p.maps["lumen-f32"].apparent_power == "vector"
    m3 = p.meter("M3")
    assert (m3.reports, m3.ct_ratio, m3.vt_ratio, m3.unit_id, m3.map_id) == (
        "secondary",
        10.0,
        4.0,
        3,
        "corvid-i32",
    )
    assert p.switch("CB1").command_coil == 0 and p.switch("CB1").status.kind == "discrete"
    assert p.branch("LD2").model == LoadParams((2500.0, 1500.0, 1000.0), (800.0, 500.0, 300.0), "z")
    for raw_step, step in zip(seq["step"], p.steps, strict=True):
        if raw_step.get("capture") is False or (
            "capture" not in raw_step and step.kind in ("note", "hold")
        ):
            assert step.capture is None
        else:
            assert isinstance(step.capture, CapturePolicy)
        assert step.expect == raw_step.get("expect", {})


def test_minimal_profile_loads_with_inline_steps():
    p = load_profile(MINIMAL)
    assert p.sha256 == hashlib.sha256(MINIMAL.read_bytes()).hexdigest()
    assert (len(p.bench.zones), len(p.buses), len(p.branches), len(p.meters), len(p.switches)) == (
        1,
        2,
        3,
        2,
        1,
    )
    assert p.bench.zones[0].voltage_scale == pytest.approx(11000 / 400)
    assert p.control.enabled is False
    steps = {s.id: s for s in p.steps}
    assert steps["dead"].capture == CapturePolicy(3, 0.5, SettleCriterion(1.0, 0.01, 15.0))
    assert steps["close-spur"].capture == CapturePolicy(5, 0.5, SettleCriterion())
    assert steps["remarks"].capture is None  # note steps capture nothing by default
    assert p.meter("MB").reports == "secondary" and p.meter("MB").ct_ratio == 4.0


def test_rtu_transport_and_companion_sequence(tmp_path):
    text = edit(
        'tcp = { host = "127.0.0.1", port = 15122 }',
        'rtu = { device = "/dev/ttyUSB0", baudrate = 19200, parity = "N", stopbits = 2 }',
    )
    head, _, steps = text.partition("[[step]]")
    write(tmp_path, "[[step]]" + steps, "seq.toml")
    path = write(tmp_path, head + '\n[sequence]\nfile = "seq.toml"\n')
    p = load_profile(path)
    assert p.meter("MB").transport == RtuTransport("/dev/ttyUSB0", 19200, "N", 2, 8)
    assert [s.id for s in p.steps] == ["dead", "close-spur", "remarks"]
    assert (
        p.sha256
        == hashlib.sha256(path.read_bytes() + (tmp_path / "seq.toml").read_bytes()).hexdigest()
    )


# ----------------------------------------------------------------------------- mistakes

MISTAKES = [
    # (id, old, new, needle of the expected line, expected message part)
    (
        "unknown-bus",
        'bus = "S1"\nbranch = "LD1"',
        'bus = "S9"\nbranch = "LD1"',
        'bus = "S9"',
        "meter[1].bus: unknown bus 'S9'",
    ),
    (
        "unknown-map",
        'map = "finch-f32"',
        'map = "finch-f23"',
        'map = "finch-f23"',
        "meter[0].map: unknown map 'finch-f23'; did you mean 'finch-f32'?",
    ),
    (
        "unknown-branch-switch",
        'branch = "LN1"\nlabel = "Spur isolator"',
        'branch = "LN7"\nlabel = "Spur isolator"',
        'branch = "LN7"',
        "switch[0].branch: unknown branch 'LN7'; did you mean 'LN1'?",
    ),
    (
        "unknown-branch-meter",
        'branch = "LD1"\nreports',
        'branch = "LD2"\nreports',
        'branch = "LD2"',
        "meter[1].branch: unknown branch 'LD2'",
    ),
    (
        "unknown-zone",
        'zone = "spur"\nlabel = "Spur end"',
        'zone = "spurr"\nlabel = "Spur end"',
        'zone = "spurr"',
        "bus[1].zone: unknown zone 'spurr'; did you mean 'spur'?",
    ),
    (
        "unknown-from-bus",
        'from_bus = "S1"',
        'from_bus = "S2"',
        'from_bus = "S2"',
        "branch[2].from_bus: unknown bus 'S2'",
    ),
    (
        "unknown-switch-expect",
        'expect = { Q1 = "open" }',
        'expect = { Q7 = "open" }',
        "Q7",
        "step[0].expect.Q7: unknown switch 'Q7'",
    ),
    (
        "bad-switch-state",
        'expect = { Q1 = "open" }',
        'expect = { Q1 = "opened" }',
        "opened",
        "step[0].expect.Q1: unknown switch state 'opened'",
    ),
    (
        "address-range",
        '"i.A" = { address = 12 }',
        '"i.A" = { address = 70000 }',
        "70000",
        '"i.A".address: 70000 is outside 0..65535',
    ),
    (
        "address-end",
        '"e_imp.T" = { address = 100, type = "float64" }',
        '"e_imp.T" = { address = 65533, type = "float64" }',
        "65533",
        "float64 at 65533 needs registers 65533..65536, past 65535",
    ),
    (
        "overlap",
        '"i.B" = { address = 14 }',
        '"i.B" = { address = 13 }',
        '"i.B"',
        "input registers 13..14 overlap 'i.A' at 12..13",
    ),
    (
        "data-type",
        'type = "float64" }',
        'type = "float46" }',
        "float46",
        "unknown data type 'float46'; expected one of 'int16', 'uint16', 'int32', 'uint32', 'float32', 'float64', 'int64', 'uint64', 'string'; did you mean 'float64'?",
    ),
    (
        "word-order",
        'word_order = "big"',
        'word_order = "bigg"',
        "bigg",
        "maps.finch-f32.defaults.word_order: unknown word order 'bigg'",
    ),
    (
        "byte-order",
        '"f.T" = { address = 52 }',
        '"f.T" = { address = 52, byte_order = "swap" }',
        "swap",
        "unknown byte order 'swap'; expected one of 'big', 'little'",
    ),
    (
        "register-kind",
        '"f.T" = { address = 52 }',
        '"f.T" = { address = 52, kind = "inptu" }',
        "inptu",
        "unknown register kind 'inptu'; expected one of 'holding', 'input'; did you mean 'input'?",
    ),
    (
        "quantity-phase",
        '"p.T" = { address = 26 }',
        '"p.X" = { address = 26 }',
        '"p.X"',
        "'p.X' is not a quantity key: p has phases A, B, C, T",
    ),
    (
        "quantity-name",
        '"f.T" = { address = 52 }',
        '"freq.T" = { address = 52 }',
        '"freq.T"',
        "'freq.T' is not a quantity key",
    ),
    (
        "unit",
        '"f.T" = { address = 52 }',
        '"f.T" = { address = 52, unit = "kHz" }',
        "kHz",
        "unit 'kHz' differs from the unit of f.T ('Hz')",
    ),
    (
        "duplicate-meter",
        'id = "MB"',
        'id = "MA"',
        ('id = "MA"', 2),
        "meter[1].id: duplicate meter id 'MA' (first at line",
    ),
    (
        "duplicate-bus",
        '[[branch]]\nid = "GRID"',
        '[[bus]]\nid = "S0"\nzone = "spur"\n\n[[branch]]\nid = "GRID"',
        ('id = "S0"', 2),
        "bus[2].id: duplicate bus id 'S0'",
    ),
    (
        "duplicate-branch",
        'id = "LD1"',
        'id = "LN1"',
        ('id = "LN1"', 2),
        "branch[2].id: duplicate branch id 'LN1'",
    ),
    (
        "duplicate-step",
        'id = "remarks"',
        'id = "dead"',
        ('id = "dead"', 2),
        "step[2].id: duplicate step id 'dead'",
    ),
    (
        "missing-bus",
        'bus = "S0"\nbranch = "LN1"\n',
        'branch = "LN1"\n',
        "[[meter]]",
        "meter[0]: missing required key 'bus'",
    ),
    (
        "missing-name",
        'name = "Minimal spur bench"\n',
        "",
        "[bench]",
        "bench: missing required key 'name'",
    ),
    (
        "missing-address",
        '"f.T" = { address = 52 }',
        '"f.T" = { adress = 52 }',
        "adress",
        "missing required key 'address'",
    ),
    (
        "string-for-number",
        "frequency_hz = 50.0",
        'frequency_hz = "50"',
        "frequency_hz",
        "bench.frequency_hz: expected a number, got a string '50'",
    ),
    (
        "bool-for-number",
        "ct_primary_a = 30.0",
        "ct_primary_a = true",
        "ct_primary_a = true",
        "meter[0].ct_primary_a: expected a number, got a boolean true",
    ),
    (
        "float-for-int",
        "unit_id = 1\nbus",
        "unit_id = 1.5\nbus",
        "unit_id = 1.5",
        "meter[0].unit_id: expected an integer, got a number 1.5",
    ),
    (
        "unknown-key",
        'label = "Spur head"',
        'lable = "Spur head"',
        "lable",
        "meter[0].lable: unknown key 'lable'; did you mean 'label'?",
    ),
    ("unknown-top-key", "[poll]", "[pol]", "[pol]", "pol: unknown key 'pol'; did you mean 'poll'?"),
    (
        "unknown-inline-key",
        "port = 15121 }",
        "prot = 15121 }",
        "prot",
        "meter[0].tcp.prot: unknown key 'prot'; did you mean 'port'?",
    ),
    (
        "port-high",
        "port = 15121",
        "port = 70000",
        "70000",
        "meter[0].tcp.port: 70000 is outside 1..65535",
    ),
    (
        "port-zero",
        "port = 15121",
        "port = 0",
        "port = 0",
        "meter[0].tcp.port: 0 is outside 1..65535",
    ),
    (
        "unit-id-tcp",
        "unit_id = 1\nbus",
        "unit_id = 256\nbus",
        "unit_id = 256",
        "meter[0].unit_id: unit_id 256 is outside 0..255 for a TCP device",
    ),
    (
        "ratio-zero",
        "ct_ratio = 4.0",
        "ct_ratio = 0",
        "ct_ratio = 0",
        "meter[1].ct_ratio: must be greater than 0, got 0",
    ),
    (
        "ratio-negative",
        "ct_ratio = 4.0",
        "ct_ratio = 4.0\nvt_ratio = -2.0",
        "vt_ratio",
        "meter[1].vt_ratio: must be greater than 0, got -2.0",
    ),
    (
        "ratio-on-primary",
        'unit_id = 1\nbus = "S0"',
        'unit_id = 1\nct_ratio = 10.0\nbus = "S0"',
        "ct_ratio = 10.0",
        'meter[0].ct_ratio: ct_ratio is applied only when reports = "secondary"',
    ),
    (
        "timeout",
        "ct_primary_a = 30.0",
        "ct_primary_a = 30.0\ntimeout_s = -1",
        "timeout_s",
        "meter[0].timeout_s: must be greater than 0, got -1",
    ),
    (
        "frequency",
        "frequency_hz = 50.0",
        "frequency_hz = 0.0",
        "frequency_hz",
        "bench.frequency_hz: must be greater than 0, got 0.0",
    ),
    (
        "max-read",
        'apparent_power = "vector"',
        'apparent_power = "vector"\nmax_read = 126',
        "max_read",
        "maps.finch-f32.max_read: 126 is outside 1..125",
    ),
    (
        "same-buses",
        'to_bus = "S1"',
        'to_bus = "S0"',
        'to_bus = "S0"',
        "branch[1].to_bus: to_bus is the same bus as from_bus ('S0')",
    ),
    (
        "one-ended-to-bus",
        'from_bus = "S1"\nlabel = "Load bank"',
        'from_bus = "S1"\nto_bus = "S0"\nlabel = "Load bank"',
        'to_bus = "S0"',
        "branch[2].to_bus: a load is one-ended",
    ),
    (
        "branch-kind",
        'kind = "line"',
        'kind = "cable"',
        "cable",
        "branch[1].kind: unknown branch kind 'cable'",
    ),
    (
        "meter-branch-elsewhere",
        'bus = "S0"\nbranch = "LN1"',
        'bus = "S0"\nbranch = "LD1"',
        'branch = "LD1"',
        "meter[0].branch: branch 'LD1' (S1) does not touch the meter's bus 'S0'",
    ),
    (
        "snapshots",
        "capture = { snapshots = 5,",
        "capture = { snapshots = 0,",
        "snapshots = 0",
        "step[1].capture.snapshots: must be at least 1, got 0",
    ),
    (
        "settle",
        "rel_spread = 0.01",
        "rel_spread = -0.01",
        "rel_spread",
        "step[0].capture.settle.rel_spread: must be greater than 0",
    ),
    (
        "capture-type",
        "capture = { snapshots = 5, interval_s = 0.5 }",
        'capture = "yes"',
        'capture = "yes"',
        "step[1].capture: expected a table { snapshots, interval_s, settle } or false",
    ),
    (
        "step-kind",
        'kind = "note"',
        'kind = "remark"',
        'kind = "remark"',
        "step[2].kind: unknown step kind 'remark'",
    ),
    ("gate", 'gate = "block"', 'gate = "ignore"', "ignore", "step[1].gate: unknown gate 'ignore'"),
    (
        "control-enabled",
        "enabled = false",
        'enabled = "yes"',
        "enabled",
        "control.enabled: expected true or false, got a string 'yes'",
    ),
    (
        "control-enabled-int",
        "enabled = false",
        "enabled = 1",
        "enabled",
        "control.enabled: expected true or false, got an integer 1",
    ),
    (
        "remote-without-plc",
        'operation = "manual"',
        'operation = "remote"',
        "[[switch]]",
        "switch[0]: remote switch 'Q1' needs plc and command_coil",
    ),
    (
        "operate-manual",
        'kind = "manual"\ninstruction = "Close Q1',
        'kind = "remote"\noperate = { Q1 = "closed" }\ninstruction = "Close Q1',
        "operate =",
        "step[1].operate.Q1: switch 'Q1' is manual",
    ),
    (
        "remote-without-operate",
        'kind = "manual"\ninstruction = "Close Q1',
        'kind = "remote"\ninstruction = "Close Q1',
        ("[[step]]", 2),
        "step[1]: a remote step needs operate",
    ),
    (
        "operate-not-remote",
        'kind = "manual"\ninstruction = "Close Q1',
        'kind = "manual"\noperate = { Q1 = "closed" }\ninstruction = "Close Q1',
        "operate =",
        "step[1].operate: only remote steps operate switches",
    ),
    (
        "meter-table-not-array",
        '[[meter]]\nid = "MB"',
        '[meter]\nid = "MB"',
        ("[meter]", 2),
        "TOML syntax: Cannot declare ('meter',) twice",
    ),
    (
        "class",
        'p = "0.5S"',
        'p = "0.3S"',
        "0.3S",
        "meter[0].classes.p: unknown accuracy class '0.3S'",
    ),
    (
        "no-transport",
        'tcp = { host = "127.0.0.1", port = 15121 }\n',
        "",
        ("[[meter]]", 1),
        "meter[0]: meter needs a transport",
    ),
    (
        "same-endpoint",
        "port = 15122",
        "port = 15121",
        ("unit_id = 1", 2),
        "meter[1].unit_id: meter 'MA' already answers at tcp://127.0.0.1:15121 unit_id 1",
    ),
]


@pytest.mark.parametrize(
    ("old", "new", "needle", "message"), [m[1:] for m in MISTAKES], ids=[m[0] for m in MISTAKES]
)
def test_each_mistake_gives_one_clear_line(tmp_path, old, new, needle, message):
    text = edit(old, new)
    path = write(tmp_path, text)
    lines = problems_of(path)
    matching = [ln for ln in lines if message in ln]
    assert matching, f"{message!r} not in {lines}"
    expected_line = line_of(text, needle)
    assert matching[0].startswith(f"{path}:{expected_line}: "), matching[0]
    assert len(lines) <= 3, lines  # one mistake, one (or very few) lines: no cascade


def test_duplicate_zone_switch_and_plc_ids(tmp_path):
    text = (
        BASE
        + REMOTE_SWITCH
        + REMOTE_SWITCH.replace("command_coil = 0", "command_coil = 1").replace(
            "address = 0", "address = 1"
        )
        + '\n[[zone]]\nid = "spur"\nbench_v_ll = 230.0\n'
    )
    path = write(tmp_path, text)
    lines = problems_of(path)
    plc_line, q2_line = line_of(text, 'id = "PLC1"', 2), line_of(text, 'id = "Q2"', 2)
    assert (
        f"{path}:{plc_line}: plc[1].id: duplicate plc id 'PLC1' (first at line {line_of(text, '[[plc]]')})"
        in lines
    )
    assert (
        f"{path}:{q2_line}: switch[2].id: duplicate switch id 'Q2' (first at line {line_of(text, '[[switch]]', 2)})"
        in lines
    )
    zone_line = [i for i, ln in enumerate(text.splitlines(), 1) if ln == 'id = "spur"'][1]
    assert (
        f"{path}:{zone_line}: zone[1].id: duplicate zone id 'spur' (first at line {line_of(text, '[[zone]]')})"
        in lines
    )
    assert len(lines) == 3, lines


def test_remote_switch_and_remote_step_are_accepted(tmp_path):
    text = (
        BASE
        + REMOTE_SWITCH
        + '\n[[step]]\nid = "load-off"\ntitle = "Open Q2 from here"\nkind = "remote"\noperate = { Q2 = "open" }\nexpect = { Q2 = "open" }\n'
    )
    p = load_profile(write(tmp_path, text))
    assert p.switch("Q2").operation == "remote" and p.plcs[0].id == "PLC1"
    assert p.steps[-1].operate == {"Q2": "open"}


@pytest.mark.parametrize(
    ("old", "new", "needle", "message"),
    [
        (
            'plc = "PLC1"',
            'plc = "PLC9"',
            "PLC9",
            "switch[1].plc: unknown plc 'PLC9'; did you mean 'PLC1'?",
        ),
        (
            "command_coil = 0",
            "command_coil = 70000",
            "70000",
            "switch[1].command_coil: 70000 is outside 0..65535",
        ),
        (
            'status = { kind = "discrete"',
            'status = { kind = "input"',
            'kind = "input", address',
            "switch[1].status.kind: unknown status point kind 'input'",
        ),
        (
            "port = 15140 }",
            'port = "502" }',
            '"502"',
            "plc[0].tcp.port: expected an integer, got a string '502'",
        ),
    ],
)
def test_remote_switch_mistakes(tmp_path, old, new, needle, message):
    text = BASE + edit(old, new, REMOTE_SWITCH)
    path = write(tmp_path, text)
    lines = problems_of(path)
    assert f"{path}:{line_of(text, needle)}: {message}" in [
        ln[: len(f"{path}:{line_of(text, needle)}: {message}")] for ln in lines
    ], lines


def test_shared_command_coil_and_manual_coil(tmp_path):
    second = (
        REMOTE_SWITCH.split("[[switch]]")[1]
        .replace('"Q2"', '"Q3"')
        .replace("address = 0", "address = 1")
    )
    text = BASE + REMOTE_SWITCH + "\n[[switch]]" + second
    text = edit('operation = "manual"', 'operation = "manual"\ncommand_coil = 5', text)
    path = write(tmp_path, text)
    lines = problems_of(path)
    assert (
        f"{path}:{line_of(text, 'command_coil = 0', 2)}: switch[2].command_coil: coil 0 of PLC1 already commands switch 'Q2'"
        in lines
    )
    assert any(
        ln.startswith(
            f"{path}:{line_of(text, 'command_coil = 5')}: switch[0].command_coil: command_coil on a manual switch"
        )
        for ln in lines
    ), lines


@pytest.mark.parametrize(("unit_id", "ok"), [(0, False), (1, True), (247, True), (248, False)])
def test_rtu_unit_id_range(tmp_path, unit_id, ok):
    # Modbus over Serial Line V1.02: 0 is broadcast, 1..247 are device addresses
    text = edit(
        'tcp = { host = "127.0.0.1", port = 15122 }\nunit_id = 1',
        f'rtu = {{ device = "/dev/ttyS1" }}\nunit_id = {unit_id}',
    )
    path = write(tmp_path, text)
    if ok:
        assert load_profile(path).meter("MB").unit_id == unit_id
    else:
        assert problems_of(path) == [
            f"{path}:{line_of(text, f'unit_id = {unit_id}')}: meter[1].unit_id: unit_id {unit_id} is outside 1..247 for an RTU device"
        ]


def test_toml_syntax_error_uses_tomllib_line(tmp_path):
    text = edit(
        "max_read",
        "x",
        edit('apparent_power = "vector"', 'apparent_power = "vector"\nmax_read = = 60'),
    )
    path = write(tmp_path, text)
    lines = problems_of(path)
    assert len(lines) == 1
    assert lines[0].startswith(f"{path}:{line_of(text, 'x = = 60')}: TOML syntax: ")


def test_missing_companion_points_at_sequence_file(tmp_path):
    text = BASE.partition("[[step]]")[0] + '\n[sequence]\nfile = "missing.toml"\n'
    path = write(tmp_path, text)
    assert problems_of(path) == [
        f"{path}:{line_of(text, 'file = ')}: sequence.file: {tmp_path / 'missing.toml'}: sequence file not found; the path is relative to the profile"
    ]


def test_problems_in_companion_name_the_companion(tmp_path):
    head, _, steps = BASE.partition("[[step]]")
    seq_text = edit('expect = { Q1 = "open" }', 'expect = { Q1 = "shut" }', "[[step]]" + steps)
    seq = write(tmp_path, seq_text, "seq.toml")
    path = write(tmp_path, head + '\n[sequence]\nfile = "seq.toml"\n')
    assert problems_of(path) == [
        f"{seq}:{line_of(seq_text, 'shut')}: step[0].expect.Q1: unknown switch state 'shut'; expected one of 'open', 'closed'"
    ]


def test_steps_in_both_places(tmp_path):
    head, _, steps = BASE.partition("[[step]]")
    write(tmp_path, "[[step]]" + steps, "seq.toml")
    text = BASE + '\n[sequence]\nfile = "seq.toml"\n'
    path = write(tmp_path, text)
    assert problems_of(path) == [
        f"{path}:{line_of(text, '[[step]]')}: step: steps are given both here and in [sequence] file; keep them in one place"
    ]


def test_lint_lists_every_problem_at_once(tmp_path, capsys):
    text = edit("port = 15121", "port = 70000")
    text = edit('map = "finch-f32"', 'map = "finch"', text)
    text = edit('"i.B" = { address = 14 }', '"i.B" = { address = 13 }', text)
    text = edit('zone = "spur"\nlabel = "Spur end"', 'zone = "spurr"\nlabel = "Spur end"', text)
    path = write(tmp_path, text)
    assert cli.main(["lint", str(path)]) == 2
    out = capsys.readouterr().out.splitlines()
    reg, zone, map_ = (
        line_of(text, '"i.B"'),
        line_of(text, 'zone = "spurr"'),
        line_of(text, 'map = "finch"'),
    )
    assert out == [
        f"{path}:{reg}: maps.finch-f32.registers.\"i.B\": input registers 13..14 overlap 'i.A' at 12..13",
        f"{path}:{zone}: bus[1].zone: unknown zone 'spurr'; did you mean 'spur'? (zones: spur)",
        f"{path}:{map_}: meter[0].map: unknown map 'finch'; did you mean 'finch-f32'? (maps: finch-f32)",
        f"{path}:{line_of(text, 'port = 70000')}: meter[0].tcp.port: 70000 is outside 1..65535",
        f"4 problems in {path}",
    ]


def test_lint_summary_of_a_clean_profile(capsys):
    assert cli.main(["lint", str(MINIMAL)]) == 0
    out = capsys.readouterr().out.strip()
    assert out == "Minimal spur bench: ok - 2 meters, 1 map, 2 buses, 3 branches, 1 switch, 3 steps"


@pytest.mark.parametrize("kind", ["missing", "directory", "not-utf8", "empty"])
def test_unreadable_profiles_give_one_line(tmp_path, capsys, kind):
    path = {"missing": tmp_path / "nope.toml", "directory": tmp_path}.get(kind, tmp_path / "x.toml")
    if kind == "not-utf8":
        path.write_bytes(b'[bench]\nname = "caf\xe9"\n')
    if kind == "empty":
        path.write_bytes(b"")
    assert cli.main(["lint", str(path)]) == 2
    captured = capsys.readouterr()
    assert "Traceback" not in captured.out + captured.err
    first = captured.out.splitlines()[0]
    expected = {
        "missing": f"{path}: no such file; check the path",
        "directory": f"{path}: is a directory; give the path of a .toml file",
        "not-utf8": f"{path}:2: not UTF-8 text; save the file as UTF-8",
        "empty": f"{path}: missing required key 'bench'",
    }[kind]
    assert first == expected


def test_other_commands_print_profile_errors_through_cli(tmp_path, monkeypatch, capsys):
    """A subcommand that loads a bad profile: cli.main prints the problem lines, exit 2."""
    probe = types.ModuleType("tui.commands._profile_probe")
    probe.HELP = "load a profile"
    probe.add_arguments = lambda parser: parser.add_argument("profile")
    probe.main = lambda args: len(load_profile(args.profile).meters) and 0
    monkeypatch.setitem(sys.modules, probe.__name__, probe)
    monkeypatch.setitem(cli.COMMANDS, "probe", "_profile_probe")
    text = edit("port = 15121", "port = 0", edit('bus = "S1"\nbranch', 'bus = "S5"\nbranch'))
    path = write(tmp_path, text)
    assert cli.main(["probe", str(path)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    bus_line = line_of(text, 'bus = "S5"')
    assert err.splitlines() == [
        f"benchwalk probe: {path}:{line_of(text, 'port = 0')}: meter[0].tcp.port: 0 is outside 1..65535",
        f"{path}:{bus_line}: meter[1].bus: unknown bus 'S5' (buses: S0, S1)",
    ]
    for bad in (tmp_path / "missing.toml", tmp_path):
        assert cli.main(["probe", str(bad)]) == 2
        err = capsys.readouterr().err
        assert err.startswith(f"benchwalk probe: {bad}: ") and "Traceback" not in err
    assert cli.main(["probe", str(MINIMAL)]) == 0


# ----------------------------------------------------------------------------- the key locator


def test_locator_handles_multiline_strings_arrays_and_nested_tables():
    text = '''# comment [not = a table]
a = """
[fake]
b = 1
"""
arr = [
  { x = 1 },  # first
  { "y.z" = 'q' },
]
[t."dotted.key"]
k.sub = 2
[[r]]
v = 1
[[r.s]]
w = 2
[[r]]
[[r.s]]
w = 3
'''
    lines = locate_keys(text)
    assert tomllib.loads(text)["r"][1]["s"][0]["w"] == 3  # the TOML is valid
    assert lines[("a",)] == 2
    assert ("fake",) not in lines and ("b",) not in lines
    assert lines[("arr", 0, "x")] == 7
    assert lines[("arr", 1, "y.z")] == 8
    assert lines[("t", "dotted.key", "k", "sub")] == 11
    assert lines[("r", 0, "s", 0, "w")] == 15
    assert lines[("r", 1)] == 16
    assert lines[("r", 1, "s", 0, "w")] == 18
    assert format_path(("t", "dotted.key", "k")) == 't."dotted.key".k'
    assert format_path(("meter", 2, "tcp")) == "meter[2].tcp"


def test_locator_finds_every_demo_meter_port():
    text = DEMO.read_text(encoding="utf-8")
    lines = locate_keys(text)
    raw = tomllib.loads(text)
    source = text.splitlines()
    for i, meter in enumerate(raw["meter"]):
        line = source[lines[("meter", i, "tcp", "port")] - 1]
        assert f"port = {meter['tcp']['port']}" in line
        assert source[lines[("meter", i)] - 1] == "[[meter]]"


# ----------------------------------------------------------------------------- generated breakage


def _toml_key(k: str) -> str:
    return '"' + "".join(_esc(c) for c in k) + '"'


def _esc(c: str) -> str:
    if c in '"\\':
        return "\\" + c
    if ord(c) < 0x20 or ord(c) == 0x7F or 0xD800 <= ord(c) <= 0xDFFF:
        return f"\\u{ord(c):04x}" if not 0xD800 <= ord(c) <= 0xDFFF else "?"
    return c


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return (
            "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf") if math.isinf(v) else repr(v)
        )
    if isinstance(v, str):
        return _toml_key(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return "{ " + ", ".join(f"{_toml_key(k)} = {_toml_value(x)}" for k, x in v.items()) + " }"


def to_toml(d: dict) -> str:
    """Any dict as valid TOML (one inline value per top-level key)."""
    return "\n".join(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in d.items()) + "\n"


def _demo_dict() -> dict:
    raw = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    seq = tomllib.loads((DEMO.parent / raw.pop("sequence")["file"]).read_text(encoding="utf-8"))
    raw["step"] = seq["step"]
    return raw


DEMO_DICT = _demo_dict()
WRONG = st.one_of(
    st.integers(-70000, 70000),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=8),
    st.booleans(),
    st.lists(st.integers(-3, 3), max_size=3),
    st.dictionaries(st.text(max_size=4), st.integers(0, 3), max_size=2),
    st.sampled_from(
        ["B0", "L1", "M1", "CB1", "lumen-f32", "feeder", "float32", "v_ln.A", "remote", "open"]
    ),
)


def _containers(node, path=()):
    yield path, node
    items = (
        node.items()
        if isinstance(node, dict)
        else enumerate(node)
        if isinstance(node, list)
        else ()
    )
    for k, v in items:
        if isinstance(v, dict | list):
            yield from _containers(v, path + (k,))


@st.composite
def mutated_profiles(draw) -> dict:
    d = copy.deepcopy(DEMO_DICT)
    for _ in range(draw(st.integers(1, 4))):
        containers = list(_containers(d))
        _, node = draw(st.sampled_from(containers))
        if not node:
            continue
        keys = list(node) if isinstance(node, dict) else list(range(len(node)))
        k = draw(st.sampled_from(keys))
        op = draw(st.sampled_from(["delete", "replace", "duplicate", "rename"]))
        if op == "delete":
            del node[k]
        elif op == "replace":
            node[k] = draw(WRONG)
        elif op == "duplicate" and isinstance(node, list):
            node.append(copy.deepcopy(node[k]))
        elif op == "rename" and isinstance(node, dict):
            node[draw(st.text(min_size=1, max_size=6))] = node.pop(k)
    return d


def _run_both(text: str) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "p.toml"
        path.write_text(text, encoding="utf-8", errors="surrogatepass")
        try:
            # lint also runs the whole-sequence checks run and demo apply before they start
            loaded = not sequence_problems(load_profile(path))
        except ProfileError as exc:
            loaded = False
            assert exc.problems and all(p.file in (str(path), str(SEQUENCE)) for p in exc.problems)
        out, err = io.StringIO(), io.StringIO()
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            rc = cli.main(["lint", str(path)])
        text_out = out.getvalue() + err.getvalue()
        assert "Traceback" not in text_out
        assert rc == (0 if loaded else 2), text_out
        if not loaded:
            problem_lines = out.getvalue().rstrip("\n").split("\n")[:-1]
            files = "|".join(re.escape(str(f)) for f in (path, SEQUENCE))
            assert problem_lines and all(
                re.match(f"({files})(:\\d+)?: ", ln) for ln in problem_lines
            ), problem_lines


@pytest.mark.slow
@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated_profiles())
def test_mutated_demo_dicts_only_raise_profile_error(d):
    _run_both(to_toml(d))


SEQUENCE = DEMO.parent / "feeder_bench.sequence.toml"
DEMO_LINES = DEMO.read_text(encoding="utf-8").splitlines(keepends=True)


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(
        st.tuples(
            st.sampled_from(["delete", "duplicate", "insert"]),
            st.integers(0, len(DEMO_LINES) - 1),
            st.text(max_size=12),
        ),
        min_size=1,
        max_size=4,
    )
)
@pytest.mark.slow
def test_mutated_demo_text_only_raises_profile_error(edits):
    lines = list(DEMO_LINES)
    for op, i, junk in edits:
        i %= len(lines)
        if op == "delete":
            del lines[i]
        elif op == "duplicate":
            lines.insert(i, lines[i])
        else:
            pos = len(junk) % (len(lines[i]) + 1)
            lines[i] = lines[i][:pos] + junk + lines[i][pos:]
    _run_both("".join(lines).replace("feeder_bench.sequence.toml", str(SEQUENCE)))
