"""The optional ``[report]`` table: cover facts of the commissioning report.

``project``, ``site``, ``document`` (number), ``revision`` and ``[[report.test_equipment]]``
(``name``, ``serial``, ``calibration_due``); a meter's own ``serial`` and ``calibration_due``
are read with the meter (``devices``). All optional: the report shows what is given.
"""

from __future__ import annotations

import datetime as dt

from ..model import ReportCover, TestEquipment
from .tables import Table


def due_date(t: Table, key: str) -> str:
    """A calibration due date as ISO text: a TOML date or a ``YYYY-MM-DD`` string."""
    v = t.raw(key)
    t.seen.add(key)
    if v is None:
        return ""
    if isinstance(v, dt.date) and not isinstance(v, dt.datetime):
        return v.isoformat()
    if isinstance(v, str):
        try:
            return dt.date.fromisoformat(v).isoformat()
        except ValueError:
            pass
    t.doc.add(t.at(key), f"{key} must be a date like 2027-03-31, got {v!r}")
    return ""


def read_cover(root: Table) -> ReportCover:
    t = root.table("report")
    if t is None:
        return ReportCover()
    items = []
    raw = t.raw("test_equipment")
    t.seen.add("test_equipment")
    if raw is not None and not (isinstance(raw, list) and all(isinstance(x, dict) for x in raw)):
        t.doc.add(
            t.at("test_equipment"),
            "test_equipment must be a list of tables ([[report.test_equipment]])",
        )
        raw = None
    for i, data in enumerate(raw or []):
        e = Table(t.doc, data, (*t.path, "test_equipment", i))
        name = e.get("name", "str", None, required=True)
        items.append(
            TestEquipment(
                name=name or "",
                serial=e.get("serial", "str", ""),
                calibration_due=due_date(e, "calibration_due"),
            )
        )
        e.finish()
    cover = ReportCover(
        project=t.get("project", "str", ""),
        site=t.get("site", "str", ""),
        document=t.get("document", "str", ""),
        revision=t.get("revision", "str", ""),
        test_equipment=tuple(items),
    )
    t.finish()
    return cover
