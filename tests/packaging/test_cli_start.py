"""The top-level command line starts light: ``--help`` and ``--version`` import no command
module and none of the heavy libraries (timing is in benchmarks/bench_cli_start.py)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
HEAVY = ("pandas", "pyarrow", "numpy", "pymodbus", "textual", "rich", "scipy", "tui.commands.demo")

PROBE = """
import contextlib, io, json, sys
import tui.cli
buf = io.StringIO()
with contextlib.redirect_stdout(buf):
    try:
        code = tui.cli.main(sys.argv[1:])
    except SystemExit as e:
        code = e.code
print(json.dumps({"code": code, "out": buf.getvalue(), "modules": sorted(sys.modules)}))
"""


def _probe(*args: str) -> dict:
    r = subprocess.run(
        [sys.executable, "-c", PROBE, *args],
        cwd=ROOT,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
        capture_output=True,
        text=True,
        timeout=60,
        check=True,
    )
    return json.loads(r.stdout)


def test_top_level_help_lists_every_command_without_importing_them():
    got = _probe("--help")
    assert got["code"] == 0
    loaded = set(got["modules"])
    assert not [m for m in HEAVY if m in loaded]
    assert not [m for m in loaded if m.startswith("tui.commands.")]
    from tui.cli import COMMANDS

    for name in COMMANDS:
        if (ROOT / "tui" / "commands" / f"{COMMANDS[name]}.py").is_file():
            assert f"    {name} " in got["out"], name


def test_help_text_read_from_source_is_the_module_help():
    from tui.cli import _source_help
    from tui.commands import lint

    assert _source_help("lint") == lint.HELP


def test_version_is_the_package_version():
    from meas import __version__

    got = _probe("--version")
    assert got["code"] == 0 and got["out"].strip() == f"benchwalk {__version__}"
    assert "pandas" not in got["modules"]
