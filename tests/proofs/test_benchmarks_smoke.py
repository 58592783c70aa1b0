"""The performance suite's table in its tiniest configuration: rows present, numbers well formed.

Timings are never asserted (machines are noisy); what is checked is that the suite runs, that
each row carries the numbers it claims, that ratio and pass/miss follow from those numbers,
and that the deterministic rows (read counts of the poll plan) agree with the demo profile
read independently with ``tomllib``.
"""

from __future__ import annotations

import math
import re
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "benchmarks"))

import run_all  # noqa: E402
from common import COLUMNS, Figure, Target, interleaved, markdown_table, percentile, slowdown  # noqa: E402

DEMO_TOML = tomllib.loads((ROOT / "profiles_demo" / "feeder_bench.toml").read_text())
NUMBER = r"-?\d{1,3}(,\d{3})*(\.\d+)?"


@pytest.fixture(scope="module")
def figures() -> list[Figure]:
    return run_all.collect(run_all.TINY, only=["plan", "poller"])


def _plan_rows(figs: list[Figure]) -> dict[str, Figure]:
    return {
        f.figure.split(" map ")[1].split(" ")[0] if " map " in f.figure else "demo": f
        for f in figs
        if f.area == "poll plan"
    }


def test_tiny_suite_has_plan_rows_and_a_one_meter_poller_row(figures):
    plan = _plan_rows(figures)
    assert set(plan) == set(DEMO_TOML["maps"]) | {"bench80", "demo"}
    poller = [f for f in figures if f.area == "poller"]
    assert [f.figure for f in poller] == ["cycle, 1 meter vs bare pymodbus loop"]
    assert not [f.note for f in figures if f.note.startswith("failed")]


def test_plan_rows_match_the_profile_read_with_tomllib(figures):
    plan = _plan_rows(figures)

    def polled(spec):  # text registers (type "string") are read once at start, never polled
        return [k for k, r in spec["registers"].items() if r.get("type") != "string"]

    for map_id, spec in DEMO_TOML["maps"].items():
        # Naive plan = one read per polled quantity: the entries of [maps.<id>.registers].
        assert plan[map_id].reference == len(polled(spec))
    # lumen-f32: float32 at 0..65 and float64 at 100..107; the 34-register hole exceeds max_gap = 8
    # (profile [poll]), so two reads, each under the 125-register limit (Modbus Application
    # Protocol V1.1b3, 6.4); corvid 1000..1050 and wren 0..26 fit one read each (hand count).
    assert (plan["lumen-f32"].ours, plan["corvid-i32"].ours, plan["wren-i16"].ours) == (2, 1, 1)
    per_map = {m: plan[m].ours for m in DEMO_TOML["maps"]}
    meters = DEMO_TOML["meter"]
    assert plan["demo"].ours == sum(per_map[m["map"]] for m in meters)
    assert plan["demo"].reference == sum(len(polled(DEMO_TOML["maps"][m["map"]])) for m in meters)
    assert all(f.verdict == "pass" for f in plan.values())  # the plan is the exact minimum


def test_every_row_is_consistent_with_its_own_numbers(figures):
    for f in figures:
        assert f.ours is not None and math.isfinite(f.ours) and f.ours > 0, f
        assert f.reference is not None and math.isfinite(f.reference) and f.reference > 0, f
        assert f.ratio == pytest.approx(f.ours / f.reference), f
        expected = all(
            {"<=": v <= t.limit, "==": v == t.limit}[t.op]
            for t in f.targets
            for v in [f.ours if t.on == "ours" else f.ratio]
        )
        assert f.passed is expected and f.verdict == ("pass" if expected else "MISS"), f


def test_markdown_table_is_well_formed(figures):
    lines = markdown_table(figures).splitlines()
    cells = [[c.strip() for c in line.strip("|").split("|")] for line in lines]
    assert tuple(cells[0]) == COLUMNS
    assert len(lines) == 2 + len(figures)
    for row, f in zip(cells[2:], figures, strict=True):
        area, _, ours, ref, ratio, target, verdict = row
        assert area == f.area
        unit = "req" if area == "poll plan" else "ms"
        assert re.fullmatch(rf"{NUMBER} {unit}", ours) and re.fullmatch(rf"{NUMBER} {unit}", ref), (
            row
        )
        assert re.fullmatch(r"\d+\.\d\dx", ratio), row
        assert target != "-" and verdict in {"pass", "MISS"}, row


def test_a_failing_benchmark_becomes_a_row_saying_why():
    broken = run_all.Config("broken", poller_sizes=())  # no fleet sizes: the poller cannot run
    (row,) = run_all.collect(broken, only=["poller"])
    assert (
        row.ours is None and row.verdict == "not run" and row.note.startswith("failed: ValueError")
    )
    assert run_all._module("bench_no_such_thing") is None


def test_percentile_is_nearest_rank_and_rates_invert():
    xs = [5.0, 1.0, 4.0, 2.0, 3.0, 9.0, 7.0]
    for q in (0.1, 0.5, 0.9, 0.95, 1.0):
        # Nearest-rank definition = Hyndman & Fan type 1, numpy's "inverted_cdf" method.
        assert percentile(xs, q) == np.percentile(xs, 100 * q, method="inverted_cdf")
    assert slowdown(200.0, 400.0, higher_is_better=True) == 2.0  # half the rate costs twice
    assert slowdown(3.0, 1.5, higher_is_better=False) == 2.0
    missing_value = Figure("x", "y", None, targets=(Target("ours", "<", 1.0),))
    assert missing_value.passed is None and missing_value.verdict == "not run"


def test_interleaved_rotates_who_goes_first():
    calls: list[str] = []
    cases = {name: (lambda n=name: calls.append(n)) for name in ("ours", "bare")}
    times = interleaved(cases, rounds=4, warmup=1)
    assert (
        calls == ["ours", "bare"] + ["ours", "bare", "bare", "ours"] * 2
    )  # warm-up, then rotated rounds
    assert {k: len(v) for k, v in times.items()} == {"ours": 4, "bare": 4}
    assert all(t >= 0 for v in times.values() for t in v)


def test_command_line_writes_the_markdown_file(tmp_path):
    out = tmp_path / "perf.md"
    proc = subprocess.run(
        [
            sys.executable,
            str(ROOT / "benchmarks" / "run_all.py"),
            "--only",
            "plan",
            "--markdown",
            str(out),
        ],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert proc.returncode == 0, proc.stderr
    text = out.read_text()
    assert text.count("| poll plan |") == len(DEMO_TOML["maps"]) + 2
    bad = subprocess.run(
        [sys.executable, str(ROOT / "benchmarks" / "run_all.py"), "--only", "nonsense"],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert (
        bad.returncode == 2
        and "unknown area nonsense" in bad.stderr
        and "Traceback" not in bad.stderr
    )
