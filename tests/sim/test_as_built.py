"""The as-built simulated bench: a true network off the nameplate, within tolerance or by given
factors, served over real loopback Modbus while the profile keeps its nameplate model.

Check values: the tolerance limits are those of ``meas.network.parameters`` (IEC 60076-1 and
the others named there); I^2 R losses scale with R (textbook); the noise limits are those of
docs/faults.md.
"""

from __future__ import annotations

import asyncio
import dataclasses
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from pymodbus.client import AsyncModbusTcpClient
from support.benches import DEMO, write_bench
from support.meshed_bench import (
    meshed_bench,
)

from meas.dataset.read import load_dataset
from meas.errors import BenchwalkError
from meas.modbus.codec import decode
from meas.model import LineParams, LoadParams, TransformerParams
from meas.network.parameters import model_parameters
from meas.profile import load_profile
from meas.session import Session
from meas.sim.as_built import (
    as_built,
    from_meta,
    parse_model_error,
    parse_seed,
)
from meas.sim.readings import ideal_readings
from meas.snapshot import CommState
from tui.cli import main as cli_main

ROOT = Path(__file__).resolve().parents[2]
SEEDS = range(60)


@pytest.fixture(scope="module")
def demo():
    return load_profile(DEMO)


@pytest.fixture(scope="module")
def meshed():
    return meshed_bench()[0]


def branch_model(branches, branch_id):
    return next(b for b in branches if b.id == branch_id).model


# ---------------------------------------------------------------- draws


@pytest.mark.parametrize("bench", ["demo", "meshed"])
def test_seeded_draws_stay_within_each_limit_and_use_it(bench, request):
    profile = request.getfixturevalue(bench)
    params = model_parameters(profile.branches)
    spread = {p.name: [] for p in params}
    for seed in SEEDS:
        built = as_built(profile, seed)
        assert [a.parameter.name for a in built.applied] == [p.name for p in params]
        for a in built.applied:
            p = a.parameter
            assert a.origin == "drawn"
            assert abs(a.value - p.nominal) <= p.limit * (1 + 1e-12), (seed, p.name)
            assert a.within_tolerance
            if p.limit > 0:
                spread[p.name].append((a.value - p.nominal) / p.limit)
    # a uniform draw over 60 seeds reaches past 70 % of the limit on both sides (the chance it
    # does not is below 2 x 0.65^60, about 1e-11): the limit is used, not a fraction of it
    for name, u in spread.items():
        if u:
            assert min(u) < -0.7 and max(u) > 0.7, name


def test_stated_tolerances_of_the_profile_are_the_limits(meshed):
    built = as_built(meshed, 11)
    by_name = {a.parameter.name: a for a in built.applied}
    # the meshed profile states T1 uk_pct 7.5 %, tap_pct 0.5 points, L5 r_ohm 5 %
    assert by_name["T1.uk_pct"].parameter.limit == pytest.approx(4.5 * 0.075)
    assert by_name["T1.tap_pct"].parameter.limit == pytest.approx(0.5)
    assert by_name["T1.tap_pct"].parameter.scale == "absolute"
    assert by_name["L5.r_ohm"].parameter.limit == pytest.approx(0.06 * 0.05)
    assert abs(by_name["T1.tap_pct"].value - (-2.5)) <= 0.5
    # the line given per km is drawn per km
    assert "L3.r_ohm_per_km" in by_name


def test_a_seed_gives_the_same_network_every_time_and_another_seed_another(demo):
    a, b, c = as_built(demo, 7), as_built(demo, 7), as_built(demo, 8)
    assert a.values == b.values
    assert a.branches == b.branches
    assert [x.model for x in a.branches] == [x.model for x in b.branches]
    differ = [n for n in a.values if a.values[n] != c.values[n] and a.values[n] != 0]
    assert len(differ) == sum(1 for v in a.values.values() if v != 0)
    # the value this implementation drew for seed 7 when it was written: it pins the stream
    # (seed + CRC-32 of the name into numpy's PCG64), so a seed recorded in a dataset keeps
    # meaning the same network
    assert a.values["L2.x_ohm"] == pytest.approx(0.17602071411432205, rel=1e-12)


