"""Broken profiles made by one edit of the minimal demo profile, and the line an edit is on.

The expected line of a problem is found in the text itself, independently of the loader, so a
loader that reports the wrong line fails the test.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from meas.errors import ProfileError
from meas.profile import lint_profile, load_profile

MINIMAL = Path(__file__).resolve().parents[2] / "profiles_demo" / "minimal_bench.toml"
BASE = MINIMAL.read_text(encoding="utf-8")


def edit(old: str, new: str, text: str = BASE) -> str:
    assert text.count(old) >= 1, f"fixture text not found: {old!r}"
    return text.replace(old, new, 1)


def line_of(text: str, needle: str | tuple[str, int], nth: int = 1) -> int:
    """1-based line of the nth line containing needle (independent of the loader)."""
    if isinstance(needle, tuple):
        needle, nth = needle
    hits = [i for i, line in enumerate(text.splitlines(), 1) if needle in line]
    assert len(hits) >= nth, f"{needle!r} not in text"
    return hits[nth - 1]


def write(tmp_path: Path, text: str, name: str = "bench.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def problems_of(path: Path) -> list[str]:
    """Every problem line of a broken profile; load and lint must report the same."""
    with pytest.raises(ProfileError) as info:
        load_profile(path)
    lines = str(info.value).splitlines()
    assert lines == [str(p) for p in lint_profile(path)]  # lint and load agree
    return lines
