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
    p.add_argument(
        "--strict",
        action="store_true",
        help="readings that nothing could verify against the network model fail the exit code "
        "(by default the session is 'PASS with unverified readings', exit 0)",
    )
    p.add_argument(
        "--json",
        action="store_true",
        help="with --headless: the session's verdict as one JSON line on standard output "
        "(everything else goes to standard error)",
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
    """Start the console (``tui.app``), imported only here so headless commands never load textual.

    Every argument is checked first, and without a terminal the console refuses in one line
    (it would otherwise wait for keys that never come)."""
    from meas.session import validate_start

    validate_start(
        kwargs.get("profile_path"),
        faults=kwargs.get("faults") or (),
        resume=kwargs.get("resume"),
        sessions_dir=kwargs.get("sessions_dir"),
    )
    if not (sys.stdin.isatty() and sys.stdout.isatty()):
        raise BenchwalkError(
            "the console needs a terminal (standard input or output is not one); "
            "use --headless, or run it in a terminal"
        )
    try:
        from tui.app import run_console
    except ImportError as exc:
        raise BenchwalkError(
            f"the console is not available in this build ({exc}); use --headless"
        ) from None
    return int(run_console(**kwargs) or 0)


def comma_list(text: str | None) -> tuple[str, ...]:
    """The items of a comma-separated option value, blanks dropped (``--steps a,b``,
    ``--currents IA,IB,IC``); empty for no value."""
    return tuple(s.strip() for s in (text or "").split(",") if s.strip())


def name_value_pairs(items: list[str], option: str) -> dict[str, str]:
    """``NAME=VALUE`` option values (repeatable ``--switch ID=open``) as a mapping; one line
    naming the option when one is written otherwise."""
    out = {}
    for it in items:
        key, sep, value = it.partition("=")
        if not sep:
            raise BenchwalkError(f"{option} {it!r}: write NAME=VALUE")
        out[key.strip()] = value.strip()
    return out
