"""The offline re-check: every check run again from a dataset folder alone, and compared.

``benchwalk check DATASET`` reproduces the exported ``checks`` table bit for bit: the
profile comes from the copied profile files, each checked snapshot is rebuilt from the
measurements, polls and switch states, and its history is the list the runner journalled.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable
from pathlib import Path
from typing import Protocol, cast

import numpy as np
import pandas as pd

from .dataset.read import bad_dataset, load_dataset, read_table, show_rel
from .dataset.schema import column_names
from .progress import Progress
from .snapshot import CommState, MeterBlock, Quality, Snapshot


class _SnapshotsRow(Protocol):
    """A row of the snapshots table as pandas reads it (NaN for a missing number)."""

    snapshot: int
    seq: int
    time_utc: pd.Timestamp
    t_mono: float
    cycle_s: float


class _PollsRow(Protocol):
    """A row of the polls table as pandas reads it (NaN or NaT for a missing value)."""

    meter: str
    state: str
    exception_code: float
    error: str | None
    error_count: int
    latency_s: float
    last_good_utc: pd.Timestamp


HISTORY = 64  # snapshots the runner keeps for history-dependent checks (meas.runner default)
CHECK_COLUMNS = column_names("checks")


def _snapshots_of_step(
    folder: Path, step: str | None, snaps: pd.DataFrame, polls: pd.DataFrame, switches: pd.DataFrame
) -> list[tuple[int, Snapshot]]:
    """The step's snapshots rebuilt from the tables, in journal order."""
    filt = [("step", "=", step)] if step is not None else None
    m = read_table(
        folder,
        "measurements",
        columns=["snapshot", "step", "meter", "quantity", "phase", "value", "quality"],
        filters=filt,
    )
    if step is None:
        m = m[m["step"].isna()]
    mine = snaps[snaps["step"].isna()] if step is None else snaps[snaps["step"] == step]
    out = []
    by_snap = {k: g for k, g in m.groupby("snapshot", sort=False)}
    poll_by = {
        k: g
        for k, g in polls[polls["snapshot"].isin(mine["snapshot"])].groupby("snapshot", sort=False)
    }
    sw_by = {
        k: g
        for k, g in switches[switches["snapshot"].isin(mine["snapshot"])].groupby(
            "snapshot", sort=False
        )
    }
    for s in cast(Iterable[_SnapshotsRow], mine.itertuples(index=False)):
        g = by_snap.get(s.snapshot)
        blocks = {}
        vals_by_meter = {k: mg for k, mg in g.groupby("meter", sort=False)} if g is not None else {}
        step_polls = poll_by.get(s.snapshot, polls.iloc[0:0])
        for p in cast(Iterable[_PollsRow], step_polls.itertuples(index=False)):
            mg = vals_by_meter.get(p.meter)
            keys = (mg["quantity"] + "." + mg["phase"]).tolist() if mg is not None else []
            values = mg["value"].to_numpy(dtype=float).tolist() if mg is not None else []
            quals = mg["quality"].tolist() if mg is not None else []
            blocks[p.meter] = MeterBlock(
                meter=p.meter,
                values=dict(zip(keys, values, strict=True)),
                quality={k: Quality(q) for k, q in zip(keys, quals, strict=True)},
                state=CommState(p.state),
                exception_code=None if pd.isna(p.exception_code) else int(p.exception_code),
                error=p.error or "",
                last_good_utc=None if pd.isna(p.last_good_utc) else p.last_good_utc.to_pydatetime(),
                error_count=int(p.error_count),
                latency_s=math.nan if pd.isna(p.latency_s) else float(p.latency_s),
            )
        sw = sw_by.get(s.snapshot)
        out.append(
            (
                int(s.snapshot),
                Snapshot(
                    seq=int(s.seq),
                    time_utc=s.time_utc.to_pydatetime(),
                    t_mono=math.nan if pd.isna(s.t_mono) else float(s.t_mono),
                    meters=blocks,
                    switches=dict(zip(sw["switch"], sw["state"], strict=True))
                    if sw is not None
                    else {},
                    cycle_s=math.nan if pd.isna(s.cycle_s) else float(s.cycle_s),
                ),
            )
        )
    return out


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
            rebuilt = _snapshots_of_step(folder, step_key, snaps, ds["polls"], ds["switch_states"])
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
