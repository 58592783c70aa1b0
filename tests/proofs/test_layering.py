"""The core must run headless: nothing in meas/ may import textual, rich or the console package.

The same rules are import-linter contracts in pyproject.toml (``lint-imports`` in CI); these
tests keep them in the default test run, the last one at run time in a fresh interpreter.
"""

from __future__ import annotations

import ast
import pathlib
import subprocess
import sys

ROOT = pathlib.Path(__file__).resolve().parents[2]
MEAS = ROOT / "meas"
COMMANDS = ROOT / "tui" / "commands"
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
        str(p.relative_to(ROOT)): sorted(_imported_roots(p) & set(FORBIDDEN))
        for p in MEAS.rglob("*.py")
    }
    assert {k: v for k, v in offenders.items() if v} == {}


def _module_level_imports(path: pathlib.Path, package: str) -> list[str]:
    """Absolute names of what ``path`` (a module of ``package``) imports at module level."""
    names = []
    for node in ast.parse(path.read_text(encoding="utf-8")).body:
        if isinstance(node, ast.Import):
            names.extend(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = package.split(".")[: len(package.split(".")) - node.level + 1]
            prefix = ".".join(base) if node.level else ""
            names.append(".".join(p for p in (prefix, node.module or "") if p))
    return names


def test_command_line_starts_the_console_only_lazily():
    """``benchwalk run --headless`` and friends must not load textual or the console screens."""
    files = [(ROOT / "tui" / "cli.py", "tui")] + [
        (p, "tui.commands") for p in sorted(COMMANDS.glob("*.py"))
    ]
    for path, package in files:
        for name in _module_level_imports(path, package):
            console = name.startswith("tui.") and not name.startswith(("tui.commands", "tui.cli"))
            assert not (name.split(".")[0] == "textual" or console), (
                f"{path.relative_to(ROOT)} imports {name} at module level"
            )


def test_importing_every_core_module_loads_no_textual_rich_or_tui():
    code = (
        "import importlib, pkgutil, sys, meas\n"
        "for m in pkgutil.walk_packages(meas.__path__, 'meas.'):\n"
        "    importlib.import_module(m.name)\n"
        "bad = sorted(k for k in sys.modules if k.split('.')[0] in ('textual', 'rich', 'tui'))\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_no_test_module_imports_another():
    """Shared helpers live in tests/support/; a test module importing another test module
    would run (and collect) that module's tests twice and hide the helper's real home."""
    tests = pathlib.Path(__file__).resolve().parents[1]
    offenders = []
    for path in tests.rglob("*.py"):
        for root in _imported_roots(path):
            if root.startswith("test_") or root == "conftest":
                offenders.append(f"{path.relative_to(tests)} imports {root}")
    assert offenders == []
