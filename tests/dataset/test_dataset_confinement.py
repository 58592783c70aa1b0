"""A dataset is read only inside its folder: a symlink leading out of it is refused, even when
the file it points at is byte-identical (so every hash still matches). And the simulator binds
loopback unless ``--host`` says otherwise, with a warning when it does (real process)."""

from __future__ import annotations

import contextlib
import io
import os
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from support.benches import write_bench
from support.invented_bench import build_session

from meas.dataset.export import export_session
from meas.dataset.read import Dataset, read_table
from meas.errors import BenchwalkError
from meas.sim.server import exposure_warning
from tui import cli

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def dataset(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("conf")
    return export_session(build_session(folder, n_snapshots=6, n_meters=2), folder / "ds")


def _main(*argv: str) -> tuple[int, str]:
    err = io.StringIO()
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(err):
        code = cli.main(list(argv))
    return code, err.getvalue()


@pytest.mark.parametrize("member", ["profile/profile.toml", "data/events.parquet"])
def test_a_symlink_leading_out_of_the_dataset_is_refused(dataset, tmp_path, member):
    ds = tmp_path / "ds"
    shutil.copytree(dataset, ds)
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    real = outside / Path(member).name
    shutil.move(ds / member, real)
    (ds / member).symlink_to(real)  # same bytes: the hashes in datapackage.json still match
    for argv in (["check", str(ds)], ["report", str(ds), "--out", str(tmp_path / "r.html")]):
        code, err = _main(*argv)
        assert code == 2 and err.count("\n") == 1 and "inside the dataset folder" in err, err
    # the readers refuse it too when the package is not verified first
    if member.startswith("data/"):
        with pytest.raises(BenchwalkError, match="leads outside the dataset folder"):
            read_table(ds, "events")
    else:
        with pytest.raises(BenchwalkError, match="leads outside the dataset folder"):
            Dataset(ds, {}, {}).load_profile()


def test_exposure_warning_only_off_loopback() -> None:
    assert exposure_warning("127.0.0.1") is None and exposure_warning("::1") is None
    assert exposure_warning("localhost") is None
    for host in ("0.0.0.0", "192.0.2.1", "::", "example.invalid"):
        w = exposure_warning(host)
        assert w is not None and w.startswith("WARNING") and host in w


@pytest.mark.slow
def test_sim_on_every_interface_warns_and_says_so(tmp_path):
    path = write_bench(tmp_path)
    sim = subprocess.Popen(
        [sys.executable, "-m", "tui.cli", "sim", str(path), "--free-ports", "--host", "0.0.0.0"],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
    )
    out: list[str] = []
    reader = threading.Thread(target=lambda: out.extend(iter(sim.stdout.readline, "")), daemon=True)
    reader.start()
    try:
        deadline = time.monotonic() + 60
        while not any("SIMULATION" in line for line in out):
            assert time.monotonic() < deadline and sim.poll() is None, out
            time.sleep(0.05)  # waiting on the child's output, with a deadline
        assert any("tcp://0.0.0.0:" in line for line in out)
    finally:
        sim.send_signal(signal.SIGINT)
        try:
            sim.wait(timeout=30)
        except subprocess.TimeoutExpired:
            sim.kill()
            sim.wait()
    err = sim.stderr.read() if sim.stderr else ""
    assert "WARNING: the simulated bench listens on 0.0.0.0" in err
    help_text = subprocess.run(
        [sys.executable, "-m", "tui.cli", "sim", "--help"],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=60,
    ).stdout
    assert "loopback only" in help_text and "warning" in help_text