def test_a_draw_depends_only_on_the_seed_and_the_parameter(demo):
    alone = as_built(demo, 7)
    with_factor = as_built(demo, 7, {"L1.r_ohm": 1.1})
    # the source and the two trunk sections alone, no meters or switches
    small = dataclasses.replace(demo, branches=demo.branches[:3], meters=(), switches=())
    fewer = as_built(small, 7)
    for name in ("SRC.v_ll", "L1.x_ohm", "L2.r_ohm"):
        assert alone.values[name] == with_factor.values[name] == fewer.values[name]


# ---------------------------------------------------------------- explicit factors


def test_explicit_factors_set_the_value_relative_to_the_nameplate(demo, meshed):
    built = as_built(demo, None, {"L2.r_ohm": 1.2, "LD2.p_w": 1.1})
    assert built.seed is None
    assert [a.parameter.name for a in built.applied] == ["L2.r_ohm", "LD2.p_w"]
    assert all(a.origin == "given" for a in built.applied)
    l2 = branch_model(built.branches, "L2")
    assert isinstance(l2, LineParams)
    assert l2.r_ohm == pytest.approx(0.12 * 1.2)  # profile 0.12 ohm x 1.2
    assert l2.x_ohm == 0.15  # untouched
    ld2 = branch_model(built.branches, "LD2")
    assert isinstance(ld2, LoadParams)
    # a per-phase load scales phase by phase: profile [2500, 1500, 1000] W x 1.1
    assert ld2.p_w == pytest.approx((2750.0, 1650.0, 1100.0))
    untouched = [b.id for b in built.branches if b.model == branch_model(demo.branches, b.id)]
    assert sorted(untouched) == sorted({b.id for b in demo.branches} - {"L2", "LD2"})

    tap = as_built(meshed, None, {"T1.tap_pct": -1.0, "L3.r_ohm": 1.1})
    t1 = branch_model(tap.branches, "T1")
    assert isinstance(t1, TransformerParams)
    assert t1.tap_pct == pytest.approx(-3.5)  # an offset in points: -2.5 - 1
    assert tap.applied[-1].factor == pytest.approx(-1.0)
    assert not tap.applied[-1].within_tolerance  # 1 point beyond the stated 0.5
    l3 = branch_model(tap.branches, "L3")
    assert isinstance(l3, LineParams)
    assert l3.length_km == 0.4
    assert l3.r_ohm == pytest.approx(0.55 * 1.1)  # per km: "L3.r_ohm" means r_ohm_per_km


def test_an_explicit_factor_overrides_the_draw_and_leaves_the_rest(demo):
    drawn = as_built(demo, 7)
    mixed = as_built(demo, 7, {"L2.r_ohm": 1.2})
    assert mixed.values["L2.r_ohm"] == pytest.approx(0.144)
    assert {a.parameter.name: a.origin for a in mixed.applied}["L2.r_ohm"] == "given"
    assert {n: v for n, v in mixed.values.items() if n != "L2.r_ohm"} == {
        n: v for n, v in drawn.values.items() if n != "L2.r_ohm"
    }


def test_the_true_network_changes_the_load_flow_as_the_factor_says(demo):
    """Series losses scale with R at nearly the same current (I^2 R, textbook)."""
    true = as_built(demo, None, {"L2.r_ohm": 1.2}).profile(demo)
    plate, real = ideal_readings(demo, {}).meters, ideal_readings(true, {}).meters
    loss = {n: m["M2"]["p.T"] + m["M7"]["p.T"] for n, m in (("plate", plate), ("real", real))}
    assert loss["real"] / loss["plate"] == pytest.approx(1.2, rel=0.01)
    # and the nameplate profile object is untouched: its own load flow did not move
    assert branch_model(demo.branches, "L2").r_ohm == 0.12


def test_meta_round_trip_rebuilds_the_same_network(demo):
    built = as_built(demo, 7, {"L2.r_ohm": 1.2})
    meta = built.meta(["L2.r_ohm:1.2"])
    assert meta["seed"] == 7 and meta["model_errors"] == ["L2.r_ohm:1.2"]
    again = from_meta(demo, {"as_built": meta})
    assert again is not None and again.values == built.values and again.seed == 7
    assert from_meta(demo, {"simulated": True}) is None


