"""``benchwalk check DATASET``: re-run every check from the dataset folder alone.

Exit 0 when every check passed (warnings allowed), 1 when any failed, 2 when the dataset is
not usable. Also states whether the re-check reproduces the exported ``checks`` table.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from rich.console import Console
from rich.table import Table

from meas.dataset.read import load_dataset
from meas.recheck import compare_checks, recheck

from .progress import terminal_progress

HELP = "re-run the checks offline from a dataset folder and compare with the recorded ones"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "dataset", metavar="DATASET", type=Path, help="dataset folder written by benchwalk export"
    )


def main(args: argparse.Namespace) -> int:
    console = Console()
    exported = load_dataset(args.dataset, tables=["checks"])["checks"]
    bar, update = terminal_progress("re-checking")
    if bar is not None:
        with bar:
            fresh = recheck(args.dataset, progress=update)
    else:
        fresh = recheck(args.dataset)
    counts = fresh.groupby(["check_id", "status"]).size().unstack(fill_value=0)
    table = Table(title=f"re-check of {args.dataset}")
    table.add_column("check")
    statuses = [s for s in ("pass", "warn", "fail", "n/a") if s in counts.columns]
    for s in statuses:
        table.add_column(s, justify="right")
    for check, row in counts.iterrows():
        table.add_row(str(check), *[str(int(row[s])) for s in statuses])
    console.print(table)
    failed = fresh[fresh["status"] == "fail"].drop_duplicates(["check_id", "subject", "message"])
    for r in failed.itertuples(index=False):
        console.print(
            f"[red]FAIL[/red] step {r.step} {r.check_id} {r.subject}: {r.message}", highlight=False
        )
    diffs = compare_checks(exported, fresh)
    if diffs:
        console.print(
            f"[yellow]the re-check does NOT reproduce the exported checks table ({len(diffs)} differences shown):[/yellow]"
        )
        for d in diffs[:20]:
            console.print(f"  {d}", highlight=False, markup=False)
    else:
        console.print(
            f"the re-check reproduces the exported checks table: {len(fresh)} results identical"
        )
    return 1 if len(failed) else 0
