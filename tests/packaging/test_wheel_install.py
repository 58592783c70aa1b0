"""The wheel, installed as an app: built here, installed into a fresh virtual environment
(no source tree on the path), it finds its packaged demo profiles and runs the demo headless
to a valid dataset; ``--version`` answers; the license and metadata ship with it."""

from __future__ import annotations

import os
import subprocess
import sys
import sysconfig
import venv
import zipfile
from email.parser import Parser
from pathlib import Path

import frictionless
import pytest

ROOT = Path(__file__).resolve().parents[2]

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    # A copy of the tracked files only, so nothing built or cached in the checkout leaks in.
    src = out / "src"
    src.mkdir()
    files = subprocess.run(
        ["git", "ls-files", "-co", "--exclude-standard"],
        cwd=ROOT,
        capture_output=True,
        text=True,
        check=True,
    ).stdout.split()
    for name in files:
        if (ROOT / name).is_file():
            (src / name).parent.mkdir(parents=True, exist_ok=True)
            (src / name).write_bytes((ROOT / name).read_bytes())
    r = subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "wheel",
            "-q",
            "--no-deps",
            "-w",
            str(out / "dist"),
            str(src),
        ],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert r.returncode == 0, r.stderr[-2000:]
    (whl,) = (out / "dist").glob("benchwalk-*.whl")
    return whl


@pytest.fixture(scope="module")
def app_env(wheel, tmp_path_factory) -> tuple[Path, dict[str, str]]:
    """A fresh venv holding only benchwalk; its dependencies are this interpreter's, seen
    through a .pth line (so no download), after the venv's own site-packages."""
    root = tmp_path_factory.mktemp("venv")
    env_dir = root / "app"
    venv.EnvBuilder(with_pip=True).create(env_dir)
    py = env_dir / "bin" / "python"
    site = Path(
        subprocess.run(
            [str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
            capture_output=True,
            text=True,
            check=True,
        ).stdout.strip()
    )
    (site / "zz_host_packages.pth").write_text(sysconfig.get_paths()["purelib"] + "\n")
    r = subprocess.run(
        # --ignore-installed: the host packages seen through the .pth may hold a benchwalk too
        [
            str(py),
            "-m",
            "pip",
            "install",
            "-q",
            "--no-deps",
            "--no-index",
            "--ignore-installed",
            str(wheel),
        ],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert r.returncode == 0, r.stderr[-2000:]
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "BENCHWALK_SESSIONS")}
    env["HOME"] = str(root / "home")  # the per-user data folder lands here
    env.pop("XDG_DATA_HOME", None)
    return env_dir, env


def test_wheel_holds_the_demo_profiles_license_and_metadata(wheel):
    with zipfile.ZipFile(wheel) as z:
        names = set(z.namelist())
        meta = Parser().parsestr(
            z.read(next(n for n in names if n.endswith(".dist-info/METADATA"))).decode()
        )
        licenses = [n for n in names if n.endswith("LICENSE")]
        assert licenses and "MIT License" in z.read(licenses[0]).decode()
    # the three files of the repository's profiles_demo/, as package data
    for name in sorted(p.name for p in (ROOT / "profiles_demo").glob("*.toml")):
        assert f"tui/profiles_demo/{name}" in names
    assert meta["Author"] == "benchwalk developers" or "benchwalk developers" in (
        meta["Author-email"] or ""
    )
    assert "License :: OSI Approved :: MIT License" in meta.get_all("Classifier")
    requires = meta.get_all("Requires-Dist")
    assert "textual==8.2.8" in requires
    assert any(r.startswith("pandas") and ">=" in r and "==" not in r for r in requires)


@pytest.mark.long
def test_installed_app_runs_the_demo_headless_to_a_dataset(app_env, tmp_path):
    env_dir, env = app_env
    exe = env_dir / "bin" / "benchwalk"
    r = subprocess.run(
        [str(exe), "--version"], cwd=tmp_path, env=env, capture_output=True, text=True, timeout=60
    )
    assert r.returncode == 0 and r.stdout.strip() == "benchwalk 0.1.0", r.stderr
    where = subprocess.run(
        [
            str(env_dir / "bin" / "python"),
            "-c",
            "import tui, meas; print(tui.__file__, meas.__file__)",
        ],
        cwd=tmp_path,
        env=env,
        capture_output=True,
        text=True,
        check=True,
    ).stdout
    assert str(ROOT) not in where and str(env_dir) in where  # the installed copy, not the checkout
    out = tmp_path / "out"
    r = subprocess.run(
        [str(exe), "demo", "--headless", "--seed", "3", "--out", str(out)],
        cwd=tmp_path,
        env=env,
        capture_output=True,
        text=True,
        timeout=900,
    )
    assert r.returncode == 0, r.stderr[-3000:]
    assert "Traceback" not in r.stderr
    report = frictionless.validate(str(out / "dataset" / "datapackage.json"))
    assert report.valid
    # the journal went to the per-user data folder, not the current folder
    journals = list(
        (Path(env["HOME"]) / ".local" / "share" / "benchwalk" / "sessions").glob("*.sqlite")
    )
    assert len(journals) == 1
    assert not (tmp_path / "sessions").exists()
