"""The checks against the simulated bench (meas.sim, noise on): no false alarms in any switch
configuration, and every injected fault found on the right subject with the right cause.

The simulator's noise sits inside class limits by design (meas.sim.meters: sigma 0.1 of the
class limit, clipped at 0.5; an assumption about healthy meters, from memory), so a fail on a
healthy bench is a false alarm of the checks.
"""

from __future__ import annotations

import dataclasses
import itertools
import zlib

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from support.check_inputs import demo

from meas.checks import CheckEngine, run_checks
from meas.model import SWITCH_STATES
from meas.results import STATUS_RANK, Status
from meas.sim.faults import parse_fault
from meas.sim.meters import snapshot_from_sim
from meas.sim.readings import ideal_readings

HISTORY = 12


@pytest.fixture(scope="module")
def engine():
    return CheckEngine(demo())


def _run_series(engine, switches, faults, n, seed):
    prof = engine.profile
    ideal = ideal_readings(prof, switches)
    rng = np.random.default_rng(seed)
    hist: list = []
    prev = None
    for k in range(n):
        snap = snapshot_from_sim(
            prof, switches, faults, rng, k, ideal=ideal, t_mono=0.2 * k, previous=prev
        )
        yield k, engine.run(snap, hist[-HISTORY:])
        hist.append(snap)
        prev = snap


@pytest.mark.slow
def test_no_false_alarms_in_any_switch_configuration(engine):
    prof = engine.profile
    ids = [s.id for s in prof.switches]
    combos = list(itertools.product(SWITCH_STATES, repeat=len(ids)))
    assert len(combos) == 64  # every reachable combination of the demo's six switches
    snapshots, fails, warns = 0, [], 0
    for c, combo in enumerate(combos):
        sw = dict(zip(ids, combo, strict=True))
        for _, res in _run_series(engine, sw, [], 16, seed=1000 + c):
            snapshots += 1
            fails += [(sw, r.check, r.subject, r.message) for r in res if r.status is Status.FAIL]
            warns += sum(r.status is Status.WARN for r in res)
    assert snapshots >= 1000
    assert fails == []
    assert warns <= snapshots // 100  # warnings are allowed, but should be rare on a healthy bench


def _pair_ok(cause: str, pair: str) -> bool:
    return cause.startswith("phases_swapped:") and set(cause.split(":")[1].split("-")) == set(
        pair.split("-")
    )


def _factor_ok(cause: str, kind: str, k: float) -> bool:
    name, _, arg = cause.partition(":")
    return name == kind and abs(float(arg) / k - 1.0) <= 0.02


# (fault, switch changes, check, subject, cause test, words the sentence must contain)
NORMAL = {}
RX_ON = {"RX": "closed"}
CASES = [
    ("ct-reversed:M1:B", NORMAL, "phase.wiring", "M1", lambda c: c == "ct_reversed:B", ["phase B"]),
    ("ct-reversed:M3:A", NORMAL, "phase.wiring", "M3", lambda c: c == "ct_reversed:A", ["phase A"]),
    ("ct-reversed:M5:C", NORMAL, "phase.wiring", "M5", lambda c: c == "ct_reversed:C", ["phase C"]),
    ("ct-reversed:M7:A", NORMAL, "phase.wiring", "M7", lambda c: c == "ct_reversed:A", ["phase A"]),
    ("ct-reversed:M6:B", RX_ON, "phase.wiring", "M6", lambda c: c == "ct_reversed:B", ["phase B"]),
    ("phases-swapped:M1:A-B", NORMAL, "phase.wiring", "M1", lambda c: _pair_ok(c, "A-B"), ["A-B"]),
    ("phases-swapped:M3:B-C", NORMAL, "phase.wiring", "M3", lambda c: _pair_ok(c, "B-C"), ["B-C"]),
    ("phases-swapped:M5:C-A", NORMAL, "phase.wiring", "M5", lambda c: _pair_ok(c, "C-A"), ["C-A"]),
    (
        "phases-swapped:M8:A-C",
        NORMAL,
        "phase.wiring",
        "M8",
        lambda c: _pair_ok(c, "A-C"),
        ["swapped"],
    ),
    (
        "vt-ratio:M7:1.1",
        NORMAL,
        "network.bad_data",
        "M7",
        lambda c: _factor_ok(c, "vt_ratio", 1.1),
        ["VT ratio"],
    ),
    (
        "vt-ratio:M3:0.9",
        NORMAL,
        "network.bad_data",
        "M3",
        lambda c: _factor_ok(c, "vt_ratio", 0.9),
        ["VT ratio"],
    ),
    (
        "vt-ratio:M8:1.05",
        RX_ON,
        "network.bad_data",
        "M8",
        lambda c: _factor_ok(c, "vt_ratio", 1.05),
        ["VT ratio"],
    ),
    (
        "ct-ratio:M8:0.8",
        NORMAL,
        "network.bad_data",
        "M8",
        lambda c: _factor_ok(c, "ct_ratio", 0.8),
        ["CT ratio"],
    ),
    (
        "ct-ratio:M6:1.25",
        RX_ON,
        "network.bad_data",
        "M6",
        lambda c: _factor_ok(c, "ct_ratio", 1.25),
        ["CT ratio"],
    ),
    (
        "ct-ratio:M7:1.1",
        NORMAL,
        "network.bad_data",
        "M7",
        lambda c: _factor_ok(c, "ct_ratio", 1.1),
        ["CT ratio"],
    ),
    ("noisy:M1:5", NORMAL, "quality.noise", "M1", lambda c: c == "noisy", ["scatter"]),
    ("frozen:M2", NORMAL, "quality.frozen", "M2", lambda c: c == "frozen", ["not changed"]),
    ("offline:M4", NORMAL, "quality.comm", "M4", lambda c: c.startswith("comm:"), ["no good data"]),
    (
        "exception:M5:4",
        NORMAL,
        "quality.comm",
        "M5",
        lambda c: c.startswith("comm:"),
        ["exception code 4"],
    ),
]


