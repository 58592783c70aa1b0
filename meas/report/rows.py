"""The figures a report shows, gathered from the dataset tables alone.

``gather`` reads the tables once; the row Protocols type the ``itertuples`` rows that the
renderers walk, as the dataset schema defines their columns.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Protocol, cast

import pandas as pd

from ..dataset.read import Dataset, load_dataset, read_table
from .text import plain

# quantity keys summarized per meter and step: (column title, unit, keys averaged per snapshot)
KEY_READINGS = [
    ("P", "W", ["p.T"]),
    ("Q", "var", ["q.T"]),
    ("V (L-N, mean)", "V", ["v_ln.A", "v_ln.B", "v_ln.C"]),
    ("I (mean)", "A", ["i.A", "i.B", "i.C"]),
]


@dataclass(frozen=True)
class ReportData:
    """What both renderings show: the dataset and three summaries computed once from it."""

    ds: Dataset
    readings: pd.DataFrame  # step, meter, title -> median
    issues: pd.DataFrame  # failed/waived checks, one row per distinct sentence
    balance: pd.DataFrame  # step, check, subject, value, limit, residual (medians over captures)


# The rows the report reads from the dataset tables (``DataFrame.itertuples``), as the dataset
# schema defines their columns; an optional text is None (or NaN) when empty.


class MeterRow(Protocol):
    id: str
    label: str | None
    map: str
    bus: str
    branch: str | None
    reports: str | None
    ct_ratio: float
    vt_ratio: float
    class_p: str | None
    class_q: str | None
    class_v: str | None
    class_i: str | None
    endpoint: str | None


class StepRow(Protocol):
    id: str
    step_number: int
    title: str | None
    kind: str
    state: str | None
    outcome: str | None
    operator: str | None
    settle_s: float
    reason: str | None


class IssueRow(Protocol):
    """One row of ``ReportData.issues``."""

    step: str | None
    check: str
    subject: str
    message: str | None
    count: int
    value: float
    limit: float
    unit: str | None
    waived: bool
    reason: str


class BalanceRow(Protocol):
    """One row of ``ReportData.balance``."""

    step: str | None
    check: str
    subject: str
    value: float
    limit: float
    unit: str | None
    worst: str
    residual: float


def meter_rows(ds: Dataset) -> Iterable[MeterRow]:
    return cast(Iterable[MeterRow], ds["meters"].itertuples(index=False))


def step_rows(steps: pd.DataFrame) -> Iterable[StepRow]:
    return cast(Iterable[StepRow], steps.itertuples(index=False))


def issue_rows(issues: pd.DataFrame) -> Iterable[IssueRow]:
    return cast(Iterable[IssueRow], issues.itertuples(index=False))


def balance_rows(balance: pd.DataFrame) -> Iterable[BalanceRow]:
    return cast(Iterable[BalanceRow], balance.itertuples(index=False))


def gather(dataset_dir: Path) -> ReportData:
    """The figures the report shows, computed from the dataset tables."""
    ds = load_dataset(
        dataset_dir,
        tables=["snapshots", "steps", "checks", "meters", "topology", "events", "step_log"],
    )
    keys = sorted({k for _, _, ks in KEY_READINGS for k in ks})
    quantity_phase = [tuple(k.split(".")) for k in keys]
    m = read_table(
        ds.path,
        "measurements",
        columns=["step", "snapshot", "meter", "quantity", "phase", "value", "quality"],
        filters=[
            ("role", "=", "capture"),
            ("quantity", "in", sorted({q for q, _ in quantity_phase})),
        ],
    )
    m = m[m["quality"] == "ok"]
    m = m.assign(key=m["quantity"] + "." + m["phase"])
    frames = []
    for title, _unit, ks in KEY_READINGS:
        sub = m[m["key"].isin(ks)]
        per_snap = sub.groupby(["step", "meter", "snapshot"], sort=False)["value"].mean()
        med = per_snap.groupby(level=["step", "meter"], sort=False).median().rename(title)
        frames.append(med)
    readings = pd.concat(frames, axis=1).reset_index() if frames else pd.DataFrame()

    # the dataset's SQL-safe column names, under the report's short ones
    checks = ds["checks"].rename(columns={"check_id": "check", "limit_value": "limit"})
    steps = ds["steps"].set_index("id")
    capture_snaps = set(ds["snapshots"].loc[ds["snapshots"]["role"] == "capture", "snapshot"])
    bad = checks[checks["status"] == "fail"]
    issues = (
        bad.groupby(["step", "check", "subject", "message"], dropna=False, sort=False)
        .agg(
            count=("snapshot", "size"),
            value=("value", "median"),
            limit=("limit", "median"),
            unit=("unit", "first"),
        )
        .reset_index()
    )
    waived, reasons = [], []
    for st in issues["step"]:
        row = steps.loc[st] if st in steps.index else None
        # the runner accepts a failing step only on a gate="allow" step, with a reason: a waiver
        accepted = (
            row is not None and row["state"] == "accepted" and row["outcome"] in ("fail", "warn")
        )
        waived.append(bool(accepted))
        reasons.append(plain(row["reason"]) if row is not None else "")
    issues["waived"] = waived
    issues["reason"] = reasons

    buses = set(ds["topology"].loc[ds["topology"]["element"] == "bus", "id"])
    bal = checks[
        checks["subject"].isin(buses)
        & checks["snapshot"].isin(capture_snaps)
        & checks["limit"].notna()
    ]
    balance = (
        bal.assign(absval=bal["value"].abs())
        .groupby(["step", "check", "subject"], sort=False)
        .agg(
            value=("absval", "median"),
            limit=("limit", "median"),
            unit=("unit", "first"),
            worst=(
                "status",
                lambda s: (
                    "fail" if (s == "fail").any() else ("warn" if (s == "warn").any() else "pass")
                ),
            ),
        )
        .reset_index()
    )
    balance["residual"] = balance["value"] / balance["limit"]
    return ReportData(ds, readings, issues, balance)