# ---------------------------------------------------------------- bad values


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("L2.r_ohm", "write BRANCH.KEY:FACTOR"),
        ("r_ohm:1.2", "write BRANCH.KEY:FACTOR"),
        ("L2.r_ohm:abc", "not a number"),
        ("L2.r_ohm:nan", "finite"),
    ],
)
def test_model_error_syntax_is_one_line(text, words):
    with pytest.raises(BenchwalkError) as err:
        parse_model_error(text)
    assert "--model-error" in str(err.value) and words in str(err.value)
    assert "\n" not in str(err.value)


@pytest.mark.parametrize("text", ["x", "-1", "1.5", ""])
def test_a_seed_must_be_a_whole_number(text):
    with pytest.raises(BenchwalkError, match="--as-built"):
        parse_seed(text)


@pytest.mark.parametrize(
    ("factors", "words"),
    [
        ({"L9.r_ohm": 1.1}, "L9 is not a branch"),
        ({"L2.q_var": 1.1}, "L2 has r_ohm, x_ohm, b_us"),
        ({"L2.r_ohm": 0.0}, "above 0"),
        ({"L2.r_ohm": -1.0}, "above 0"),
        ({"L2.r_ohm": 50.0}, "at most 10"),
        ({"SH1.p_w": 1.1}, "is 0 in the profile"),
    ],
)
def test_unknown_parameters_and_bad_factors_are_refused(demo, factors, words):
    with pytest.raises(BenchwalkError, match=words) as err:
        as_built(demo, None, factors)
    assert "--model-error" in str(err.value) and "\n" not in str(err.value)


def test_a_network_the_load_flow_cannot_model_is_refused(meshed):
    # ur_pct must stay below uk_pct (docs/profile-format.md): 1.5 x 4 = 6 > 4.5
    with pytest.raises(BenchwalkError, match="not one the load flow can model"):
        as_built(meshed, None, {"T1.ur_pct": 4.0})


def test_a_network_whose_load_flow_diverges_is_refused_before_it_starts(demo):
    # ten times every load behind a tenth of the short-circuit power: no operating point
    errors = {"LD1.p_w": 10.0, "LD3.p_w": 10.0, "SRC.sc_va": 0.1}
    with pytest.raises(BenchwalkError, match="does not converge") as err:
        as_built(demo, None, errors)
    assert str(err.value).startswith("--model-error")


@pytest.mark.parametrize("command", ["sim", "demo"])
@pytest.mark.parametrize(
    "option",
    [
        ["--as-built", "seven"],
        ["--as-built", "-1"],
        ["--model-error", "L2.r_ohm:0"],
        ["--model-error", "L2.r_ohm:-2"],
        ["--model-error", "L2.r_ohm:x"],
        ["--model-error", "L9.r_ohm:1.2"],
        ["--model-error", "L2.r:1.2"],
    ],
)
def test_bad_option_values_exit_2_with_one_line_before_anything_starts(
    command, option, tmp_path, capsys
):
    sessions = tmp_path / "sessions"
    if command == "sim":
        argv = ["sim", str(DEMO), "--free-ports", *option]
    else:
        argv = ["demo", "--headless", "--sessions", str(sessions), "--out", str(tmp_path), *option]
    assert cli_main(argv) == 2
    out, err = capsys.readouterr()
    assert out == ""  # no caution, no endpoint list: nothing started
    lines = err.strip().splitlines()
    assert len(lines) == 1 and option[0] in lines[0], err
    assert not sessions.exists()


async def test_as_built_options_on_a_real_bench_are_refused(tmp_path):
    with pytest.raises(BenchwalkError, match="simulated bench only"):
        await Session.new(DEMO, "t", sessions_dir=tmp_path / "s", simulate=False, as_built_seed=3)
    assert not tmp_path.joinpath("s").exists() and list(tmp_path.iterdir()) == []


