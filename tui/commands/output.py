"""How commands print for people and for scripts: ``--json`` (one JSON document, or one per
line for streams) and a rich console that never hard-wraps when the output is not a terminal."""

from __future__ import annotations

import argparse
import json
import math
import sys
from typing import Any, TextIO

from rich.console import Console


def add_json(p: argparse.ArgumentParser, what: str = "the result") -> None:
    p.add_argument("--json", action="store_true", help=f"print {what} as JSON for scripts")


def _plain(x: Any) -> Any:
    if isinstance(x, float) and not math.isfinite(x):
        return None  # JSON has no NaN: missing
    if isinstance(x, dict):
        return {str(k): _plain(v) for k, v in x.items()}
    if isinstance(x, list | tuple):
        return [_plain(v) for v in x]
    if hasattr(x, "item") and callable(x.item):  # numpy scalars
        return _plain(x.item())
    return x


def emit_json(obj: Any, stream: TextIO | None = None) -> None:
    """One JSON document on one line of standard output (NaN written as null)."""
    print(
        json.dumps(_plain(obj), default=str, allow_nan=False), file=stream or sys.stdout, flush=True
    )


def console() -> Console:
    """A console that wraps to the terminal, and not at all when piped or redirected."""
    if sys.stdout.isatty():
        return Console()
    return Console(width=100_000, soft_wrap=True, force_terminal=False)
