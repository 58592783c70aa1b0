"""The figures a report shows, gathered from the dataset tables alone.

``gather`` reads the tables once; the row Protocols type the ``itertuples`` rows that the
renderers walk, as the dataset schema defines their columns.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol, cast

import numpy as np
import pandas as pd

from ..dataset.read import Dataset, load_dataset, read_table
from ..dataset.schema import MAIN_PROFILE, PROFILE_DIR
from ..errors import BenchwalkError
from ..model import Profile
from ..profile import load_profile
from ..verdict import (
    OUTCOME_WORDS,
    VERDICT_WORDS,
    StepRecord,
    Verdict,
    outcome_from_log,
    session_verdict,
)
from .fault_section import read_fault_summary
from .text import plain

# per-phase readings shown per meter and step: (row title, quantity, unit)
PHASE_ROWS = [("V L-N", "v_ln", "V"), ("I", "i", "A"), ("P", "p", "W"), ("Q", "q", "var")]
PHASE_QUANTITIES = {q for _, q, _ in PHASE_ROWS}
# angles for the phasor diagrams, each referred to the meter's own V_A
ANGLE_QUANTITIES = {"v_ang", "i_ang"}

# quantity keys summarized per meter and step: (column title, unit, keys averaged per snapshot)
KEY_READINGS = [
    ("P", "W", ["p.T"]),
    ("Q", "var", ["q.T"]),
    ("V (L-N, mean)", "V", ["v_ln.A", "v_ln.B", "v_ln.C"]),
    ("I (mean)", "A", ["i.A", "i.B", "i.C"]),
]


@dataclass(frozen=True)
class ReportData:
    """What both renderings show: the dataset and the summaries computed once from it."""

    ds: Dataset
    readings: pd.DataFrame  # step, meter, title -> median
    issues: pd.DataFrame  # failed/waived checks, one row per distinct sentence
    balance: pd.DataFrame  # step, check, subject, value, limit, residual (medians over captures)
    verdict: Verdict  # the session verdict, as the console and the summary showed it
    notes: pd.DataFrame  # step, time_utc, operator, message: notes made during the walk
    simulated: bool  # the readings came from the simulated bench
    phases: pd.DataFrame  # step, meter, key ("i.B") -> median over the captures
    profile: Profile | None  # the profile as the dataset keeps it (cover facts, serials)
    fault: dict[str, Any] | None = None  # a staged-fault summary inside the dataset folder
    # the session's joint estimate against the network model (empty in older datasets)
    gains: pd.DataFrame = field(default_factory=pd.DataFrame)  # the meter_gains table
    coverage: pd.DataFrame = field(default_factory=pd.DataFrame)  # the coverage table


def report_verdict(ds: Dataset) -> Verdict:
    """The verdict the dataset records; recomputed from the step outcomes for older datasets."""
    v = ds.meta.get("verdict")
    if isinstance(v, dict) and v.get("verdict") in VERDICT_WORDS:
        return Verdict(
            v["verdict"],
            str(v.get("detail", "")),
            int(v.get("exit_code", 0)),
            tuple(v.get("unverified", ())),
            bool(v.get("stopped", False)),
        )
    steps = ds["steps"]
    records = [
        StepRecord(
            str(r.id),
            outcome_from_log(plain(r.state) or None, plain(r.outcome) or None),
            plain(r.reason),
        )
        for r in step_rows(steps)
    ]
    return session_verdict(records)


def outcome_word(s: StepRow) -> str:
    """A step's outcome in words (``meas.verdict``): never "pass" for a skipped step."""
    return OUTCOME_WORDS[outcome_from_log(plain(s.state) or None, plain(s.outcome) or None)]


def is_simulated(ds: Dataset) -> bool:
    return bool(ds.meta.get("simulated") or (ds.meta.get("meta") or {}).get("simulated"))


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
    started_utc: object
    ended_utc: object


class IssueRow(Protocol):
    """One row of ``ReportData.issues``."""

    step: str | None
    check: str
    subject: str
    cause: str | None
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
        tables=[
            "snapshots",
            "steps",
            "checks",
            "meters",
            "topology",
            "events",
            "step_log",
            "meter_gains",
            "coverage",
        ],
    )
    m = read_table(
        ds.path,
        "measurements",
        columns=["step", "snapshot", "meter", "quantity", "phase", "value", "quality"],
        filters=[
            ("role", "=", "capture"),
            ("quantity", "in", sorted(PHASE_QUANTITIES | ANGLE_QUANTITIES)),
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
    phases = (
        _phase_medians(m)
        if not m.empty
        else pd.DataFrame(columns=["step", "meter", "key", "value"])
    )

    # the dataset's SQL-safe column names, under the report's short ones
    checks = ds["checks"].rename(columns={"check_id": "check", "limit_value": "limit"})
    steps = ds["steps"].set_index("id")
    capture_snaps = set(ds["snapshots"].loc[ds["snapshots"]["role"] == "capture", "snapshot"])
    bad = checks[checks["status"] == "fail"].assign(cause=lambda d: d["cause"].fillna(""))
    # one finding per step, check, subject and cause (a message carries its numbers, so
    # grouping by message gave one row per differing number); the commonest sentence stands
    issues = (
        bad.groupby(["step", "check", "subject", "cause"], dropna=False, sort=False)
        .agg(
            message=("message", lambda m: m.mode().iloc[0] if m.notna().any() else ""),
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
            row is not None
            and row["state"] == "accepted"
            and (
                outcome_from_log("accepted", plain(row["outcome"]) or None)
                == "accepted_with_failures"
            )
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
    ev = ds["events"]
    notes = ev.loc[ev["kind"] == "note", ["step", "time_utc", "operator", "message"]].reset_index(
        drop=True
    )
    return ReportData(
        ds,
        readings,
        issues,
        balance,
        report_verdict(ds),
        notes,
        is_simulated(ds),
        phases,
        kept_profile(ds),
        read_fault_summary(Path(dataset_dir)),
        ds["meter_gains"],
        ds["coverage"],
    )


def _phase_medians(m: pd.DataFrame) -> pd.DataFrame:
    """Median per step, meter and key; angles by their circular mean (a median of 179.9 and
    -179.9 degrees would point the wrong way)."""
    is_angle = m["quantity"].isin(ANGLE_QUANTITIES)
    keys = ["step", "meter", "key"]
    plain_part = m[~is_angle].groupby(keys, sort=False)["value"].median()
    ang = m[is_angle]
    rad = np.deg2rad(ang["value"].to_numpy(dtype=float))
    ang = ang.assign(c=np.cos(rad), s=np.sin(rad)).groupby(keys, sort=False)[["c", "s"]].mean()
    angle_part = pd.Series(np.rad2deg(np.arctan2(ang["s"], ang["c"])), index=ang.index)
    return pd.concat([plain_part, angle_part.rename("value")]).reset_index()


def phase_values(phases: pd.DataFrame, step_id: str) -> dict[tuple[str, str], float]:
    """(meter, key) -> median of one step's per-phase readings."""
    sub = phases[phases["step"] == step_id]
    return {
        (str(m), str(k)): float(v)
        for m, k, v in zip(
            sub["meter"].tolist(), sub["key"].tolist(), sub["value"].tolist(), strict=True
        )
    }


def kept_profile(ds: Dataset) -> Profile | None:
    """The profile as the dataset keeps it (its ``profile/`` folder), for the cover facts;
    None when it no longer loads (an older dataset): the report then shows none of them."""
    main = ds.path / PROFILE_DIR / MAIN_PROFILE
    try:
        return load_profile(main) if main.is_file() else None
    except BenchwalkError:
        return None
