"""The offline re-check: every check run again from a dataset folder alone, and compared.

``benchwalk check DATASET`` reproduces the exported ``checks`` table bit for bit: the
profile comes from the copied profile files, each checked snapshot is rebuilt from the
measurements, polls and switch states, and its history is the list the runner journalled.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import cast

import numpy as np
import pandas as pd

from .dataset.estimate_tables import SessionEstimate, compare_rows, session_estimate_of
from .dataset.read import bad_dataset, format_minor, load_dataset, read_package, show_rel
from .dataset.schema import (
    ADDED_IN_MINOR,
    COVERAGE_KINDS_ADDED_IN_MINOR,
    column_names,
    coverage_kind_in,
)
from .dataset.snapshots import snapshots_of_step
from .progress import Progress

HISTORY = 64  # snapshots the runner keeps for history-dependent checks (meas.runner default)
CHECK_COLUMNS = column_names("checks")


def recheck(dataset_dir: Path, *, progress: Progress | None = None) -> pd.DataFrame:
    """Re-run ``meas.checks.run_checks`` from the dataset folder alone; returns a checks table.

    The profile comes from the copied profile files, each checked snapshot is rebuilt from the
    measurements, polls and switch states. Its history is exactly the snapshots the runner
    journalled as used (a ``check_history`` event per capture); without such an event, the
    snapshots recorded before it in the same step (all roles, oldest first, at most
    ``HISTORY``). Whatever cannot be replayed shows up as a difference in ``compare_checks``,
    never silently.
    """
    from .checks import CheckEngine  # noqa: PLC0415 - the checks are heavy; import on demand

    folder = Path(dataset_dir)
    ds = load_dataset(folder, tables=["snapshots", "polls", "switch_states", "checks", "events"])
    profile = ds.load_profile()
    recorded = _recorded_histories(ds["events"])
    engine = CheckEngine(profile)  # run_checks(profile, ...) with the per-profile set-up done once
    checks, snaps = ds["checks"], ds["snapshots"]
    wanted = set(checks["snapshot"].unique().tolist())
    rows: list[dict[str, object]] = []
    steps = list(dict.fromkeys(snaps.loc[snaps["snapshot"].isin(wanted), "step"].tolist()))
    for n, step in enumerate(steps, start=1):
        step_key = None if step is None or (isinstance(step, float) and math.isnan(step)) else step
        try:
            rebuilt = snapshots_of_step(folder, step_key, snaps, ds["polls"], ds["switch_states"])
        except (ValueError, KeyError, TypeError, AttributeError, OverflowError) as exc:
            raise bad_dataset(
                folder,
                f"the snapshots of step {step_key} cannot be rebuilt ({type(exc).__name__}: "
                f"{show_rel(str(exc))})",
            ) from None
        for i, (row_id, snap) in enumerate(rebuilt):
            if row_id not in wanted:
                continue
            if row_id in recorded:
                # the runner journalled exactly which snapshots these checks saw
                by_row = dict(rebuilt[:i])
                history = [by_row[r] for r in recorded[row_id] if r in by_row]
            else:
                history = [s for _, s in rebuilt[max(0, i - HISTORY) : i]]
            for r in engine.run(snap, history):
                rows.append(
                    {
                        "step": step_key,
                        "snapshot": row_id,
                        "check_id": r.check,
                        "subject": r.subject,
                        "status": str(r.status),
                        "value": r.value,
                        "limit_value": r.limit,
                        "residual": r.residual,
                        "unit": r.unit,
                        "message": r.message,
                        "cause": r.cause,
                    }
                )
        if progress:
            progress(n, len(steps))
    out = pd.DataFrame(rows, columns=CHECK_COLUMNS)
    for c in ("value", "limit_value", "residual"):
        out[c] = pd.to_numeric(out[c], errors="coerce").astype(float)
    return out


def _recorded_histories(events: pd.DataFrame) -> dict[int, list[int]]:
    """snapshot row -> the history rows its checks used, from the runner's check_history events."""
    out: dict[int, list[int]] = {}
    if events is None or events.empty:
        return out
    for data in events.loc[events["kind"] == "check_history", "data"]:
        try:
            d = json.loads(data)
            out[int(d["snapshot"])] = [int(r) for r in d["history"] if r is not None]
        except (TypeError, ValueError, KeyError, OverflowError):  # 1e400 reads as inf
            continue  # a damaged entry falls back to the same-step rule; differences still show
    return out


