"""``benchwalk collect DATASET... --out FOLDER``: several dataset folders as one Parquet
collection, every table hive-partitioned by bench and session (docs/dataset-format.md)."""

from __future__ import annotations

import argparse
from pathlib import Path

from .output import add_json, emit_json

HELP = "gather dataset folders into one Parquet collection (every table, by bench and session)"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("datasets", nargs="+", type=Path, metavar="DATASET", help="dataset folders")
    p.add_argument(
        "--out", type=Path, required=True, help="the collection folder (created or added to)"
    )
    add_json(p, "what was written")


def main(args: argparse.Namespace) -> int:
    from meas.dataset.collection import write_collection
    from meas.dataset.schema import TABLES

    out = write_collection(args.datasets, args.out)
    if args.json:
        emit_json(
            {
                "collection": str(out),
                "datasets": [str(d) for d in args.datasets],
                "tables": list(TABLES),
            }
        )
    else:
        print(f"collection {out}: {len(args.datasets)} dataset(s), tables {', '.join(TABLES)}")
    return 0