@pytest.mark.parametrize(
    "fault,changes,check,subject,cause_ok,words", CASES, ids=[c[0] for c in CASES]
)
def test_fault_is_found_on_the_right_subject(
    engine, fault, changes, check, subject, cause_ok, words
):
    prof = engine.profile
    sw = {s.id: s.normal for s in prof.switches} | changes
    warmup = HISTORY if check in ("quality.noise", "quality.frozen") else 0
    judged = hits = 0
    for k, res in _run_series(
        engine, sw, [parse_fault(fault)], warmup + 50, seed=zlib.crc32(fault.encode())
    ):
        if k < warmup:
            continue
        judged += 1
        mine = [
            r for r in res if r.check == check and r.subject == subject and r.status is Status.FAIL
        ]
        if mine and cause_ok(mine[0].cause) and all(w in mine[0].message for w in words):
            factor = mine[0].cause.partition(":")[2]
            if not mine[0].cause.startswith(("vt_ratio", "ct_ratio")) or factor in mine[0].message:
                hits += 1  # the sentence states the same estimated factor as the cause tag
    assert hits >= 0.99 * judged, f"{fault}: {hits}/{judged}"


@pytest.fixture(scope="module")
def clean_snapshot(engine):
    prof = engine.profile
    sw = {s.id: s.normal for s in prof.switches} | {"RX": "closed", "TIE": "closed"}
    return snapshot_from_sim(prof, sw, [], np.random.default_rng(0), 1, noise=False, t_mono=0.0)


@settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(f=st.floats(0.996, 1.004))
def test_scaling_every_power_reading_inside_the_tolerance_never_fails(engine, clean_snapshot, f):
    # a common error of 0.4 %, inside the tightest class on the bench (0.5S: 0.5 %, IEC 62053-22 [M]),
    # keeps every balance and every meter-internal relation inside its limit
    blocks = {}
    for mid, b in clean_snapshot.meters.items():
        vals = {
            k: (v * f if k.split(".")[0] in ("p", "q", "s") else v) for k, v in b.values.items()
        }
        blocks[mid] = dataclasses.replace(b, values=vals)
    snap = dataclasses.replace(clean_snapshot, meters=blocks)
    assert [r for r in engine.run(snap) if r.status is Status.FAIL] == []


def test_results_are_deterministic(engine):
    prof = engine.profile
    sw = {s.id: s.normal for s in prof.switches}
    snaps = [s for s in _snapshots(prof, sw, [parse_fault("ct-ratio:M8:0.8")], 14)]
    a = CheckEngine(prof).run(snaps[-1], snaps[:-1])
    b = run_checks(prof, snaps[-1], snaps[:-1])
    assert [repr(r) for r in a] == [repr(r) for r in b]
    assert a[0].status is Status.FAIL  # failures first
    ranks = [STATUS_RANK[r.status] for r in a]
    assert ranks == sorted(ranks)


def _snapshots(prof, sw, faults, n):
    ideal = ideal_readings(prof, sw)
    rng = np.random.default_rng(3)
    prev = None
    for k in range(n):
        prev = snapshot_from_sim(
            prof, sw, faults, rng, k, ideal=ideal, t_mono=0.2 * k, previous=prev
        )
        yield prev


@settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(f=st.floats(0.997, 1.003), meter=st.sampled_from([f"M{k}" for k in range(1, 9)]))
def test_one_meter_off_inside_its_class_never_fails(engine, clean_snapshot, f, meter):
    # one meter reading 0.3 % high or low is inside every class on the bench (0.5S: 0.5 %, IEC 62053-22 [M]);
    # the bus budget (GUM RSS of the class limits, k = 2) must absorb it. The same test at 2 % does fail
    # (test_checks_network: the CT-ratio case), so this is not a check that cannot fail.
    b = clean_snapshot.meters[meter]
    vals = {k: (v * f if k.split(".")[0] in ("p", "q", "s") else v) for k, v in b.values.items()}
    snap = dataclasses.replace(
        clean_snapshot,
        meters=dict(clean_snapshot.meters) | {meter: dataclasses.replace(b, values=vals)},
    )
    assert [r for r in engine.run(snap) if r.status is Status.FAIL] == []
