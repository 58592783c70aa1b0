"""The calibrated profile: the original TOML text with fitted model values put in place.

The text is edited, not regenerated, so the person's layout, comments and every other table
stay as they wrote them. Each changed value gets a comment line above the line that holds it,
naming the dataset, the date and the standard uncertainty, so anyone reading the profile later
knows where the number came from. Per-phase values (``p_w = [2500.0, 1500.0, 1000.0]``) keep
their split and are scaled to the fitted total, as the fit adjusts them.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

from ..errors import BenchwalkError
from ..model import Profile
from ..profile.scanner import locate_keys
from .identify import Estimate

_VALUE = r"(\[[^\]]*\]|[^,}\s#\]]+)"


def _fmt(x: float) -> str:
    text = f"{x:.6g}"
    return text if any(c in text for c in ".en") else text + ".0"


def _replace(line: str, key: str, value: float) -> str:
    pattern = re.compile(rf"(?<![A-Za-z0-9_]){re.escape(key)}(\s*=\s*){_VALUE}")
    m = pattern.search(line)
    if m is None:
        raise BenchwalkError(f"cannot find {key} on its line to write the calibrated value")
    old = m.group(2)
    if old.startswith("["):
        parts = [float(x) for x in old.strip("[]").split(",") if x.strip()]
        total = sum(parts)
        new = "[" + ", ".join(_fmt(p * value / total if total else value / 3) for p in parts) + "]"
    else:
        new = _fmt(value)
    return line[: m.start(2)] + new + line[m.end(2) :]


def calibrated_text(
    text: str, profile: Profile, fitted: Sequence[Estimate], dataset_id: str, date: str
) -> str:
    """``text`` (the profile's main file) with every fitted parameter's value replaced."""
    keys = locate_keys(text)
    index = {b.id: i for i, b in enumerate(profile.branches)}
    lines = text.split("\n")
    notes: dict[int, list[str]] = {}
    for e in fitted:
        branch, _, key = e.name.partition(".")
        line_no = keys.get(("branch", index[branch], "model", key))
        if line_no is None:
            raise BenchwalkError(
                f"{profile.path}: cannot find {e.name} in the profile text to write its calibrated value"
            )
        lines[line_no - 1] = _replace(lines[line_no - 1], key, e.value)
        notes.setdefault(line_no, []).append(
            f"{key} {_fmt(e.value)} ± {e.u:.2g} (was {_fmt(e.nominal)}; {e.verdict})"
        )
    for line_no in sorted(notes, reverse=True):
        indent = re.match(r"\s*", lines[line_no - 1])
        pad = indent.group(0) if indent else ""
        lines.insert(
            line_no - 1,
            f"{pad}# calibrated from dataset {dataset_id} on {date}: " + "; ".join(notes[line_no]),
        )
    return "\n".join(lines)
