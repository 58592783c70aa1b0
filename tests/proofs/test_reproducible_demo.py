"""Two demo runs with the same seed, profile and sequence, compared table by table.

Every column of every table is compared; only the columns docs/dataset-format.md
("Reproducibility") names may differ: the times (wall clock), how long a poll took, and the
session id wherever it is written. Everything else, the readings and check values included,
must be equal exactly: the simulated bench runs on simulated time counted in poll cycles
(``meas.sim.clock``) with noise drawn per (seed, meter, cycle), and a headless walk on it runs
its cycles in lockstep with the simulated technician (``Session.views``).

The short sequence (``support.benches.TEST_SEQUENCE``: a capture, a remote command, a hold
point, a manual step and a note) runs in-process in the default run; the whole demo
sequence, through the command line in two processes at once, is a long proof.
"""

from __future__ import annotations

import io
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from support.benches import TEST_SEQUENCE, write_bench, write_fast_demo

from meas.dataset.export import export_session
from meas.profile import load_profile
from meas.session import SIM_OPERATOR, Session, create_journal
from tui.commands.headless import drive
from tui.commands.technicians import SimTechnician

ROOT = Path(__file__).resolve().parents[2]

# The columns that may differ between two runs with the same seed (docs/dataset-format.md,
# "Reproducibility"); the session id is also replaced by a placeholder in every text column.
MAY_DIFFER = {
    "snapshots": {"time_utc", "saved_utc", "cycle_s"},
    "polls": {"latency_s", "last_good_utc"},
    "measurements": {"time_utc"},
    "events": {"time_utc"},
    "step_log": {"time_utc"},
    "steps": {"started_utc", "ended_utc"},
}


def _tables(ds: Path) -> dict[str, pd.DataFrame]:
    return {f.stem: pd.read_parquet(f) for f in sorted((ds / "data").glob("*.parquet"))}


def _without_session_id(df: pd.DataFrame, session_id: str) -> pd.DataFrame:
    out = df.copy()
    for col in out.columns:
        if out[col].dtype == object or pd.api.types.is_string_dtype(out[col]):
            out[col] = out[col].map(
                lambda v: v.replace(session_id, "<session>") if isinstance(v, str) else v
            )
    return out


def differing_columns(a: Path, b: Path) -> dict[str, set[str]]:
    """Per table, the columns whose values differ (the session ids made equal first)."""
    ta, tb = _tables(a), _tables(b)
    assert ta.keys() == tb.keys()
    sa, sb = (str(t["measurements"].session.iloc[0]) for t in (ta, tb))
    out: dict[str, set[str]] = {}
    for name in ta:
        x, y = ta[name], tb[name]
        assert list(x.columns) == list(y.columns), name
        assert len(x) == len(y), f"{name}: {len(x)} rows against {len(y)}"
        x, y = _without_session_id(x, sa), _without_session_id(y, sb)
        differ = {
            c
            for c in x.columns
            if not x[c].reset_index(drop=True).equals(y[c].reset_index(drop=True))
        }
        if differ:
            out[name] = differ
    return out


def assert_same_but_times(a: Path, b: Path) -> None:
    for rel in ("profile/profile.toml", "profile/feeder_bench.sequence.toml"):
        assert (a / rel).read_bytes() == (b / rel).read_bytes(), rel
    for name, cols in differing_columns(a, b).items():
        assert cols <= MAY_DIFFER.get(name, set()), f"{name}: {sorted(cols)} differ"


async def _headless_demo(profile: Path, folder: Path, session_id: str, seed: int) -> Path:
    session = await Session.new(
        profile,
        SIM_OPERATOR,
        sessions_dir=folder / "s",
        session_id=session_id,
        simulate=True,
        seed=seed,
        live_checks=False,
    )
    try:
        await drive(session, SimTechnician(session, SIM_OPERATOR, out=io.StringIO()), io.StringIO())
        assert session.runner.finished
    finally:
        await session.close()
    return export_session(session.path, folder / "dataset")


@pytest.fixture(scope="module")
def short_runs(tmp_path_factory) -> tuple[Path, Path, Path]:
    import asyncio

    base = tmp_path_factory.mktemp("repro-short")
    profile = write_bench(base / "bench", TEST_SEQUENCE)

    async def three() -> tuple[Path, Path, Path]:
        one = await _headless_demo(profile, base / "one", "run-one", 7)
        two = await _headless_demo(profile, base / "two", "run-two", 7)
        other = await _headless_demo(profile, base / "other", "run-other", 8)
        return one, two, other

    return asyncio.run(three())


@pytest.mark.slow  # three short headless walks: about 20 s here
def test_same_seed_gives_the_same_dataset_but_times_and_session_id(short_runs):
    one, two, _ = short_runs
    assert_same_but_times(one, two)
    # the readings are really compared: the steps captured, the snapshots noisy
    m = pd.read_parquet(one / "data" / "measurements.parquet")
    assert len(m) > 1000 and m.groupby(["meter", "quantity", "phase"]).value.nunique().max() > 1


@pytest.mark.slow
def test_another_seed_gives_other_readings(short_runs):
    one, _, other = short_runs
    differ = differing_columns(one, other)
    assert "value" in differ.get("measurements", set())  # the noise follows the seed


def test_two_sessions_started_in_the_same_second_get_two_ids(tmp_path):
    profile = load_profile(write_bench(tmp_path / "b", TEST_SEQUENCE))
    first = create_journal(
        profile, "A. Tech", None, tmp_path / "s", {}, base_id="20261202-101500-x"
    )
    second = create_journal(
        profile, "A. Tech", None, tmp_path / "s", {}, base_id="20261202-101500-x"
    )
    try:
        assert first.session_id == "20261202-101500-x"
        assert second.session_id == "20261202-101500-x-2"
        assert first.path != second.path and first.path.exists() and second.path.exists()
    finally:
        first.close()
        second.close()


@pytest.fixture(scope="module")
def whole_demo_runs(tmp_path_factory) -> tuple[Path, Path]:
    base = tmp_path_factory.mktemp("repro")
    profile = write_fast_demo(base / "bench")
    procs = []
    for name in ("one", "two"):
        cmd = [sys.executable, "-m", "tui.cli", "demo", "--headless", "--profile", str(profile)]
        cmd += ["--sessions", str(base / name / "s"), "--out", str(base / name / "o")]
        cmd += ["--seed", "7"]
        procs.append(
            subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
        )
    for p in procs:
        _, err = p.communicate(timeout=600)
        assert p.returncode in (0, 1), err.decode()
    return base / "one" / "o" / "dataset", base / "two" / "o" / "dataset"


@pytest.mark.long  # minutes: pytest -m long (DEVELOPERS.md)
@pytest.mark.slow
def test_whole_demo_twice_same_seed_tables_compared_column_by_column(whole_demo_runs):
    a, b = whole_demo_runs
    assert_same_but_times(a, b)
    for name in ("meters", "topology"):
        for ext in ("csv", "parquet"):
            rel = f"data/{name}.{ext}"
            assert (a / rel).read_bytes() == (b / rel).read_bytes(), rel