# ---------------------------------------------------------------- over real Modbus


async def polled(session: Session):
    """One snapshot in which every meter answered."""
    snaps = []

    async def poll() -> bool:
        snaps.append(await session.poller.poll_once())
        return all(b.state is CommState.OK for b in snaps[-1].meters.values())

    for _ in range(50):
        if await poll():
            return snaps[-1]
    raise AssertionError("the simulated meters did not all answer in 50 polls")


async def test_the_served_registers_are_the_true_network_and_resume_keeps_it(tmp_path):
    """Noise off, float32 registers: the meters read the perturbed load flow to float32
    resolution, and differ from the nameplate one by far more."""
    path = write_bench(tmp_path / "bench")
    nameplate = load_profile(path)
    session = await Session.new(
        path,
        "t",
        sessions_dir=tmp_path / "s",
        simulate=True,
        noise=False,
        model_errors=["L2.r_ohm:1.2"],
    )
    try:
        assert session.profile.branch("L2").model.r_ohm == 0.12  # the checks keep the nameplate
        rows = session.journal.meta["as_built"]["parameters"]
        assert [(r["name"], r["value"], r["origin"]) for r in rows] == [
            ("L2.r_ohm", pytest.approx(0.144), "given")
        ]
        snap = await polled(session)
    finally:
        await session.close()
    true = as_built(nameplate, None, {"L2.r_ohm": 1.2}).profile(nameplate)
    states = dict(snap.switches)
    real, plate = ideal_readings(true, states).meters, ideal_readings(nameplate, states).meters
    v_real, v_plate = real["M7"]["v_ln.A"], plate["M7"]["v_ln.A"]
    assert abs(v_real - v_plate) / v_plate > 5e-4  # the two models differ here (0.1 %)
    for key in ("v_ln.A", "v_ln.C", "i.B", "p.T", "q.T"):
        got = snap.meters["M7"].get(key)
        assert got == pytest.approx(real["M7"][key], rel=2e-6), key
    assert abs(snap.meters["M7"].get("v_ln.A") - v_plate) > 100 * 2e-6 * v_plate

    resumed = await Session.resume(session.session_id, sessions_dir=tmp_path / "s")
    try:
        again = await polled(resumed)
    finally:
        await resumed.close()
    assert again.meters["M7"].get("v_ln.A") == pytest.approx(v_real, rel=2e-6)


async def test_the_console_starts_the_same_as_built_bench(tmp_path):
    """The console's session factory passes the options through (``tui.launch``)."""
    from tui.launch import make_factory

    path = write_bench(tmp_path / "bench")
    factory, name, _ = make_factory(
        path, sessions_dir=tmp_path / "s", as_built_seed="3", model_errors=("L2.r_ohm:1.2",)
    )
    assert name == "Kestrel Hollow feeder bench (simulated, as built)"
    session = await factory("t", None)
    try:
        meta = session.journal.meta["as_built"]
        assert meta["seed"] == 3 and meta["model_errors"] == ["L2.r_ohm:1.2"]
        assert session.bench is not None
    finally:
        await session.close()


def benchwalk(*args: str, timeout: float = 180.0) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "tui.cli", *args],
        capture_output=True,
        text=True,
        timeout=timeout,
        cwd=ROOT,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
    )


