"""Several sessions as one table: a hive-partitioned Parquet collection of measurements."""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import BenchwalkError
from .files import fsync_dir, fsync_file, slug
from .read import verify_dataset
from .schema import DATA_DIR


def write_collection(dataset_dirs: Iterable[Path], collection_dir: Path) -> Path:
    """Measurements of several datasets as one hive-partitioned Parquet collection.

    ``bench=<slug>/session=<id>/part-0.parquet``: DuckDB and pyarrow datasets read the folder
    as one table, with ``bench`` and ``session`` as partition columns. Re-adding a session
    replaces its partition atomically.
    """
    collection_dir = Path(collection_dir)
    collection_dir.mkdir(parents=True, exist_ok=True)
    for d in dataset_dirs:
        d = Path(d)
        pkg = verify_dataset(d)
        meta = pkg["benchwalk"]
        part = collection_dir / f"bench={slug(str(meta['bench']))}" / f"session={meta['session']}"
        part.mkdir(parents=True, exist_ok=True)
        tmp = part / f".part-0.parquet.partial-{os.getpid()}"
        src = d / DATA_DIR / "measurements.parquet"
        try:
            pf = pq.ParquetFile(src)
            schema = pf.schema_arrow.remove(pf.schema_arrow.get_field_index("session"))
            with pq.ParquetWriter(tmp, schema, compression="zstd") as w:
                for batch in pf.iter_batches(batch_size=200_000):
                    w.write_table(pa.Table.from_batches([batch]).drop_columns(["session"]))
            fsync_file(tmp)
            os.replace(tmp, part / "part-0.parquet")
            fsync_dir(part)
        except (OSError, pa.ArrowException) as exc:
            tmp.unlink(missing_ok=True)
            raise BenchwalkError(f"{part}: cannot write the collection ({exc})") from exc
    return collection_dir
