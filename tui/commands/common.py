"""What ``run``, ``demo`` and ``resume`` share: their common options and starting the console."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any, TextIO

from meas.errors import BenchwalkError


def add_common(p: argparse.ArgumentParser) -> None:
    p.add_argument("--operator", default=None, help="name recorded with every decision")
    p.add_argument(
        "--out",
        type=Path,
        default=None,
        help="folder for the dataset and report (default: ./benchwalk-<session>)",
    )
    p.add_argument(
        "--sessions",
        type=Path,
        default=None,
        help="folder of session journals (default: $BENCHWALK_SESSIONS or the per-user data folder)",
    )
    p.add_argument(
        "--log-saved", action="store_true", help="print one line per snapshot saved in the journal"
    )


def saved_printer(
    enabled: bool, out: TextIO = sys.stdout
) -> Callable[[int, str, str], None] | None:
    """With ``--log-saved``: a callback printing one line per snapshot the journal saved."""
    if not enabled:
        return None

    def show(row: int, step: str, role: str) -> None:
        print(f"saved snapshot {row} step={step} role={role}", file=out, flush=True)

    return show


def start_console(**kwargs: Any) -> int:
    """Start the console (``tui.app``), imported only here so headless commands never load textual."""
    try:
        from tui.app import run_console
    except ImportError as exc:
        raise BenchwalkError(
            f"the console is not available in this build ({exc}); use --headless"
        ) from None
    return int(run_console(**kwargs) or 0)
