"""``benchwalk sessions``: the journals in the sessions folder, newest first, with each
session's state (finished, stopped at a step, not started) and how far it got."""

from __future__ import annotations

import argparse
from pathlib import Path

from meas.journal.sessions import default_sessions_dir, session_states

from .output import add_json, console, emit_json

HELP = "list the sessions in the sessions folder with their state"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--sessions",
        type=Path,
        default=None,
        help="folder of session journals (default: $BENCHWALK_SESSIONS or the per-user data folder)",
    )
    add_json(p, "the list")


def main(args: argparse.Namespace) -> int:
    folder = args.sessions or default_sessions_dir()
    states = session_states(folder)
    if args.json:
        emit_json(
            [
                {
                    "session": s.session_id,
                    "path": str(s.path),
                    "bench": s.bench,
                    "operator": s.operator,
                    "created_utc": s.created_utc,
                    "state": s.state,
                    "resume_at": s.step,
                    "steps_done": s.steps_done,
                    "steps_total": s.steps_total,
                    "snapshots": s.snapshots,
                }
                for s in states
            ]
        )
        return 0
    out = console()
    if not states:
        out.print(f"no sessions in {folder}", highlight=False)
        return 0
    for s in states:
        where = f" at step {s.step}" if s.state == "stopped" and s.step else ""
        out.print(
            f"{s.session_id}  {s.state}{where}  {s.steps_done}/{s.steps_total} steps  "
            f"{s.snapshots} snapshots  {s.bench}  {s.operator}",
            highlight=False,
            markup=False,
        )
    return 0