@pytest.mark.slow
def test_headless_demo_as_built_reads_the_perturbed_load_flow(tmp_path):
    path = write_bench(tmp_path / "bench")
    run = benchwalk(
        "demo",
        "--headless",
        "--profile",
        str(path),
        "--sessions",
        str(tmp_path / "s"),
        "--out",
        str(tmp_path / "out"),
        "--seed",
        "11",
        "--as-built",
        "7",
        "--model-error",
        "L2.r_ohm:1.2",
    )
    assert run.returncode == 0, run.stdout[-2000:] + run.stderr
    assert "simulated bench, as-built network: seed 7" in run.stdout
    assert "L2.r_ohm x1.2" in run.stdout
    ds = load_dataset(tmp_path / "out" / "dataset")
    meta = ds.meta["meta"]
    assert meta["simulated"] is True and meta["as_built"]["seed"] == 7
    values = {r["name"]: r["value"] for r in meta["as_built"]["parameters"]}
    assert values["L2.r_ohm"] == pytest.approx(0.144)

    nameplate = ds.load_profile()
    true = as_built(nameplate, 7, {"L2.r_ohm": 1.2})
    assert true.values == pytest.approx(values)
    # the first step captures the radial base case the bench starts in (no switching)
    states = {"CB1": "closed", "SW2": "closed", "SW3": "closed", "TIE": "open"}
    states |= {"RX": "open", "LB2": "closed"}
    real = ideal_readings(true.profile(nameplate), states).meters
    plate = ideal_readings(nameplate, states).meters
    m = ds["measurements"]
    cap = m[(m.step == "radial") & (m.role == "capture") & (m.quality == "ok")]
    assert cap.snapshot.nunique() == 2
    compared = 0
    for meter in sorted(real):
        for key in ("v_ln.A", "v_ln.B", "v_ln.C", "i.A", "i.B", "i.C"):
            quantity, phase = key.split(".")
            got = cap[(cap.meter == meter) & (cap.quantity == quantity) & (cap.phase == phase)]
            want, other = real[meter][key], plate[meter][key]
            if want < 1.0:  # no current through an open tie or a reactor that is off
                continue
            # noise is clipped at half the class limit (docs/faults.md): 0.5 % class -> 0.25 %,
            # 1 % -> 0.5 %; 16-bit registers add 0.01 V or 1 mA
            limit = 0.005 * want + 0.01
            assert len(got) == 2
            assert np.all(np.abs(got.value.to_numpy() - want) <= limit), (meter, key)
            # the nameplate load flow is well outside that: this is the true network
            if abs(want - other) > 4 * limit:
                assert np.all(np.abs(got.value.to_numpy() - other) > 2 * limit), (meter, key)
                compared += 1
    assert compared >= 12  # the seed moved the source voltage 3.8 %: every voltage tells


@pytest.mark.slow
def test_sim_command_prints_the_applied_values_and_serves_the_true_network():
    proc = subprocess.Popen(
        [sys.executable, "-m", "tui.cli", "sim", str(DEMO), "--free-ports", "--no-noise"]
        + ["--as-built", "7", "--model-error", "L2.r_ohm:1.2"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env={**os.environ, "PYTHONUNBUFFERED": "1", "PYTHONPATH": str(ROOT)},
        cwd=ROOT,
    )
    try:
        lines: list[str] = []
        deadline = time.monotonic() + 30.0
        while not any(line.startswith("SIMULATION") for line in lines):
            assert time.monotonic() < deadline and proc.poll() is None, lines
            lines.append(proc.stdout.readline().rstrip("\n"))  # type: ignore[union-attr]
        text = "\n".join(lines)
        assert (
            "as-built network: seed 7, 22 parameters drawn within tolerance; L2.r_ohm x1.2" in text
        )
        assert "L2.r_ohm 0.12 -> 0.144 (x1.2000, given)" in text
        m7 = re.search(r"meter\s+M7\s+tcp://127\.0\.0\.1:(\d+)\s+unit 1", text)
        assert m7, text

        async def read_v() -> float:
            c = AsyncModbusTcpClient("127.0.0.1", port=int(m7.group(1)), timeout=1.0, retries=0)
            await c.connect()
            rr = await c.read_input_registers(0, count=2, device_id=1)
            c.close()
            return decode(load_profile(DEMO).maps["lumen-f32"].spec("v_ln.A"), rr.registers)

        v = asyncio.run(read_v())
    finally:
        proc.send_signal(signal.SIGINT)
        proc.wait(timeout=20)
    nameplate = load_profile(DEMO)
    true = as_built(nameplate, 7, {"L2.r_ohm": 1.2}).profile(nameplate)
    want = ideal_readings(true, {}).meters["M7"]["v_ln.A"]
    other = ideal_readings(nameplate, {}).meters["M7"]["v_ln.A"]
    assert v == pytest.approx(want, rel=2e-6)  # float32 register, no noise
    assert abs(v - other) > 0.01 * other
