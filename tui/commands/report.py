"""``benchwalk report DATASET``: a commissioning report as one HTML file and a Markdown file."""

from __future__ import annotations

import argparse
from pathlib import Path

from meas.dataset.outputs import check_report_target
from meas.report import default_report_path, write_report

from .progress import with_progress

HELP = "write the commissioning report (self-contained HTML and Markdown) of a dataset"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "dataset", metavar="DATASET", type=Path, help="dataset folder written by benchwalk export"
    )
    parser.add_argument(
        "--out",
        metavar="FILE",
        type=Path,
        default=None,
        help="HTML file to write (default: DATASET-report.html beside the dataset folder); the Markdown goes beside it",
    )


def main(args: argparse.Namespace) -> int:
    # only an earlier benchwalk report is replaced, never the other format or anyone's file
    check_report_target(args.out or default_report_path(args.dataset), args.dataset)
    html_path, md_path = with_progress(
        "report", lambda update: write_report(args.dataset, args.out, progress=update)
    )
    print(f"report written: {html_path}\n                {md_path}")
    return 0
