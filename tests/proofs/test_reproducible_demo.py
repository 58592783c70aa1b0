"""Two demo runs with the same seed, profile and sequence, compared table by table.

What is reproducible today (asserted): the profile files, the ``meters`` and ``topology``
tables byte for byte; the ``steps`` table but for its times and settle times; the step log
and the events as a sequence of (kind/state, step, operator); the set of (step, check,
subject) in ``checks``. What differs, and why (documented in docs/dataset-format.md,
"Reproducibility"): every time column; and the readings, their count and so the check values,
because the simulated bench runs in real time and the walk settles and captures on the wall
clock, so two runs poll different instants of the same simulated transient.
"""

from __future__ import annotations

import subprocess
import sys
from collections import Counter
from pathlib import Path

import pandas as pd
import pytest
from support.benches import write_fast_demo

pytestmark = pytest.mark.long  # minutes: pytest -m long (DEVELOPERS.md)

ROOT = Path(__file__).resolve().parents[2]
TIME_COLUMNS = {
    "steps": ["settle_s", "started_utc", "ended_utc"],
    "step_log": ["id", "time_utc", "settle_s"],
}


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory) -> tuple[Path, Path]:
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
        _, err = p.communicate(timeout=300)
        assert p.returncode in (0, 1), err.decode()
    return base / "one" / "o" / "dataset", base / "two" / "o" / "dataset"


def _table(ds: Path, name: str) -> pd.DataFrame:
    return pd.read_parquet(ds / "data" / f"{name}.parquet")


@pytest.mark.slow
def test_same_seed_same_profile_same_sequence_tables_compared(two_runs):
    a, b = two_runs
    for rel in ("profile/profile.toml", "profile/feeder_bench.sequence.toml"):
        assert (a / rel).read_bytes() == (b / rel).read_bytes(), rel
    for name in ("meters", "topology"):
        for ext in ("csv", "parquet"):
            rel = f"data/{name}.{ext}"
            assert (a / rel).read_bytes() == (b / rel).read_bytes(), rel
    for name, times in TIME_COLUMNS.items():
        pd.testing.assert_frame_equal(
            _table(a, name).drop(columns=times), _table(b, name).drop(columns=times)
        )
    ea, eb = _table(a, "events"), _table(b, "events")
    assert list(zip(ea.kind, ea.step, ea.operator, strict=True)) == list(
        zip(eb.kind, eb.step, eb.operator, strict=True)
    )
    ca, cb = _table(a, "checks"), _table(b, "checks")
    assert Counter(zip(ca.step, ca.check, ca.subject, strict=True)) == Counter(
        zip(cb.step, cb.check, cb.subject, strict=True)
    )
    # session ids differ (unique within their folder) and the runs are both complete
    assert _table(a, "measurements").session.iloc[0] != "" and len(ea) == len(eb)
