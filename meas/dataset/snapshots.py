"""Snapshots rebuilt from a dataset's tables: measurements, polls and switch states.

One rebuild serves the offline re-check (``meas.recheck``) and the session estimate written at
export (``meas.dataset.estimate_tables``): the export reads its own freshly written tables back,
so ``benchwalk check`` replays exactly the snapshots the exported tables were made from.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from pathlib import Path
from typing import Protocol, cast

import pandas as pd

from ..snapshot import CommState, MeterBlock, Quality, Snapshot
from .read import read_table

READING_COLUMNS = ["snapshot", "step", "meter", "quantity", "phase", "value", "quality"]


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


def _readings_by_block(
    m: pd.DataFrame,
) -> dict[tuple[int, str], tuple[list[str], list[float], list[Quality]]]:
    """(snapshot, meter) -> its reading keys, values and qualities, in table order.

    Columns become Python lists once and rows are grouped in one pass: grouping the frame per
    snapshot and meter cost pandas overhead per block, most of a re-check's time.
    """
    keys = (m["quantity"] + "." + m["phase"]).tolist()
    values = m["value"].to_numpy(dtype=float).tolist()
    quality = {q: Quality(q) for q in m["quality"].unique()}
    quals = [quality[q] for q in m["quality"].tolist()]
    out: dict[tuple[int, str], tuple[list[str], list[float], list[Quality]]] = {}
    for i, (snap, meter) in enumerate(
        zip(m["snapshot"].tolist(), m["meter"].tolist(), strict=True)
    ):
        got = out.get((snap, meter))
        if got is None:
            got = out[(snap, meter)] = ([], [], [])
        got[0].append(keys[i])
        got[1].append(values[i])
        got[2].append(quals[i])
    return out


def rebuild(
    m: pd.DataFrame, mine: pd.DataFrame, polls: pd.DataFrame, switches: pd.DataFrame
) -> list[tuple[int, Snapshot]]:
    """The snapshots of ``mine`` (rows of the snapshots table) with their readings ``m``, in
    table order, as (snapshot row id, Snapshot)."""
    out = []
    readings = _readings_by_block(m)
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
    none: tuple[list[str], list[float], list[Quality]] = ([], [], [])
    for s in cast(Iterable[_SnapshotsRow], mine.itertuples(index=False)):
        blocks = {}
        step_polls = poll_by.get(s.snapshot, polls.iloc[0:0])
        for p in cast(Iterable[_PollsRow], step_polls.itertuples(index=False)):
            keys, values, quals = readings.get((s.snapshot, p.meter), none)
            blocks[p.meter] = MeterBlock(
                meter=p.meter,
                values=dict(zip(keys, values, strict=True)),
                quality=dict(zip(keys, quals, strict=True)),
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


def snapshots_of_step(
    folder: Path, step: str | None, snaps: pd.DataFrame, polls: pd.DataFrame, switches: pd.DataFrame
) -> list[tuple[int, Snapshot]]:
    """The step's snapshots (every role) rebuilt from the tables, in journal order."""
    filt = [("step", "=", step)] if step is not None else None
    m = read_table(folder, "measurements", columns=READING_COLUMNS, filters=filt)
    if step is None:
        m = m[m["step"].isna()]
    mine = snaps[snaps["step"].isna()] if step is None else snaps[snaps["step"] == step]
    return rebuild(m, mine, polls, switches)


def captured_steps(folder: Path) -> list[tuple[str, list[Snapshot]]]:
    """Every step's capture snapshots, one group per step and switch configuration (a step
    whose switches changed between captures gives one group per configuration), in order."""
    snaps = read_table(folder, "snapshots")
    mine = snaps[(snaps["role"] == "capture") & snaps["step"].notna()]
    if mine.empty:
        return []
    polls = read_table(folder, "polls")
    switches = read_table(folder, "switch_states")
    m = read_table(
        folder, "measurements", columns=READING_COLUMNS, filters=[("role", "=", "capture")]
    )
    steps = dict(zip(mine["snapshot"].tolist(), mine["step"].tolist(), strict=True))
    groups: dict[tuple[str, tuple[tuple[str, str], ...]], list[Snapshot]] = {}
    for row_id, snap in rebuild(m, mine, polls, switches):
        key = (str(steps[row_id]), tuple(sorted(snap.switches.items())))
        groups.setdefault(key, []).append(snap)
    return [(step, snaps_) for (step, _), snaps_ in groups.items()]
