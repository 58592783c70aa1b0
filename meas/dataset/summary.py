"""A per-step capture summary small enough for a spreadsheet: the median of each meter,
quantity and phase over the step's captures, with its standard uncertainty, as .xlsx (numbers
and times as real cells) or as CSV for locales with a decimal comma.

Values are rounded to the register's resolution: an integer register's scale (its least
significant digit, in primary units) or, for float registers, 7 significant digits (a
float32 holds about 7). Uncertainties keep two significant digits (common practice, JCGM
100:2008 7.2.6).
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..checks.columns import COL
from ..checks.layout import Layout
from ..errors import BenchwalkError
from .read import load_dataset, read_table

FLOAT_DIGITS = 7
COLUMNS = [
    "step_number",
    "step",
    "meter",
    "quantity",
    "phase",
    "unit",
    "captures",
    "median",
    "u",
    "expanded_u",
    "first_utc",
    "last_utc",
]


@dataclass(frozen=True)
class Resolution:
    decimals: int | None  # fixed decimals (integer registers), or None
    significant: int | None  # significant digits (float registers), or None

    def round(self, x: float) -> float:
        if not math.isfinite(x):
            return x
        if self.decimals is not None:
            return round(x, self.decimals)
        if x == 0:
            return 0.0
        digits = (self.significant or FLOAT_DIGITS) - 1 - math.floor(math.log10(abs(x)))
        return round(x, digits)


def resolution(scale: float, is_float: bool) -> Resolution:
    """The rounding a register allows: its LSB for integers, 7 significant digits for floats."""
    if is_float or not (scale > 0 and math.isfinite(scale)):
        return Resolution(None, FLOAT_DIGITS)
    return Resolution(max(0, -math.floor(math.log10(scale) + 1e-9)), None)


def round_u(u: float) -> float:
    """Two significant digits."""
    if not math.isfinite(u) or u == 0:
        return u
    return round(u, 1 - math.floor(math.log10(abs(u))))


def capture_summary(folder: Path) -> pd.DataFrame:
    """The summary table of a dataset folder, one row per step, meter, quantity and phase."""
    ds = load_dataset(folder, tables=["steps", "bench"])
    profile = ds.load_profile()
    lay = Layout.build(profile)
    meter_row = {m.id: n for n, m in enumerate(lay.meters)}
    k = float(ds["bench"]["coverage_k"].iloc[0]) if len(ds["bench"]) else 2.0
    m = read_table(
        folder,
        "measurements",
        columns=["step", "time_utc", "meter", "quantity", "phase", "value", "u", "unit", "quality"],
        filters=[("role", "=", "capture"), ("quality", "=", "ok")],
    )
    if m.empty:
        return pd.DataFrame(columns=COLUMNS)
    g = m.groupby(["step", "meter", "quantity", "phase"], sort=False)
    out = g.agg(
        unit=("unit", "first"),
        captures=("value", "size"),
        median=("value", "median"),
        u=("u", "median"),
        first_utc=("time_utc", "min"),
        last_utc=("time_utc", "max"),
    ).reset_index()
    order = dict(zip(ds["steps"]["id"], ds["steps"]["step_number"], strict=True))
    out.insert(0, "step_number", out["step"].map(order).astype("Int64"))
    rounded = []
    for meter, quantity, phase, median in zip(
        out["meter"], out["quantity"], out["phase"], out["median"], strict=True
    ):
        mi, col = meter_row.get(str(meter)), COL.get(f"{quantity}.{phase}")
        res = (
            resolution(float(lay.scale[mi, col]), bool(lay.is_float[mi, col]))
            if mi is not None and col is not None
            else Resolution(None, FLOAT_DIGITS)
        )
        rounded.append(res.round(float(median)))
    out["median"] = rounded
    out["expanded_u"] = [round_u(k * u) for u in out["u"]]
    out["u"] = [round_u(u) for u in out["u"]]
    return out.sort_values(["step_number", "meter", "quantity", "phase"], kind="stable")[COLUMNS]


def write_xlsx(table: pd.DataFrame, path: Path) -> None:
    """One sheet; numbers as numeric cells, times as date-time cells (UTC, no zone: Excel has none)."""
    from openpyxl import Workbook
    from openpyxl.utils import get_column_letter

    wb = Workbook()
    ws = wb.active
    assert ws is not None
    ws.title = "captures"
    ws.append(COLUMNS)
    for r in table.itertuples(index=False):
        row: list[object] = []
        for name, v in zip(COLUMNS, r, strict=True):
            if name.endswith("_utc"):
                row.append(None if pd.isna(v) else pd.Timestamp(v).tz_convert(None).to_pydatetime())
            elif isinstance(v, float | np.floating):
                row.append(None if math.isnan(v) else float(v))
            elif v is pd.NA:
                row.append(None)
            else:
                row.append(v.item() if isinstance(v, np.generic) else v)
        ws.append(row)
    for i, name in enumerate(COLUMNS, start=1):
        if name.endswith("_utc"):
            for (cell,) in ws.iter_rows(min_row=2, min_col=i, max_col=i):
                cell.number_format = "yyyy-mm-dd hh:mm:ss"
        ws.column_dimensions[get_column_letter(i)].width = 20 if name.endswith("_utc") else 12
    ws.freeze_panes = "A2"
    wb.save(path)


def write_decimal_comma_csv(table: pd.DataFrame, path: Path) -> None:
    """Semicolon-separated, decimal comma, times as 'YYYY-MM-DD HH:MM:SS' (UTC): what
    spreadsheets set to a decimal-comma locale read as numbers and dates."""

    def cell(name: str, v: object) -> str:
        if v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v)):
            return ""
        if name.endswith("_utc"):
            return pd.Timestamp(v).strftime("%Y-%m-%d %H:%M:%S")  # type: ignore[arg-type]
        if isinstance(v, float | np.floating):
            return repr(float(v)).replace(".", ",")
        return str(v)

    with path.open("w", encoding="utf-8-sig", newline="") as f:
        w = csv.writer(f, delimiter=";")
        w.writerow(COLUMNS)
        for r in table.itertuples(index=False):
            w.writerow([cell(n, v) for n, v in zip(COLUMNS, r, strict=True)])


def write_summary(folder: Path, out: Path) -> Path:
    """The summary as .xlsx or, for a .csv name, as decimal-comma CSV."""
    table = capture_summary(folder)
    try:
        if out.suffix.lower() == ".xlsx":
            write_xlsx(table, out)
        elif out.suffix.lower() == ".csv":
            write_decimal_comma_csv(table, out)
        else:
            raise BenchwalkError(f"{out}: write the summary as .xlsx or .csv")
    except OSError as exc:
        raise BenchwalkError(f"{out}: cannot write the summary ({exc.strerror or exc})") from None
    return out
