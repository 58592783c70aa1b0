"""Several sessions as one set of tables: a hive-partitioned Parquet collection.

``<table>/bench=<slug>/session=<id>/part-0.parquet`` for every dataset table (measurements,
snapshots, steps, checks, meters, the quantities, bench and model tables, ...): DuckDB,
polars and pyarrow datasets read each table folder as one table with ``bench`` and
``session`` as partition columns (a table's own ``session`` or ``bench`` column is left to
the partition). Re-adding a session replaces its partitions atomically, file by file.
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import BenchwalkError
from .files import fsync_dir, fsync_file, slug
from .read import verify_dataset
from .schema import DATA_DIR, TABLES

PARTITION_COLUMNS = ("bench", "session")


def _copy_table(src: Path, part: Path) -> None:
    part.mkdir(parents=True, exist_ok=True)
    tmp = part / f".part-0.parquet.partial-{os.getpid()}"
    try:
        pf = pq.ParquetFile(src)
        drop = [c for c in PARTITION_COLUMNS if c in pf.schema_arrow.names]
        schema = pf.schema_arrow
        for c in drop:
            schema = schema.remove(schema.get_field_index(c))
        with pq.ParquetWriter(tmp, schema, compression="zstd") as w:
            for batch in pf.iter_batches(batch_size=200_000):
                w.write_table(pa.Table.from_batches([batch]).drop_columns(drop))
        fsync_file(tmp)
        os.replace(tmp, part / "part-0.parquet")
        fsync_dir(part)
    except (OSError, pa.ArrowException) as exc:
        tmp.unlink(missing_ok=True)
        raise BenchwalkError(f"{part}: cannot write the collection ({exc})") from exc


def write_collection(dataset_dirs: Iterable[Path], collection_dir: Path) -> Path:
    """Every table of several datasets as hive-partitioned Parquet, one folder per table."""
    collection_dir = Path(collection_dir)
    collection_dir.mkdir(parents=True, exist_ok=True)
    for d in dataset_dirs:
        d = Path(d)
        pkg = verify_dataset(d)
        meta = pkg["benchwalk"]
        where = f"bench={slug(str(meta['bench']))}/session={meta['session']}"
        for table in TABLES:
            _copy_table(d / DATA_DIR / f"{table}.parquet", collection_dir / table / where)
    return collection_dir
