"""The core must run headless: nothing in meas/ may import textual or the console package."""

from __future__ import annotations

import ast
import pathlib
import subprocess
import sys

MEAS = pathlib.Path(__file__).resolve().parent.parent / "meas"
FORBIDDEN = ("textual", "tui")


def _imported_roots(path: pathlib.Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    roots: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            roots.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            roots.add(node.module.split(".")[0])
    return roots


def test_no_static_import_of_console_in_core():
    offenders = {
        str(p.relative_to(MEAS.parent)): sorted(_imported_roots(p) & set(FORBIDDEN))
        for p in MEAS.rglob("*.py")
    }
    offenders = {k: v for k, v in offenders.items() if v}
    # meas/commands/demo.py may start the console lazily inside a function; that is the one
    # sanctioned edge, and it must stay inside a function body (checked below).
    offenders.pop("meas/commands/demo.py", None)
    offenders.pop("meas/commands/resume.py", None)
    assert offenders == {}


def test_console_imports_in_commands_are_lazy():
    for name in ("demo.py", "resume.py"):
        path = MEAS / "commands" / name
        if not path.exists():
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in tree.body:  # module level only
            if isinstance(node, ast.Import | ast.ImportFrom):
                mod = node.module if isinstance(node, ast.ImportFrom) else node.names[0].name
                assert (mod or "").split(".")[0] not in FORBIDDEN, (
                    f"{name} imports {mod} at module level"
                )


def test_importing_every_core_module_loads_no_textual():
    code = (
        "import importlib, pkgutil, sys, meas\n"
        "for m in pkgutil.walk_packages(meas.__path__, 'meas.'):\n"
        "    importlib.import_module(m.name)\n"
        "bad = sorted(k for k in sys.modules if k.split('.')[0] in ('textual', 'tui'))\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
