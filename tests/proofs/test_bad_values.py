"""Bad values: whatever ``run``, ``demo`` and ``sim`` would refuse, ``lint`` reports first with
``file:line``; fuzzed ``[sim]`` and branch ``model`` tables and sequences never give a
traceback (hypothesis, in process, well over 1,000 cases in all); a tampered dataset gives
one line or its normal result, never a traceback.

Profiles are the invented demo bench (``profiles_demo/``) with one edit each.
"""

from __future__ import annotations

import asyncio
import contextlib
import io
import json
import math
import re
import shutil
import tempfile
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from support.benches import DEMO, TEST_SEQUENCE, fast_profile_text, write_bench
from support.invented_bench import build_session

from meas.dataset.export import export_session
from meas.errors import BenchwalkError
from meas.profile import load_profile
from meas.sim.emulator import BenchEmulator
from tui import cli

SIM_LINE = re.compile(r"(?m)^seed = 20261201$")


def _lint(path: Path) -> tuple[int, str]:
    out = io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(out):
        code = cli.main(["lint", str(path)])
    return code, out.getvalue()


def _main(*argv: str) -> tuple[int, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = cli.main(list(argv))
    return code, err.getvalue()


# ---------------------------------------------------------------- [sim] seed and friends


@pytest.mark.parametrize(
    ("value", "says"),
    [
        ("6.0", "expected an integer"),
        ("-1", "whole number"),
        ('"abc"', "expected an integer"),
        ("true", "expected an integer"),
        ("18446744073709551616", "whole number"),
    ],
)
def test_bad_sim_seed_is_reported_by_lint_and_refused_in_one_line(tmp_path, value, says):
    path = write_bench(tmp_path, edit=lambda t: SIM_LINE.sub(f"seed = {value}", t))
    line = 1 + path.read_text().splitlines().index(f"seed = {value}")
    code, out = _lint(path)
    assert code == 2 and f"{path}:{line}: sim.seed: " in out and says in out
    # sim refuses the same profile in one line (the loader is the one rule)
    code, err = _main("sim", str(path), "--free-ports")
    assert code == 2 and err.count("\n") == 1 and "sim.seed" in err and "Traceback" not in err


@pytest.mark.parametrize("flag", ["-1", "99999999999999999999"])
def test_bad_seed_option_is_one_line(tmp_path, flag):
    path = write_bench(tmp_path)
    code, err = _main("sim", str(path), "--free-ports", "--seed", flag)
    assert code == 2 and err.count("\n") == 1 and "--seed" in err
    # the demo refuses it before a session starts
    code, err = _main(
        "demo",
        "--headless",
        "--profile",
        str(path),
        "--seed",
        flag,
        "--sessions",
        str(tmp_path / "s"),
    )
    assert code == 2 and "seed" in err.splitlines()[-1] and "Traceback" not in err
    assert not (tmp_path / "s").exists() or not list((tmp_path / "s").glob("*.sqlite"))


@pytest.mark.parametrize(
    ("edit", "says"),
    [
        (lambda t: t.replace("settle_s = 0.1 ", "settle_s = -2.0 ", 1), "sim.settle_s"),
        (lambda t: t.replace("update_hz = 10", "update_hz = 2", 1), "sim.update_hz"),
        (lambda t: t.replace('transient = "damped"', 'transient = "wobbly"', 1), "sim.transient"),
    ],
)
def test_other_sim_values_are_reported_by_lint(tmp_path, edit, says):
    path = write_bench(tmp_path, edit=lambda t: edit(t))
    code, out = _lint(path)
    assert code == 2 and says in out and re.search(rf"{re.escape(str(path))}:\d+: {says}", out)


# ---------------------------------------------------------------- sequences lint must refuse


def test_a_sequence_with_no_steps_is_reported_by_lint_with_its_file(tmp_path):
    path = write_bench(tmp_path, sequence="# no steps yet\n")
    code, out = _lint(path)
    seq = tmp_path / "feeder_bench.sequence.toml"
    assert code == 2 and f"{seq}:1: sequence: the sequence has no steps" in out


def test_a_manual_step_that_changes_nothing_is_reported_at_its_line(tmp_path):
    # the "tie" step closes TIE by hand; expecting it open (as it already is) changes nothing
    sequence = TEST_SEQUENCE.replace('expect = { TIE = "closed" }', 'expect = { TIE = "open" }')
    path = write_bench(tmp_path, sequence=sequence)
    code, out = _lint(path)
    seq = tmp_path / "feeder_bench.sequence.toml"
    line = 1 + seq.read_text().splitlines().index('expect = { TIE = "open" }')
    assert (
        code == 2
        and f"{seq}:{line}: step[3] tie: expect: this manual step changes no switch" in out
    )
    # and the session refuses the same profile before it starts (same rule, same words)
    with pytest.raises(BenchwalkError, match="changes no switch"):
        asyncio.run(_start(path, tmp_path / "sessions"))
    assert not (tmp_path / "sessions").exists()


async def _start(path: Path, sessions: Path) -> None:
    from meas.session import Session

    s = await Session.new(path, "T", sessions_dir=sessions, simulate=True)
    await s.close()


# ---------------------------------------------------------------- fuzz: lint, then the bench


def _toml(v: object) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v).replace("e+", "e")
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{json.dumps(k)} = {_toml(x)}" for k, x in v.items()) + " }"
    raise TypeError(v)


