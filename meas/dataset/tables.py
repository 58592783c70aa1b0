"""The journal's rows as dataset tables: Arrow tables for Parquet (real timestamps) and CSV (text).

Measurements are one row per meter, quantity and phase per snapshot, built in batches from
the packed journal rows with the repeated columns of each (meter, key set) made once. The
small tables come whole from the journal's read view and the profile.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pyarrow as pa

from ..bases import bases_of_json, network_factor, per_unit_base
from ..journal.read import JournalView, StepTransition
from ..journal.schema import QUALITY_CODES
from ..quantities import QUANTITIES, split_key
from ..verdict import outcome_from_log
from .derived import (
    Uncertainty,
    model_rows,
    profile_from_texts,
    repeated_polls,
    step_switch_rows,
)
from .schema import ARROW_TYPES, TABLES, column_names
from .vocabulary import bench_rows, iec61850, quantity_rows

BATCH_READINGS = 4000  # journal rows (one meter, one snapshot) per streamed batch

Json = dict[str, Any]  # the profile's JSON form, as the journal keeps it
Row = dict[str, Any]  # one table row, column -> value
Columns = dict[str, np.ndarray]  # one batch of measurements, column -> values


def _meter_factors(
    profile: Json, meter: Json, keys: Sequence[str]
) -> tuple[np.ndarray, np.ndarray]:
    """Per key: factor to network scale, and per-unit base (NaN where the profile defines none)."""
    bases = bases_of_json(profile, meter["bus"])
    net = np.full(len(keys), 1.0)
    pu = np.full(len(keys), math.nan)
    for n, k in enumerate(keys):
        net[n] = network_factor(bases, k)
        base = per_unit_base(bases, k)
        if base is not None:
            pu[n] = base.base
    return net, pu


@dataclass
class _Template:
    """Per (meter, key set): the repeated columns of one reading row, built once."""

    meter: np.ndarray
    quantity: np.ndarray
    phase: np.ndarray
    unit: np.ndarray
    mmxu: np.ndarray
    net: np.ndarray
    pu: np.ndarray


def _template(profile: Json, meters: dict[str, Json], meter: str, keys: Sequence[str]) -> _Template:
    qs, phs = zip(*(split_key(k) for k in keys), strict=True) if keys else ((), ())
    units = [QUANTITIES[q].unit if q in QUANTITIES else "" for q in qs]
    mmxu = [
        ".".join(iec61850(q, ph)) if q in QUANTITIES else "" for q, ph in zip(qs, phs, strict=True)
    ]
    m = meters.get(meter)
    if m is None:
        net, pu = np.full(len(keys), math.nan), np.full(len(keys), math.nan)
    else:
        net, pu = _meter_factors(profile, m, keys)
    obj = lambda xs: np.array(xs, dtype=object)  # noqa: E731
    return _Template(obj([meter] * len(keys)), obj(qs), obj(phs), obj(units), obj(mmxu), net, pu)


def _ts(values: Iterable[str | None]) -> pa.Array:
    arr = np.array(
        [np.datetime64(v[:-1] if v else "NaT", "us") for v in values], dtype="datetime64[us]"
    )
    return pa.array(arr, type=pa.timestamp("us"), from_pandas=True).cast(
        pa.timestamp("us", tz="UTC")
    )


_QUAL_NAMES = np.array([str(q) for q in QUALITY_CODES], dtype=object)


def measurement_batches(view: JournalView, session: str, profile: Json) -> Iterator[Columns]:
    """Column arrays of at most BATCH_READINGS journal rows each, in snapshot order; a poll
    journalled twice (settling, then capture) is written once, as its capture row."""
    keysets = view.keysets()
    skip = repeated_polls(view.snapshots())
    model = profile_from_texts(view.profile_files())
    unc = Uncertainty(model) if model is not None else None
    meters = {m["id"]: m for m in profile["meters"]}
    templates: dict[tuple[str, int], _Template] = {}
    for rows in view.reading_batches(BATCH_READINGS):
        parts: dict[str, list[Any]] = {
            k: [] for k in ("snap", "step", "role", "time", "tpl", "vals", "qual", "n")
        }
        rows = [r for r in rows if r.snapshot not in skip]
        if not rows:
            continue
        for r in rows:
            key = (r.meter, r.keyset)
            tpl = templates.get(key)
            if tpl is None:
                tpl = templates[key] = _template(profile, meters, r.meter, keysets[r.keyset])
            vals = np.frombuffer(r.vals, dtype="<f8")
            parts["vals"].append(vals)
            parts["qual"].append(np.frombuffer(r.qual, dtype=np.uint8))
            parts["tpl"].append(tpl)
            parts["n"].append(len(vals))
            parts["snap"].append(r.snapshot)
            parts["step"].append(r.step)
            parts["role"].append(r.role)
            parts["time"].append(r.time_utc)
        n = np.array(parts["n"])
        value = np.concatenate(parts["vals"])
        tpls = parts["tpl"]
        net = np.concatenate([t.net for t in tpls])
        pu = np.concatenate([t.pu for t in tpls])
        meter_ids = [t.meter[0] if len(t.meter) else "" for t in tpls]
        u = (
            unc.of_rows(meter_ids, [list(keysets[r.keyset]) for r in rows], parts["vals"])
            if unc is not None
            else np.full(value.size, np.nan)
        )
        yield {
            "session": np.full(value.size, session, dtype=object),
            "step": np.repeat(np.array(parts["step"], dtype=object), n),
            "snapshot": np.repeat(np.array(parts["snap"], dtype=np.int64), n),
            "role": np.repeat(np.array(parts["role"], dtype=object), n),
            "time_iso": np.repeat(np.array(parts["time"], dtype=object), n),
            "meter": np.concatenate([t.meter for t in tpls]),
            "quantity": np.concatenate([t.quantity for t in tpls]),
            "phase": np.concatenate([t.phase for t in tpls]),
            "value": value,
            "u": u,
            "unit": np.concatenate([t.unit for t in tpls]),
            "quality": _QUAL_NAMES[np.concatenate(parts["qual"])],
            "value_network": value * net,
            "value_pu": value / pu,
            "iec61850": np.concatenate([t.mmxu for t in tpls]),
        }


def _num_array(x: np.ndarray) -> pa.Array:
    """NaN becomes null: a failed read is missing, never a number."""
    return pa.array(x, type=pa.float64(), mask=np.isnan(x))


def measurement_tables(cols: Columns) -> tuple[pa.Table, pa.Table]:
    common = {
        "session": pa.array(cols["session"], pa.string()),
        "step": pa.array(cols["step"], pa.string()),
        "snapshot": pa.array(cols["snapshot"], pa.int64()),
        "role": pa.array(cols["role"], pa.string()),
    }
    rest = {
        "meter": pa.array(cols["meter"], pa.string()),
        "quantity": pa.array(cols["quantity"], pa.string()),
        "phase": pa.array(cols["phase"], pa.string()),
        "value": _num_array(cols["value"]),
        "u": _num_array(cols["u"]),
        "unit": pa.array(cols["unit"], pa.string()),
        "quality": pa.array(cols["quality"], pa.string()),
        "value_network": _num_array(cols["value_network"]),
        "value_pu": _num_array(cols["value_pu"]),
        "iec61850": pa.array(cols["iec61850"], pa.string()),
    }
    iso = pa.array(cols["time_iso"], pa.string())
    # the time column is the same per snapshot: parse each distinct value once
    uniq, inv = np.unique(cols["time_iso"].astype(str), return_inverse=True)
    ts = _ts(uniq.tolist()).take(pa.array(inv))
    pq_t = pa.table({**common, "time_utc": ts, **rest}).select(column_names("measurements"))
    csv_t = pa.table({**common, "time_utc": iso, **rest}).select(column_names("measurements"))
    return pq_t, csv_t


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
                _ts(data[c.name])
                if c.type == "datetime"
                else pa.array(data[c.name], ARROW_TYPES[c.type])
            )
            for c in cols
        }
    )
    return pq_t, csv_t
