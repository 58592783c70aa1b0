"""The journal's rows as dataset tables: Arrow tables for Parquet (real timestamps) and CSV (text).

The small tables (every one but ``measurements``, which ``meas.dataset.measurements`` streams)
come whole from the journal's read view and the profile.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable
from typing import Any

import numpy as np
import pyarrow as pa

from ..journal.read import JournalView, StepTransition
from ..verdict import outcome_from_log
from .derived import model_rows, profile_from_texts, repeated_polls, step_switch_rows
from .schema import ARROW_TYPES, TABLES
from .vocabulary import bench_rows, quantity_rows

Json = dict[str, Any]  # the profile's JSON form, as the journal keeps it
Row = dict[str, Any]  # one table row, column -> value


def utc_timestamps(values: Iterable[str | None]) -> pa.Array:
    """The journal's ISO 8601 UTC texts (``...Z``; None is missing) as Arrow UTC timestamps."""
    arr = np.array(
        [np.datetime64(v[:-1] if v else "NaT", "us") for v in values], dtype="datetime64[us]"
    )
    return pa.array(arr, type=pa.timestamp("us"), from_pandas=True).cast(
        pa.timestamp("us", tz="UTC")
    )


def _switch_text(d: dict[str, str] | None) -> str | None:
    return None if d is None else ";".join(f"{k}={v}" for k, v in d.items())


def small_tables(view: JournalView, prof: Json) -> dict[str, list[Row]]:
    """Every table but measurements, as rows, from the journal's view and the profile."""
    out: dict[str, list[Row]] = {}
    every = view.snapshots()
    skip = repeated_polls(every)
    snapshots = [r for r in every if r.id not in skip]
    out["snapshots"] = [
        {
            "snapshot": r.id,
            "seq": r.seq,
            "step": r.step,
            "role": r.role,
            "time_utc": r.time_utc,
            "t_mono": r.t_mono,
            "cycle_s": r.cycle_s,
            "saved_utc": r.saved_utc,
        }
        for r in snapshots
    ]
    out["polls"] = [r._asdict() for r in view.polls() if r.snapshot not in skip]
    out["switch_states"] = [
        {"snapshot": r.id, "switch": k, "state": v}
        for r in snapshots
        for k, v in json.loads(r.switches).items()
    ]
    checks = []
    for c in view.checks():
        v, lim = c.value, c.limit
        res = abs(v) / lim if v is not None and lim else None
        checks.append(
            {
                "step": c.step,
                "snapshot": c.snapshot,
                "check_id": c.check,
                "subject": c.subject,
                "status": c.status,
                "value": v,
                "limit_value": lim,
                "residual": res,
                "unit": c.unit,
                "message": c.message,
                "cause": c.cause,
            }
        )
    out["checks"] = checks
    history = view.step_history()
    out["step_log"] = [
        {
            "id": h["id"],
            "time_utc": h["time_utc"],
            "step": h["step"],
            "state": h["state"],
            "outcome": h["outcome"],
            "operator": h["operator"],
            "reason": h["reason"],
            "settle_s": h["settle_s"],
            "actual_switches": _switch_text(h["actual_switches"]),
            "expected_switches": _switch_text(h["expected_switches"]),
        }
        for h in history
    ]
    out["steps"] = _steps_rows(prof, history)
    out["step_switches"] = step_switch_rows(prof, history)
    out["meters"] = _meter_rows(prof)
    out["topology"] = _topology_rows(prof)
    out["quantities"] = quantity_rows()
    out["bench"] = bench_rows(prof)
    model = profile_from_texts(view.profile_files())
    out["model"] = model_rows(model, snapshots, skip) if model is not None else []
    out["events"] = [r._asdict() for r in view.events()]
    return out


def _steps_rows(prof: Json, history: list[StepTransition]) -> list[Row]:
    rows = []
    for n, s in enumerate(prof.get("steps", []), start=1):
        mine = [h for h in history if h["step"] == s["id"]]
        last = mine[-1] if mine else None
        settle = next((h["settle_s"] for h in mine if h["settle_s"] is not None), None)
        # the step outcome vocabulary of meas.verdict: never "pass" for a skipped step
        outcome = outcome_from_log(
            last["state"] if last else None,
            next((h["outcome"] for h in reversed(mine) if h["outcome"]), None),
        )
        reason = next((h["reason"] for h in reversed(mine) if h["reason"]), None)
        rows.append(
            {
                "id": s["id"],
                "step_number": n,
                "title": s.get("title"),
                "kind": s.get("kind"),
                "settle_s": settle,
                "state": last["state"] if last else None,
                "outcome": outcome,
                "operator": last["operator"] if last else None,
                "reason": reason,
                "started_utc": mine[0]["time_utc"] if mine else None,
                "ended_utc": last["time_utc"] if last else None,
            }
        )
    return rows