scalars = st.one_of(
    st.integers(-(2**64), 2**64),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0, 1, -1, 6.0, 1e400, -0.0, 1e-300, 1e300, 10, 20, 1000]),
    st.text(max_size=8),
    st.sampled_from(["abc", "damped", "first_order", "pq", "z", "zip", ""]),
    st.booleans(),
)
values = st.one_of(scalars, st.lists(scalars, max_size=4))
SIM_KEYS = ["seed", "settle_s", "transient", "update_hz", "extra"]
plausible = st.floats(min_value=-10.0, max_value=1e6, allow_nan=False)
# each [sim] key valid about half the time, so many cases get past lint to the bench itself
sim_tables = st.fixed_dictionaries(
    {},
    optional={
        "seed": st.one_of(st.integers(0, 2**63 - 1), values),
        "settle_s": st.one_of(st.floats(0.0, 60.0), values),
        "transient": st.one_of(st.sampled_from(["first_order", "damped"]), values),
        "update_hz": st.one_of(st.floats(10.0, 200.0), values),
        "extra": values,
    },
)
MODEL_KEYS = ["r_ohm", "x_ohm", "b_us", "v_ll", "sc_va", "x_r", "model", "p_w", "q_var", "zip"]
MODEL_LINE = re.compile(r"(?m)^model = \{.*\}$")


def _exercise(text: str, sequence: str | None = None) -> None:
    """lint the profile; when it passes, the simulated bench must build and run without error."""
    with tempfile.TemporaryDirectory() as tmp:
        path = write_bench(Path(tmp), edit=lambda _t: text, sequence=sequence or TEST_SEQUENCE)
        code, out = _lint(path)
        assert code in (0, 2), out
        assert "Traceback" not in out
        if code != 0:
            assert out.strip().splitlines()[-1].endswith(str(path))
            return
        profile = load_profile(path)
        bench = BenchEmulator(profile)  # what sim, demo and resume build first
        for t in (0.0, 0.5, 5.0):
            bench.compute(t)


BASE = (DEMO.parent / "feeder_bench.toml").read_text()
FAST_BASE = fast_profile_text(BASE)


@pytest.mark.slow
@settings(max_examples=450, deadline=None, suppress_health_check=list(HealthCheck))
@given(sim_tables)
def test_fuzzed_sim_tables_never_give_a_traceback(table):
    body = "\n".join(f"{k} = {_toml(v)}" for k, v in table.items())
    text = re.sub(
        r"(?ms)^\[sim\]\n.*?(?=^\n)", lambda _m: "[sim]\n" + body + "\n", FAST_BASE, count=1
    )
    _exercise(text)


@pytest.mark.slow
@settings(max_examples=450, deadline=None, suppress_health_check=list(HealthCheck))
@given(
    st.integers(0, 8),
    st.dictionaries(st.sampled_from(MODEL_KEYS), st.one_of(plausible, values), max_size=3),
    st.booleans(),
)
def test_fuzzed_model_tables_never_give_a_traceback(which, change, replace):
    """One branch's model table replaced, or (half the time) edited a key or two."""
    import tomllib

    lines = list(MODEL_LINE.finditer(FAST_BASE))
    m = lines[which % len(lines)]
    table = change if replace else {**tomllib.loads(m.group(0))["model"], **change}
    text = FAST_BASE[: m.start()] + f"model = {_toml(table)}" + FAST_BASE[m.end() :]
    _exercise(text)


