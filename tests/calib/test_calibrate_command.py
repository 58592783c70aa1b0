"""``benchwalk calibrate`` end to end on a real headless demo (simulated bench over loopback
Modbus, real journal, real dataset export), and its answers to bad input. The demo is the
sped-up copy of support/benches.py; its simulated bench is the profile's own model, so the
reference is the profile itself."""

from __future__ import annotations

import dataclasses
import json
import subprocess
import sys
from pathlib import Path

import frictionless
import numpy as np
import pandas as pd
import pytest
from support.benches import write_fast_demo
from support.invented_bench import build_session

from meas.calib.run import calibrate
from meas.calib.select import dataset_observations
from meas.calib.write import write_calibration
from meas.dataset.export import export_session
from meas.dataset.read import Dataset, load_dataset
from meas.errors import BenchwalkError
from meas.profile import load_profile

ROOT = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.slow


def benchwalk(*args: str, timeout: float = 300.0) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "tui.cli", *args],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=timeout,
    )


@pytest.fixture(scope="module")
def dataset(tmp_path_factory: pytest.TempPathFactory) -> Path:
    base = tmp_path_factory.mktemp("calib-demo")
    profile = write_fast_demo(base / "bench")
    r = benchwalk(
        "demo",
        "--headless",
        "--profile",
        str(profile),
        "--seed",
        "7",
        "--sessions",
        str(base / "sessions"),
        "--out",
        str(base / "out"),
    )
    assert r.returncode == 0, r.stdout[-2000:] + r.stderr[-2000:]
    return base / "out" / "dataset"


def test_calibrate_a_real_demo_dataset_accepts_and_writes_everything(dataset: Path, tmp_path: Path):
    out = tmp_path / "cal"
    r = benchwalk("calibrate", str(dataset), "--out", str(out))
    assert r.returncode == 0, r.stdout + r.stderr
    assert "accepted; calibrated profile and report written" in r.stdout
    for name in (
        "parameters.csv",
        "identifiability.csv",
        "deviations.csv",
        "meter_gains.csv",
        "correlations.csv",
        "fit.json",
        "report.html",
        "datapackage.json",
        "profile/profile.toml",
        "profile/feeder_bench.sequence.toml",
    ):
        assert (out / name).is_file(), name
    fit = json.loads((out / "fit.json").read_text())
    assert fit["accepted"] and fit["dof"] == fit["readings"] and fit["p_value"] > 0.01
    assert fit["software"]["scipy"] and fit["dataset"]["session"]
    calibrated = load_profile(out / "profile" / "profile.toml")  # the profile loads as it is
    src = calibrated.branch("SRC").model
    assert src is not None and abs(src.sc_va / 600000.0 - 1) < 0.1  # type: ignore[union-attr]
    text = (out / "profile" / "profile.toml").read_text()
    assert "# calibrated from dataset" in text and "±" in text
    report = frictionless.validate(out / "datapackage.json")
    assert report.valid, report.flatten(["resourceName", "type", "note"])[:5]
    assert "<svg" in (out / "report.html").read_text()
    # the covariance a staged-fault validation takes (benchwalk fault check --covariance)
    from meas.fault.inputs import read_covariance

    cov = read_covariance(out / "covariance.json")
    table = pd.read_csv(out / "parameters.csv").set_index("parameter")
    for name, value, var in zip(cov.names, cov.values, np.diag(cov.matrix), strict=True):
        assert value == pytest.approx(table.loc[name, "calibrated_value"], rel=1e-12)
        assert np.sqrt(var) == pytest.approx(table.loc[name, "u"], rel=1e-9)


def test_rejected_fit_exits_1_names_the_worst_reading_and_writes_no_profile(
    dataset: Path, tmp_path: Path
):
    out = tmp_path / "cal"
    r = benchwalk("calibrate", str(dataset), "--out", str(out), "--repeatability", "1e-5")
    assert r.returncode == 1, r.stdout + r.stderr
    assert "not accepted:" in r.stdout and "χ²" in r.stdout and "the worst is step" in r.stdout
    assert (out / "report.html").is_file() and not (out / "profile").exists()


@pytest.mark.parametrize(
    ("args", "words"),
    [
        (("--param", "L9.r_ohm"), "'L9.r_ohm' is not a parameter"),
        (("--param", "Q*"), "glob matches no parameter"),
        (("--steps", "no-such-step"), "step 'no-such-step' is not in the dataset"),
        (("--param", "SH1.p_w"), "its profile value is 0"),
    ],
)
def test_usage_errors_are_one_line_exit_2(dataset: Path, tmp_path: Path, args, words):
    r = benchwalk("calibrate", str(dataset), "--out", str(tmp_path / "cal"), *args)
    assert r.returncode == 2, r.stdout + r.stderr
    assert words in r.stderr and len(r.stderr.strip().splitlines()) == 1
    assert "Traceback" not in r.stderr and not (tmp_path / "cal").exists()


def test_not_a_dataset_is_one_line_exit_2(tmp_path: Path):
    r = benchwalk("calibrate", str(tmp_path))
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1
    assert "datapackage.json is missing" in r.stderr


def _copy(ds: Dataset, **tables) -> Dataset:
    return dataclasses.replace(ds, tables={**ds.tables, **tables})


def test_no_captures_and_no_passing_step_are_one_line_errors(dataset: Path):
    ds = load_dataset(dataset)
    profile = ds.load_profile()
    m = ds["measurements"]
    with pytest.raises(BenchwalkError, match="no captured readings"):
        dataset_observations(_copy(ds, measurements=m[m["role"] != "capture"]), profile)
    steps = ds["steps"].assign(outcome="fail")
    with pytest.raises(BenchwalkError, match="no captured step passed its checks"):
        dataset_observations(_copy(ds, steps=steps), profile)
    obs = dataset_observations(_copy(ds, steps=steps), profile, steps="all")
    assert len(obs.steps) >= 10


def test_a_failure_while_writing_leaves_nothing(dataset: Path, tmp_path: Path):
    ds = load_dataset(dataset)
    profile = ds.load_profile()
    c = calibrate(profile, dataset_observations(ds, profile))
    assert c.verdict.accepted
    broken = dataclasses.replace(
        ds, profile_files={"profile/profile.toml": "# no model tables here\n"}
    )
    out = tmp_path / "cal"
    with pytest.raises(BenchwalkError, match="cannot find SRC"):
        write_calibration(broken, c, out)
    assert list(tmp_path.iterdir()) == []  # no folder, no partial one
    write_calibration(ds, c, out)
    with pytest.raises(BenchwalkError, match="already exists"):
        write_calibration(ds, c, out)


def test_a_dataset_whose_profile_has_no_model_is_one_line_exit_2(tmp_path: Path):
    """The invented bench of support/invented_bench.py has no model tables."""
    ds = export_session(build_session(tmp_path, n_snapshots=6, n_meters=2), tmp_path / "ds")
    r = benchwalk("calibrate", str(ds))
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "has no model table" in r.stderr