def _endpoint(t: Json) -> str:
    if "host" in t:
        return f"tcp://{t['host']}:{t.get('port', 502)}"
    return f"rtu://{t.get('device', '?')}"


def _meter_rows(prof: Json) -> list[Row]:
    buses = {b["id"]: b for b in prof["buses"]}
    rows = []
    for m in prof["meters"]:
        c = m.get("classes") or {}
        sign = (
            f"positive P and Q = power flowing from bus {m['bus']} into branch {m['branch']}"
            if m.get("branch")
            else "voltage only"
        )
        rows.append(
            {
                "id": m["id"],
                "label": m.get("label"),
                "map": m["map_id"],
                "bus": m["bus"],
                "branch": m.get("branch"),
                "zone": buses.get(m["bus"], {}).get("zone"),
                "sign_convention": sign,
                "apparent_power": (prof.get("maps") or {})
                .get(m["map_id"], {})
                .get("apparent_power"),
                "reports": m.get("reports"),
                "ct_ratio": m.get("ct_ratio"),
                "vt_ratio": m.get("vt_ratio"),
                "ct_primary_a": m.get("ct_primary_a"),
                "class_p": c.get("p"),
                "class_q": c.get("q"),
                "class_v": c.get("v"),
                "class_i": c.get("i"),
                "endpoint": _endpoint(m.get("transport") or {}),
                "unit_id": m.get("unit_id"),
            }
        )
    return rows


def _topology_rows(prof: Json) -> list[Row]:
    zones = {z["id"]: z for z in prof["bench"]["zones"]}
    buses = {b["id"]: b for b in prof["buses"]}
    rows = []
    blank = {
        k: None
        for k in (
            "kind",
            "label",
            "zone",
            "from_bus",
            "to_bus",
            "branch",
            "normal",
            "bench_v_ll",
            "network_v_ll",
        )
    }

    def zone_cols(zid: str | None) -> dict[str, Any]:
        z = zones.get(zid or "")
        return {
            "zone": zid,
            "bench_v_ll": z and z["bench_v_ll"],
            "network_v_ll": z and z["network_v_ll"],
        }

    for b in prof["buses"]:
        rows.append(
            {
                **blank,
                "element": "bus",
                "id": b["id"],
                "label": b.get("label"),
                **zone_cols(b["zone"]),
            }
        )
    for br in prof["branches"]:
        rows.append(
            {
                **blank,
                "element": "branch",
                "id": br["id"],
                "kind": br["kind"],
                "label": br.get("label"),
                "from_bus": br["from_bus"],
                "to_bus": br.get("to_bus"),
                **zone_cols(buses.get(br["from_bus"], {}).get("zone")),
            }
        )
    for s in prof["switches"]:
        rows.append(
            {
                **blank,
                "element": "switch",
                "id": s["id"],
                "kind": s.get("operation"),
                "label": s.get("label"),
                "branch": s["branch"],
                "normal": s.get("normal"),
            }
        )
    return rows


def to_tables(name: str, rows: list[Row]) -> tuple[pa.Table, pa.Table]:
    cols = TABLES[name]["columns"]
    data = {}
    for c in cols:
        vals = [r.get(c.name) for r in rows]
        if c.type == "number":
            vals = [
                None if v is None or (isinstance(v, float) and math.isnan(v)) else float(v)
                for v in vals
            ]
        data[c.name] = vals
    csv_t = pa.table(
        {
            c.name: pa.array(
                data[c.name], ARROW_TYPES[c.type] if c.type != "datetime" else pa.string()
            )
            for c in cols
        }
    )
    pq_t = pa.table(
        {
            c.name: (
                utc_timestamps(data[c.name])
                if c.type == "datetime"
                else pa.array(data[c.name], ARROW_TYPES[c.type])
            )
            for c in cols
        }
    )
    return pq_t, csv_t
