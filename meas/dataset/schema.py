"""The dataset's tables: their columns, descriptions and units, as Table Schema and as Arrow.

One definition serves the writer (``meas.dataset.export``), the reader (``meas.dataset.read``)
and the ``datapackage.json`` that describes every table to anyone else. The columns are
declared in ``columns_recorded`` (what the session recorded), ``columns_bench`` (the bench it
ran on) and ``columns_estimate`` (the joint estimate); this module orders the tables.
"""

from __future__ import annotations

from typing import Any

import pyarrow as pa

from .columns import TableSpec
from .columns_bench import BENCH_TABLES
from .columns_estimate import ESTIMATE_TABLES
from .columns_recorded import RECORDED_TABLES

DATA_DIR = "data"
PROFILE_DIR = "profile"
MAIN_PROFILE = "profile.toml"
TS_SCHEMA = "https://datapackage.org/profiles/2.0/tableschema.json"


# the order of the tables in datapackage.json, the dataset's folder and every reader
TABLE_ORDER = (
    "measurements",
    "snapshots",
    "polls",
    "switch_states",
    "steps",
    "step_log",
    "checks",
    "meters",
    "topology",
    "step_switches",
    "quantities",
    "bench",
    "model",
    "meter_gains",
    "coverage",
    "events",
)
_DECLARED: dict[str, TableSpec] = {**RECORDED_TABLES, **BENCH_TABLES, **ESTIMATE_TABLES}
assert set(_DECLARED) == set(TABLE_ORDER), "every declared table is ordered, once"
TABLES: dict[str, TableSpec] = {name: _DECLARED[name] for name in TABLE_ORDER}

ARROW_TYPES = {
    "string": pa.string(),
    "boolean": pa.bool_(),
    "integer": pa.int64(),
    "number": pa.float64(),
    "datetime": pa.timestamp("us", tz="UTC"),
}


FORMAT_VERSION = 2
# Additions within a format version raise the minor number (docs/dataset-format.md): a reader
# of format 2 reads every 2.x dataset; a table added in a minor is absent from older ones.
FORMAT_MINOR = 2
ADDED_IN_MINOR = {"meter_gains": 1, "coverage": 1}
# error kinds of the coverage table added in a minor (their rows are absent from older ones)
COVERAGE_KINDS_ADDED_IN_MINOR = {"offset": 2, "frozen": 2}


def coverage_kind_in(error_kind: str, minor: int) -> bool:
    """Whether a dataset of format 2.``minor`` has coverage rows of this error kind."""
    return COVERAGE_KINDS_ADDED_IN_MINOR.get(error_kind.split(":")[0], 0) <= minor


def tables_in(minor: int) -> list[str]:
    """The tables a dataset of format 2.``minor`` holds (older datasets lack later additions)."""
    return [t for t in TABLES if ADDED_IN_MINOR.get(t, 0) <= minor]


SIGN_CONVENTION = "positive P and Q = power flowing from the meter's bus into its branch"


def arrow_schema(table: str, *, for_csv: bool = False) -> pa.Schema:
    """Parquet keeps real timestamps; CSV gets ISO 8601 text with a Z (what Table Schema parses).

    Every field carries its description (and unit) as Parquet field metadata, and the schema
    the table's title, key, the format version and the sign convention, for readers without
    ``datapackage.json``.
    """
    spec = TABLES[table]
    fields = []
    for c in spec["columns"]:
        meta = {"description": c.description}
        if c.unit:
            meta["unit"] = c.unit
        typ = pa.string() if for_csv and c.type == "datetime" else ARROW_TYPES[c.type]
        fields.append(pa.field(c.name, typ, metadata=meta))
    meta = {
        "benchwalk:table": table,
        "benchwalk:title": spec["title"],
        "benchwalk:format": str(FORMAT_VERSION),
        "benchwalk:format_minor": str(FORMAT_MINOR),
        "benchwalk:sign_convention": SIGN_CONVENTION,
    }
    if "primaryKey" in spec:
        meta["benchwalk:key"] = ",".join(spec["primaryKey"])
    return pa.schema(fields, metadata=meta)


def column_names(table: str) -> list[str]:
    return [c.name for c in TABLES[table]["columns"]]


def table_schema(name: str) -> dict[str, Any]:
    """The table's Table Schema, as ``datapackage.json`` lists it."""
    spec = TABLES[name]
    fields = []
    for c in spec["columns"]:
        f: dict[str, Any] = {"name": c.name, "type": c.type, "description": c.description}
        if c.unit:
            f["unit"] = c.unit
        if c.required:
            f["constraints"] = {"required": True}
        fields.append(f)
    schema: dict[str, Any] = {"$schema": TS_SCHEMA, "fields": fields, "missingValues": [""]}
    if "primaryKey" in spec:
        schema["primaryKey"] = spec["primaryKey"]
    if "foreignKeys" in spec:
        schema["foreignKeys"] = spec["foreignKeys"]
    return schema
