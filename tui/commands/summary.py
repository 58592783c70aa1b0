"""``benchwalk summary DATASET``: the per-step capture summary for spreadsheets (.xlsx, or
CSV with a decimal comma), rounded to each register's resolution."""

from __future__ import annotations

import argparse
from pathlib import Path

HELP = "write a dataset's per-step capture summary for spreadsheets (.xlsx or decimal-comma .csv)"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("dataset", type=Path, help="dataset folder (from benchwalk export)")
    p.add_argument(
        "--out",
        type=Path,
        default=None,
        help="output file, .xlsx or .csv (default: DATASET/summary.xlsx)",
    )


def main(args: argparse.Namespace) -> int:
    from meas.dataset.summary import write_summary

    out = write_summary(args.dataset, args.out or args.dataset / "summary.xlsx")
    print(f"summary written: {out}")
    return 0
