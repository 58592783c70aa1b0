"""A register map as a CSV table, the form meter vendors publish maps in.

``[maps.ID] csv = "maps/vendor.csv"`` (a path relative to the profile, inside its folder)
reads the registers from a UTF-8 CSV file with a header row; the map's ``[defaults]`` fill
the columns a row leaves empty. Columns (docs/profile-format.md):

| column | meaning |
|---|---|
| ``quantity`` | required: the quantity key, e.g. ``p.A``, ``v_ll.BC``, ``e_imp.T``, or an identification key (``serial``, ``firmware``, ``model``, ``vendor``, ``hardware``) for a text register |
| ``address`` | required: first register, 0-based |
| ``type`` | ``int16`` ... ``float64``, ``int64``, ``uint64``, or ``string`` (identification keys only) |
| ``count`` | ``string`` only: registers, two characters each |
| ``kind`` | ``holding`` or ``input`` |
| ``word_order``, ``byte_order`` | ``big`` or ``little`` |
| ``scale``, ``offset`` | engineering value = raw x scale + offset |
| ``unit`` | the quantity's SI unit, as a check of the scale |

Empty lines and lines whose first cell starts with ``#`` are skipped; other columns (a
vendor's description, say) are ignored. Problems name the CSV file and line.
"""

from __future__ import annotations

import csv
import io
from typing import Any

from .scanner import Key
from .tables import Doc

COLUMNS = (
    "quantity",
    "address",
    "type",
    "count",
    "kind",
    "word_order",
    "byte_order",
    "scale",
    "offset",
    "unit",
)
_INT = ("address", "count")
_NUM = ("scale", "offset")


def csv_registers(file: str, text: str, doc_problems: list[Any]) -> tuple[Doc, dict[str, Any]]:
    """(a Doc locating each quantity at its CSV line, {quantity: inline-table-like dict})."""
    lines: dict[Key, int] = {}
    doc = Doc(file, lines, doc_problems)
    out: dict[str, Any] = {}
    reader = csv.reader(io.StringIO(text))
    header: list[str] | None = None
    for row in reader:
        n = reader.line_num
        if not row or not any(c.strip() for c in row) or row[0].lstrip().startswith("#"):
            continue
        if header is None:
            header = [c.strip().lower() for c in row]
            lines[("header",)] = n
            missing = [c for c in ("quantity", "address") if c not in header]
            if missing:
                doc.add(("header",), f"the header row needs the columns {', '.join(missing)}")
                return doc, {}
            continue
        cells = {h: (row[i].strip() if i < len(row) else "") for i, h in enumerate(header)}
        key = cells.get("quantity", "")
        lines[(key,)] = n
        if not key:
            doc.add((f"line {n}",), "no quantity on this row")
            continue
        if key in out:
            doc.add((key,), f"{key} is given twice (first on line {lines[('first', key)]})")
            continue
        lines[("first", key)] = n
        value: dict[str, Any] = {}
        bad = False
        for col in COLUMNS[1:]:
            cell = cells.get(col, "")
            if not cell:
                continue
            try:
                value[col] = int(cell, 0) if col in _INT else float(cell) if col in _NUM else cell
            except ValueError:
                doc.add((key,), f"{col} {cell!r} is not a number")
                bad = True
        if not bad:  # one line per mistake: a row with a bad cell is not read further
            out[key] = value
    if header is None:
        doc.add(("header",), "empty CSV file: give a header row and one row per register")
    return doc, out
