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
        help="folder of session journals (default: $BENCHWALK_SESSIONS or ./sessions)",
    )
    p.add_argument(
        "--log-saved", action="store_true", help="print one line per snapshot saved in the journal"
    )


def add_as_built(p: argparse.ArgumentParser) -> None:
    """``--as-built`` and ``--model-error``: the simulated bench's true network (docs/as-built.md)."""
    p.add_argument(
        "--as-built",
        default=None,
        metavar="SEED",
        help="run the simulated bench on a network drawn within the profile's model tolerances "
        "from SEED (the checks keep the nameplate model; see docs/as-built.md)",
    )
    p.add_argument(
        "--model-error",
        action="append",
        default=[],
        metavar="BRANCH.KEY:FACTOR",
        help="set one model parameter of the simulated bench's true network, e.g. L2.r_ohm:1.2 "
        "(x1.2; for tap_pct an offset in points); repeatable, overrides --as-built for it",
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
