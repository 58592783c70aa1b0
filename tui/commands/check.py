"""``benchwalk check DATASET``: re-run every check from the dataset folder alone.

Exit 0 when every check passed (warnings allowed), 1 when any failed, 2 when the dataset is
not usable. Also states whether the re-check reproduces the exported ``checks`` table.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from rich.table import Table

from meas.dataset.export import ESTIMATE_STAGE
from meas.dataset.read import load_dataset
from meas.recheck import (
    compare_checks,
    compare_estimate,
    estimate_note,
    estimate_recorded,
    recheck,
    recheck_estimate,
)

from .output import add_json, console, emit_json
from .progress import with_progress

HELP = "re-run the checks offline from a dataset folder and compare with the recorded ones"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "dataset", metavar="DATASET", type=Path, help="dataset folder written by benchwalk export"
    )
    add_json(parser, "the counts, failures and differences")


def main(args: argparse.Namespace) -> int:
    out = console()
    exported = load_dataset(args.dataset, tables=["checks"])["checks"]
    fresh = with_progress("re-checking", lambda update: recheck(args.dataset, progress=update))
    counts = fresh.groupby(["check_id", "status"]).size().unstack(fill_value=0)
    failed = fresh[fresh["status"] == "fail"].drop_duplicates(["check_id", "subject", "message"])
    diffs = compare_checks(exported, fresh)
    recorded = estimate_recorded(args.dataset)
    est = None
    if recorded:
        est = with_progress(ESTIMATE_STAGE, lambda _: recheck_estimate(args.dataset))
    est_diffs = compare_estimate(args.dataset, est) if est is not None else []
    if getattr(args, "json", False):
        emit_json(
            {
                "dataset": str(args.dataset),
                "counts": {
                    str(c): {str(s): int(n) for s, n in row.items() if n}
                    for c, row in counts.iterrows()
                },
                "failed": [
                    {
                        "step": r.step,
                        "check": r.check_id,
                        "subject": r.subject,
                        "message": r.message,
                    }
                    for r in failed.itertuples(index=False)
                ],
                "reproduces": not diffs,
                "results": len(fresh),
                "differences": diffs,
                "estimate_reproduces": (not est_diffs) if recorded else None,
                "estimate_differences": est_diffs,
            }
        )
        return 1 if len(failed) else 0
    table = Table(title=f"re-check of {args.dataset}")
    table.add_column("check")
    statuses = [s for s in ("pass", "warn", "fail", "n/a") if s in counts.columns]
    for s in statuses:
        table.add_column(s, justify="right")
    for check, row in counts.iterrows():
        table.add_row(str(check), *[str(int(row[s])) for s in statuses])
    out.print(table)
    for r in failed.itertuples(index=False):
        out.print(
            f"[red]FAIL[/red] step {r.step} {r.check_id} {r.subject}: {r.message}", highlight=False
        )
    if diffs:
        out.print(
            f"[yellow]the re-check does NOT reproduce the exported checks table ({len(diffs)} differences shown):[/yellow]"
        )
        for d in diffs[:20]:
            out.print(f"  {d}", highlight=False, markup=False)
    else:
        out.print(
            f"the re-check reproduces the exported checks table: {len(fresh)} results identical"
        )
    note = estimate_note(args.dataset) if est is not None else ""
    if note:
        out.print(note, highlight=False, markup=False)
    if est_diffs:
        out.print(
            f"[yellow]the re-check does NOT reproduce the meter_gains and coverage tables ({len(est_diffs)} differences):[/yellow]"
        )
        for d in est_diffs[:20]:
            out.print(f"  {d}", highlight=False, markup=False)
    elif est is None:
        out.print(
            "the dataset predates the meter_gains and coverage tables (format 2.0): not compared",
            highlight=False,
            markup=False,
        )
    else:
        why = f" (both empty: {est.reason})" if est.reason else ""
        out.print(
            f"the re-check reproduces the meter_gains and coverage tables{why}",
            highlight=False,
            markup=False,
        )
    return 1 if len(failed) else 0
