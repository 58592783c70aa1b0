"""A small invented bench written as real TOML files, invented snapshots, and a small
invented session journal (two steps, one meter timing out once, checks and events).

The data is invented for the tests; the checks made with it are against the behaviour of
SQLite, pandas, frictionless and DuckDB themselves.
"""

from __future__ import annotations

import math
import textwrap
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np

from meas.journal.store import Journal
from meas.model import Profile
from meas.profile import load_profile
from meas.quantities import QUANTITIES
from meas.results import CheckResult, Status
from meas.snapshot import CommState, MeterBlock, Quality, Snapshot

KEYS = [
    f"{q}.{ph}"
    for q in ("v_ln", "v_ll", "i", "p", "q", "s", "pf", "f")
    for ph in QUANTITIES[q].phases
]


PROFILE_TOML = """\
# invented test bench
[bench]
name = "Plover test bench"
frequency_hz = 50.0
s_base_va = 30000.0
power_scale = 100.0

[[zone]]
id = "lv"
bench_v_ll = 400.0
network_v_ll = 11000.0

[sequence]
file = "plover.sequence.toml"

[maps.tm]
description = "invented float map"
defaults = {{ kind = "input", type = "float32" }}
[maps.tm.registers]
{registers}

[[bus]]
id = "B0"
zone = "lv"

[[bus]]
id = "B1"
zone = "lv"

[[branch]]
id = "SRC"
kind = "source"
from_bus = "B0"

[[branch]]
id = "L1"
kind = "line"
from_bus = "B0"
to_bus = "B1"

[[branch]]
id = "LD"
kind = "load"
from_bus = "B1"

[[switch]]
id = "CB1"
branch = "L1"

{meters}
"""


SEQUENCE_TOML = """\
[[step]]
id = "S1"
title = "All closed"
kind = "capture"

[[step]]
id = "S2"
title = "Open CB1"
kind = "manual"
expect = { CB1 = "open" }
"""


def meter_toml(i: int) -> str:
    bus, branch = ("B0", "L1") if i % 2 == 0 else ("B1", "LD")
    return textwrap.dedent(
        f"""\
        [[meter]]
        id = "M{i}"
        label = "Meter {i}"
        map = "tm"
        tcp = {{ host = "127.0.0.1", port = {15000 + i} }}
        unit_id = 1
        bus = "{bus}"
        branch = "{branch}"
        ct_ratio = 1.0
        classes = {{ p = "1", q = "2", v = "0.5", i = "0.5" }}
        """
    )


def make_bench(folder: Path, n_meters: int = 3) -> Profile:
    """An invented bench written as real profile files and loaded by meas.profile."""
    folder.mkdir(parents=True, exist_ok=True)
    regs = "\n".join(f'"{k}" = {{ address = {2 * i} }}' for i, k in enumerate(KEYS))
    text = PROFILE_TOML.format(
        registers=regs, meters="\n".join(meter_toml(i) for i in range(1, n_meters + 1))
    )
    path = folder / "plover.toml"
    path.write_text(text)
    (folder / "plover.sequence.toml").write_text(SEQUENCE_TOML)
    return load_profile(path)


T0 = datetime(2026, 12, 1, 22, 15, 0, tzinfo=UTC)


def make_snapshot(
    seq: int, meters: list[str], rng: np.random.Generator, *, bad: str | None = None
) -> Snapshot:
    """Invented readings; meter ``bad`` times out (NaN values, TIMEOUT quality)."""
    blocks = {}
    for m in meters:
        vals = {k: float(v) for k, v in zip(KEYS, rng.normal(230.0, 50.0, len(KEYS)), strict=True)}
        if m == bad:
            blocks[m] = MeterBlock(
                m,
                {k: math.nan for k in KEYS},
                {k: Quality.TIMEOUT for k in KEYS},
                CommState.FAILING,
                error="no answer within 0.5 s",
                error_count=2,
            )
        else:
            blocks[m] = MeterBlock(
                m,
                vals,
                {k: Quality.OK for k in KEYS},
                CommState.OK,
                latency_s=0.004,
                last_good_utc=T0,
            )
    return Snapshot(
        seq=seq,
        time_utc=T0 + timedelta(seconds=0.2 * seq),
        t_mono=1000.0 + 0.2 * seq,
        meters=blocks,
        switches={"CB1": "closed"},
        cycle_s=0.05,
    )


def build_session(
    folder: Path, *, n_snapshots: int = 12, n_meters: int = 3, name: str = "s"
) -> Path:
    """A small invented session: two steps, one meter timing out once, checks and events."""
    profile = make_bench(folder / "profile", n_meters=n_meters)
    meters = [m.id for m in profile.meters]
    path = folder / f"{name}.sqlite"
    j = Journal.create(path, profile, operator="ana", session_id=name)
    rng = np.random.default_rng(7)
    j.record_step("S1", "settling", expected_switches={"CB1": "closed"})
    for i in range(n_snapshots):
        step = "S1" if i < n_snapshots // 2 else "S2"
        role = "settling" if i % 3 == 0 else "capture"
        rid = j.record_snapshot(
            make_snapshot(i, meters, rng, bad="M2" if i == 4 else None), step_id=step, role=role
        )
        if role == "capture":
            j.record_checks(
                rid,
                step,
                [
                    CheckResult(
                        "bus.p_balance",
                        "B1",
                        Status.FAIL if step == "S2" else Status.PASS,
                        12.5 + i,
                        10.0,
                        "W",
                        "P into B1 does not balance P out: check the CT of M1"
                        if step == "S2"
                        else "",
                    ),
                    CheckResult("meter.freq", "M1", Status.NA, message="no frequency register"),
                ],
            )
        if i == n_snapshots // 2 - 1:
            j.record_step(
                "S1",
                "accepted",
                outcome="pass",
                operator="ana",
                settle_s=1.25,
                actual_switches={"CB1": "closed"},
            )
            j.record_event(
                "operate",
                "CB1 opened by hand",
                step_id="S2",
                operator="ana",
                data={"switch": "CB1"},
            )
    j.record_step(
        "S2", "accepted", outcome="fail", operator="ana", reason="CT of M1 replaced after the test"
    )
    j.close()
    return path