SWITCHES = ["CB1", "SW2", "SW3", "TIE", "RX", "LB2", "NOPE"]
step_tables = st.fixed_dictionaries(
    {
        "id": st.sampled_from(["a", "b", "c", "d", ""]),
        "title": st.just("t"),
        "kind": st.sampled_from(["manual", "remote", "capture", "hold", "note", "weird"]),
        "instruction": st.just("do it"),
    },
    optional={
        "expect": st.dictionaries(
            st.sampled_from(SWITCHES), st.sampled_from(["open", "closed", "ajar"]), max_size=3
        ),
        "operate": st.dictionaries(
            st.sampled_from(SWITCHES), st.sampled_from(["open", "closed"]), max_size=2
        ),
        "capture": st.one_of(
            st.booleans(),
            st.fixed_dictionaries(
                {"snapshots": scalars, "interval_s": scalars},
                optional={
                    "settle": st.dictionaries(
                        st.sampled_from(["window_s", "rel_spread", "timeout_s"]),
                        scalars,
                        max_size=3,
                    )
                },
            ),
        ),
        "gate": st.sampled_from(["block", "allow", "maybe"]),
    },
)


@pytest.mark.slow
@settings(max_examples=300, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.lists(step_tables, max_size=5))
def test_fuzzed_sequences_never_give_a_traceback(steps):
    sequence = "\n".join(
        "[[step]]\n" + "\n".join(f"{k} = {_toml(v)}" for k, v in step.items()) + "\n"
        for step in steps
    )
    _exercise(FAST_BASE, sequence)


@pytest.mark.slow
@settings(max_examples=25, deadline=None, suppress_health_check=list(HealthCheck))
@given(sim_tables)
def test_fuzzed_sim_tables_through_a_real_sim_start(table):
    """The real servers (loopback, free ports): a profile lint passes starts and stops cleanly."""
    from meas.sim.bench import SimulatedBench

    body = "\n".join(f"{k} = {_toml(v)}" for k, v in table.items())
    text = re.sub(
        r"(?ms)^\[sim\]\n.*?(?=^\n)", lambda _m: "[sim]\n" + body + "\n", FAST_BASE, count=1
    )
    with tempfile.TemporaryDirectory() as tmp:
        path = write_bench(Path(tmp), edit=lambda _t: text)
        code, out = _lint(path)
        assert code in (0, 2) and "Traceback" not in out
        if code:
            return

        async def go() -> None:
            async with SimulatedBench(load_profile(path), port_map="free") as bench:
                assert bench.listening()

        asyncio.run(go())


# ---------------------------------------------------------------- tampered datasets


@pytest.fixture(scope="module")
def dataset(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("tamper")
    return export_session(build_session(folder, n_snapshots=6, n_meters=2), folder / "ds")


def _copy_and_change(src: Path, dest: Path, table: str, change) -> Path:
    shutil.copytree(src, dest)
    p = dest / "data" / f"{table}.parquet"
    pq.write_table(change(pq.read_table(p)), p)
    _reseal(dest)
    return dest


def _reseal(folder: Path) -> None:
    """datapackage.json agrees with the files again (as a careless editor would leave it)."""
    import hashlib

    dp = folder / "datapackage.json"
    pkg = json.loads(dp.read_text())
    for r in pkg["resources"]:
        for entry in (r, r.get("benchwalk:parquet", {})):
            p = folder / entry["path"]
            entry["hash"] = "sha256:" + hashlib.sha256(p.read_bytes()).hexdigest()
            entry["bytes"] = p.stat().st_size
    dp.write_text(json.dumps(pkg))


def test_events_with_1e400_give_no_traceback(dataset, tmp_path):
    history = '{"history": [1e400, 2, "x", null], "snapshot": 1e400}'

    def change(t: pa.Table) -> pa.Table:
        kinds = pa.array(["check_history"] * t.num_rows)
        t = t.set_column(t.schema.names.index("kind"), "kind", kinds)
        return t.set_column(t.schema.names.index("data"), "data", pa.array([history] * t.num_rows))

    ds = _copy_and_change(dataset, tmp_path / "ds", "events", change)
    for argv in (["check", str(ds)], ["report", str(ds), "--out", str(tmp_path / "r.html")]):
        code, err = _main(*argv)
        assert code in (0, 1, 2) and "Traceback" not in err
        assert err.count("\n") <= 1


@pytest.mark.parametrize(
    ("table", "column"),
    [
        ("measurements", "value"),
        ("measurements", "iec61850"),
        ("checks", "status"),
        ("events", "data"),
    ],
)
def test_a_missing_parquet_column_is_one_short_line(dataset, tmp_path, table, column):
    ds = _copy_and_change(dataset, tmp_path / "ds", table, lambda t: t.drop_columns([column]))
    for argv in (["check", str(ds)], ["report", str(ds), "--out", str(tmp_path / "r.html")]):
        code, err = _main(*argv)
        assert code == 2 and err.count("\n") == 1, err
        assert f"{table} lacks the column(s) {column}" in err and len(err) < 300