def compare_checks(
    exported: pd.DataFrame, rechecked: pd.DataFrame, *, rel: float = 1e-9
) -> list[str]:
    """Differences between two checks tables, one sentence each; [] when they agree."""

    def norm(df: pd.DataFrame) -> pd.DataFrame:
        d = df[CHECK_COLUMNS].copy()
        for c in ("step", "unit", "message", "cause"):
            d[c] = d[c].fillna("")
        return d.sort_values(["snapshot", "check_id", "subject"], kind="stable").reset_index(
            drop=True
        )

    a, b = norm(exported), norm(rechecked)
    if len(a) != len(b):
        return [f"the dataset has {len(a)} check results, the re-check gives {len(b)}"]
    diffs = []
    for col in CHECK_COLUMNS:
        x, y = a[col], b[col]
        if col in ("value", "limit_value", "residual"):
            xv, yv = x.to_numpy(float), y.to_numpy(float)
            same = (np.isnan(xv) & np.isnan(yv)) | np.isclose(xv, yv, rtol=rel, atol=0.0)
        else:
            same = (x.astype(str) == y.astype(str)).to_numpy()
        for i in np.flatnonzero(~same)[:5]:
            diffs.append(
                f"snapshot {a['snapshot'][i]} {a['check_id'][i]} {a['subject'][i]}: {col} "
                f"{x[i]!r} in the dataset, {y[i]!r} re-checked"
            )
    return diffs


ESTIMATE_TABLES = ("meter_gains", "coverage")


def recheck_estimate(dataset_dir: Path) -> SessionEstimate:
    """The session's joint estimate made again from the dataset folder alone (its tables and
    profile files), as the export made it."""
    return session_estimate_of(Path(dataset_dir))


def compare_estimate(dataset_dir: Path, fresh: SessionEstimate) -> list[str]:
    """Differences between the exported ``meter_gains`` and ``coverage`` tables and ``fresh``;
    coverage rows of error kinds the dataset's format predates are left out of the comparison
    (``estimate_note`` says so)."""
    ds = load_dataset(Path(dataset_dir), tables=list(ESTIMATE_TABLES))
    minor = format_minor(read_package(Path(dataset_dir)))
    diffs = []
    for name, rows in (("meter_gains", fresh.gains), ("coverage", fresh.coverage)):
        frame = ds[name].astype(object).where(ds[name].notna(), None)
        exported = cast(list[dict[str, object]], frame.to_dict("records"))
        if name == "coverage":  # both sides as the dataset's format knows them
            exported, rows = (
                [r for r in side if coverage_kind_in(str(r["error_kind"]), minor)]
                for side in (exported, rows)
            )
        diffs += compare_rows(name, exported, rows)
    return diffs


def estimate_note(dataset_dir: Path) -> str:
    """What the estimate comparison leaves out for this dataset's format, or ""."""
    minor = format_minor(read_package(Path(dataset_dir)))
    later = sorted(k for k, m in COVERAGE_KINDS_ADDED_IN_MINOR.items() if m > minor)
    if not later or minor < ADDED_IN_MINOR["coverage"]:
        return ""
    return (
        f"the dataset (format 2.{minor}) predates the {' and '.join(later)} coverage rows: "
        "compared without them"
    )


def estimate_recorded(dataset_dir: Path) -> bool:
    """The dataset holds the meter_gains and coverage tables (format 2.1 and later)."""
    return format_minor(read_package(Path(dataset_dir))) >= ADDED_IN_MINOR["meter_gains"]
