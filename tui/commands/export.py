"""``benchwalk export SESSION``: turn a session journal into a tidy, self-describing dataset folder."""

from __future__ import annotations

import argparse
from pathlib import Path

from meas.dataset.export import export_session
from meas.dataset.read import read_package

from .progress import with_progress

HELP = "export a session journal as a dataset folder (CSV, Parquet, datapackage.json, profile)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "session",
        metavar="SESSION",
        help="session id (in $BENCHWALK_SESSIONS or the per-user data folder) or path to the journal file",
    )
    parser.add_argument(
        "--out",
        metavar="DIR",
        type=Path,
        default=None,
        help="dataset folder to write (default: beside the journal, SESSION-dataset)",
    )
    parser.add_argument(
        "--overwrite", action="store_true", help="replace an existing dataset folder"
    )


def main(args: argparse.Namespace) -> int:
    out = with_progress(
        "exporting",
        lambda update: export_session(
            args.session, args.out, overwrite=args.overwrite, progress=update
        ),
    )
    print(f"dataset written: {out}")
    damage = read_package(out)["benchwalk"].get("journal_damage") or []
    for line in damage:
        print(f"  damaged journal: {line}")
    if damage:
        print("  the dataset holds what was readable; the journal file was left as it was")
    return 0
