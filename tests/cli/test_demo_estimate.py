"""(Long: about four minutes on a loaded 2-core machine.) The whole headless demo, with and without a VT ratio set 10 % high on the lone lateral meter
M5 (``--fault vt-ratio:M5:1.1``): the dataset's meter_gains table and the report's first page.

The demo bench and its fast copy are invented (tests/support/benches.py). Expected: the
estimator's contract (issue 11): the faulty meter's voltage gain is 1.1 and beyond its class
(class 0.5, limit 0.005), every other gain of both runs within its class.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from support.benches import write_fast_demo

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def demos(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """Both demos start at once (each mostly waits on the bench's timing, not the CPU)."""
    base = tmp_path_factory.mktemp("demo-estimate")
    profile = write_fast_demo(base / "bench")
    procs = {}
    for name, extra in (("clean", []), ("vt", ["--fault", "vt-ratio:M5:1.1"])):
        folder = base / name
        cmd = [sys.executable, "-m", "tui.cli", "demo", "--headless", "--seed", "5", "-q",
               "--out", str(folder / "out"), "--profile", str(profile),
               "--sessions", str(folder / "sessions"), *extra]  # fmt: skip
        procs[name] = (folder, subprocess.Popen(cmd, cwd=ROOT, stderr=subprocess.PIPE, text=True))
    out = {}
    try:
        for name, (folder, proc) in procs.items():
            _, err = proc.communicate(timeout=900)
            assert proc.returncode in (0, 1), err[-2000:]  # a verdict, not a usage error
            assert "Traceback" not in err
            out[name] = folder / "out"
    finally:
        for _, proc in procs.values():
            if proc.poll() is None:
                proc.kill()
                proc.wait()
    return out


def _gains(out: Path) -> pd.DataFrame:
    return pd.read_parquet(out / "dataset" / "data" / "meter_gains.parquet")


@pytest.mark.long
def test_demo_with_a_vt_ratio_fault_has_m5_voltage_beyond_class(demos: dict[str, Path]) -> None:
    g = _gains(demos["vt"])
    m5 = g[(g["meter"] == "M5") & (g["quantity"] == "voltage")].iloc[0]
    assert m5["gain"] == pytest.approx(1.1, abs=0.005) and bool(m5["beyond_class"])
    assert "VT ratio" in m5["message"]
    assert g["beyond_class"].sum() == 1
    page = (demos["vt"] / "report.html").read_text()
    first = page[: page.index("<h2>Bench and instruments</h2>")]
    assert "beyond class ±0.5 %" in first and "M5: voltages 1.1" in first


@pytest.mark.long
def test_clean_demo_has_no_gain_beyond_class(demos: dict[str, Path]) -> None:
    g = _gains(demos["clean"])
    assert len(g) == 16 and not g["beyond_class"].any()
    page = (demos["clean"] / "report.html").read_text()
    assert "No meter gain lies beyond its class." in page[: page.index("Bench and instruments")]
