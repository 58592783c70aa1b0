"""Export a session journal as a tidy, self-describing dataset folder, and read one back.

The folder holds every table twice, as CSV (for anyone) and Parquet (for speed), a
``datapackage.json`` (Frictionless Data Package v2 with Table Schemas, units and sha256
hashes), and the profile files copied from the journal. It is written into a temporary
folder beside the target, fsync'd and renamed, so a failed export never leaves half a
dataset. Measurements are streamed in batches: a four-hour, 32-meter session never sits in
memory whole.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
import shutil
import sqlite3
import sys
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path, PurePosixPath
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from . import __version__
from .errors import BenchwalkError, ProfileError
from .journal import QUALITY_CODES, Journal, resolve_session
from .quantities import QUANTITIES, split_key

DATA_DIR = "data"
PROFILE_DIR = "profile"
MAIN_PROFILE = "profile.toml"
BATCH_READINGS = 4000  # journal rows (one meter, one snapshot) per streamed batch
DP_SCHEMA = "https://datapackage.org/profiles/2.0/datapackage.json"
TS_SCHEMA = "https://datapackage.org/profiles/2.0/tableschema.json"

SQRT3 = math.sqrt(3.0)
_VOLTAGE = {"v_ln", "v_ll"}
_POWER = {"p", "q", "s", "e_imp", "e_exp"}
_PER_PHASE_POWER = {"p", "q", "s"}


# ---------------------------------------------------------------- table schemas


@dataclass(frozen=True)
class Col:
    name: str
    type: str  # Table Schema type: string, integer, number, datetime
    description: str
    unit: str | None = None
    required: bool = False


def _c(
    name: str, type_: str, description: str, unit: str | None = None, required: bool = False
) -> Col:
    return Col(name, type_, description, unit, required)


TABLES: dict[str, dict[str, Any]] = {
    "measurements": {
        "title": "Every recorded value, one row per meter, quantity and phase per snapshot",
        "columns": [
            _c("session", "string", "session id", required=True),
            _c("step", "string", "step id of the sequence; empty outside a step"),
            _c(
                "snapshot",
                "integer",
                "snapshot row id in the journal (joins snapshots.snapshot)",
                required=True,
            ),
            _c(
                "role",
                "string",
                "settling (before the step settled), capture (the step's record) or live",
                required=True,
            ),
            _c("time_utc", "datetime", "poll time, UTC", required=True),
            _c("meter", "string", "meter id (joins meters.id)", required=True),
            _c(
                "quantity",
                "string",
                "quantity name: v_ln, v_ll, i, p, q, s, pf, f, v_ang, i_ang, e_imp, e_exp",
                required=True,
            ),
            _c(
                "phase",
                "string",
                "A, B, C, N, AB, BC, CA, or T for total / single-valued",
                required=True,
            ),
            _c(
                "value",
                "number",
                "primary, bench-side value in SI units as read; empty when the read failed",
            ),
            _c("unit", "string", "unit of value and value_network", required=True),
            _c(
                "quality",
                "string",
                "ok, timeout, exception, decode, offline or stale; only ok values are valid",
                required=True,
            ),
            _c(
                "value_network",
                "number",
                "value at network scale: V x zone scale, A x power_scale/voltage_scale, W/var/VA x power_scale",
            ),
            _c(
                "value_pu",
                "number",
                "per unit on the bench bases (V: zone bench_v_ll, or over sqrt 3 for phase-neutral; power: s_base_va, over 3 per phase; A: base current)",
                unit="pu",
            ),
            _c("mmxu", "string", "IEC 61850-7-4 MMXU data object name of the quantity"),
        ],
        "primaryKey": ["snapshot", "meter", "quantity", "phase"],
        "foreignKeys": [
            {
                "fields": ["snapshot"],
                "reference": {"resource": "snapshots", "fields": ["snapshot"]},
            },
            {"fields": ["meter"], "reference": {"resource": "meters", "fields": ["id"]}},
        ],
    },
    "snapshots": {
        "title": "One row per recorded poll cycle",
        "columns": [
            _c("snapshot", "integer", "snapshot row id in the journal", required=True),
            _c("seq", "integer", "poll cycle number from the poller", required=True),
            _c("step", "string", "step id; empty outside a step"),
            _c("role", "string", "settling, capture or live", required=True),
            _c("time_utc", "datetime", "poll time, UTC", required=True),
            _c("t_mono", "number", "monotonic clock at the poll, for intervals", unit="s"),
            _c("cycle_s", "number", "time the poll cycle took", unit="s"),
            _c("saved_utc", "datetime", "when the journal committed it", required=True),
        ],
        "primaryKey": ["snapshot"],
    },
    "polls": {
        "title": "Communication state of each meter in each snapshot",
        "columns": [
            _c("snapshot", "integer", "snapshot row id", required=True),
            _c("meter", "string", "meter id", required=True),
            _c("state", "string", "ok, degraded, failing or offline", required=True),
            _c(
                "exception_code", "integer", "Modbus exception code the meter answered with, if any"
            ),
            _c("error", "string", "what went wrong this cycle, one line"),
            _c("error_count", "integer", "consecutive failed cycles", required=True),
            _c("latency_s", "number", "request-response time", unit="s"),
            _c("last_good_utc", "datetime", "last good answer, UTC"),
        ],
        "primaryKey": ["snapshot", "meter"],
        "foreignKeys": [
            {"fields": ["snapshot"], "reference": {"resource": "snapshots", "fields": ["snapshot"]}}
        ],
    },
    "switch_states": {
        "title": "Switch positions reported in each snapshot",
        "columns": [
            _c("snapshot", "integer", "snapshot row id", required=True),
            _c("switch", "string", "switch id", required=True),
            _c("state", "string", "open, closed or unknown", required=True),
        ],
        "primaryKey": ["snapshot", "switch"],
        "foreignKeys": [
            {"fields": ["snapshot"], "reference": {"resource": "snapshots", "fields": ["snapshot"]}}
        ],
    },
    "steps": {
        "title": "The sequence, one row per step, with its final outcome",
        "columns": [
            _c("id", "string", "step id", required=True),
            _c("order", "integer", "position in the sequence, from 1", required=True),
            _c("title", "string", "one line"),
            _c("kind", "string", "manual, remote, capture, hold or note", required=True),
            _c(
                "expected_switches",
                "string",
                "switch states the step expects, SWITCH=state separated by ;",
            ),
            _c(
                "actual_switches",
                "string",
                "switch states found at the last transition, SWITCH=state separated by ;",
            ),
            _c(
                "settle_s",
                "number",
                "time the network took to settle after the step's operation (its first settle; a retake does not count)",
                unit="s",
            ),
            _c(
                "state",
                "string",
                "last state reached: accepted, skipped, reviewing, ...; empty if never started",
            ),
            _c("outcome", "string", "last outcome: pass, warn, fail, signed, noted, ..."),
            _c("operator", "string", "who took the last decision"),
            _c("reason", "string", "reason given (skip, accept with failing checks)"),
            _c("started_utc", "datetime", "first transition"),
            _c("ended_utc", "datetime", "last transition"),
        ],
        "primaryKey": ["id"],
    },
    "step_log": {
        "title": "Every state transition of every step, in order",
        "columns": [
            _c("id", "integer", "transition number", required=True),
            _c("time_utc", "datetime", "when", required=True),
            _c("step", "string", "step id", required=True),
            _c("state", "string", "state entered", required=True),
            _c("outcome", "string", "outcome at this transition"),
            _c("operator", "string", "who"),
            _c("reason", "string", "reason given"),
            _c("settle_s", "number", "settle time", unit="s"),
            _c("actual_switches", "string", "switch states found, SWITCH=state separated by ;"),
            _c(
                "expected_switches", "string", "switch states expected, SWITCH=state separated by ;"
            ),
        ],
        "primaryKey": ["id"],
    },
    "checks": {
        "title": "Every check result recorded with a snapshot",
        "columns": [
            _c("step", "string", "step id"),
            _c("snapshot", "integer", "snapshot row id", required=True),
            _c("check", "string", "check id", required=True),
            _c("subject", "string", "meter, bus, branch or switch id", required=True),
            _c("status", "string", "pass, warn, fail or n/a", required=True),
            _c("value", "number", "the measured figure, in unit"),
            _c("limit", "number", "the allowed figure (expanded uncertainty), in unit"),
            _c("residual", "number", "|value| / limit; 1 is the edge of the band", unit="1"),
            _c("unit", "string", "unit of value and limit"),
            _c("message", "string", "one sentence: what is wrong, likely cause, what to look at"),
            _c("cause", "string", "machine-readable cause tag"),
        ],
        "foreignKeys": [
            {"fields": ["snapshot"], "reference": {"resource": "snapshots", "fields": ["snapshot"]}}
        ],
    },
    "meters": {
        "title": "The instruments",
        "columns": [
            _c("id", "string", "meter id", required=True),
            _c("label", "string", "name on the bench"),
            _c("map", "string", "register map id", required=True),
            _c("bus", "string", "bus where the voltage is measured", required=True),
            _c(
                "branch",
                "string",
                "branch whose current it measures; empty for a voltage-only meter",
            ),
            _c("zone", "string", "voltage zone of the bus"),
            _c("sign_convention", "string", "what positive P and Q mean for this meter"),
            _c("reports", "string", "primary or secondary values"),
            _c("ct_ratio", "number", "primary A per secondary A", unit="A/A"),
            _c("vt_ratio", "number", "primary V per secondary V", unit="V/V"),
            _c("ct_primary_a", "number", "rated CT primary current", unit="A"),
            _c("class_p", "string", "active power accuracy class"),
            _c("class_q", "string", "reactive power accuracy class"),
            _c("class_v", "string", "voltage accuracy class"),
            _c("class_i", "string", "current accuracy class"),
            _c("endpoint", "string", "tcp://host:port or rtu://device"),
            _c("unit_id", "integer", "Modbus unit id"),
        ],
        "primaryKey": ["id"],
    },
    "topology": {
        "title": "Buses, branches and switches of the bench",
        "columns": [
            _c("element", "string", "bus, branch or switch", required=True),
            _c("id", "string", "element id", required=True),
            _c(
                "kind",
                "string",
                "branch kind (source, line, transformer, load, shunt) or switch operation",
            ),
            _c("label", "string", "name on the bench"),
            _c("zone", "string", "voltage zone (buses; from-bus zone for branches)"),
            _c("from_bus", "string", "branch from-bus"),
            _c("to_bus", "string", "branch to-bus; empty for one-ended branches"),
            _c("branch", "string", "switch: the branch it opens"),
            _c("normal", "string", "switch: normal state"),
            _c("bench_v_ll", "number", "zone nominal line-to-line voltage on the bench", unit="V"),
            _c(
                "network_v_ll",
                "number",
                "line-to-line voltage it stands for on the network",
                unit="V",
            ),
        ],
        "primaryKey": ["element", "id"],
    },
    "events": {
        "title": "Everything that happened besides readings: operations, notes, timeouts",
        "columns": [
            _c("id", "integer", "event number", required=True),
            _c("time_utc", "datetime", "when", required=True),
            _c("kind", "string", "event kind", required=True),
            _c("step", "string", "step id"),
            _c("operator", "string", "who"),
            _c("message", "string", "what"),
            _c("data", "string", "details as a JSON object"),
        ],
        "primaryKey": ["id"],
    },
}

_ARROW = {
    "string": pa.string(),
    "integer": pa.int64(),
    "number": pa.float64(),
    "datetime": pa.timestamp("us", tz="UTC"),
}


def arrow_schema(table: str, *, for_csv: bool = False) -> pa.Schema:
    """Parquet keeps real timestamps; CSV gets ISO 8601 text with a Z (what Table Schema parses)."""
    return pa.schema(
        [
            pa.field(c.name, pa.string() if for_csv and c.type == "datetime" else _ARROW[c.type])
            for c in TABLES[table]["columns"]
        ]
    )


# ---------------------------------------------------------------- bases and scales


def _meter_factors(
    profile: dict[str, Any], meter: dict[str, Any], keys: Sequence[str]
) -> tuple[np.ndarray, np.ndarray]:
    """Per key: factor to network scale, and per-unit base (NaN where the profile defines none)."""
    bench = profile["bench"]
    zones = {z["id"]: z for z in bench["zones"]}
    buses = {b["id"]: b for b in profile["buses"]}
    zone = zones.get(buses.get(meter["bus"], {}).get("zone"))
    s_base = float(bench.get("s_base_va") or math.nan)
    p_scale = float(bench.get("power_scale") or math.nan)
    if zone is None:
        v_ll, v_scale = math.nan, math.nan
    else:
        v_ll = float(zone["bench_v_ll"])
        v_scale = float(zone["network_v_ll"]) / v_ll
    i_base = s_base / (SQRT3 * v_ll)
    net = np.full(len(keys), 1.0)
    pu = np.full(len(keys), math.nan)
    for n, k in enumerate(keys):
        q, ph = split_key(k)
        if q in _VOLTAGE:
            net[n] = v_scale
            pu[n] = v_ll / SQRT3 if q == "v_ln" else v_ll
        elif q == "i":
            net[n] = p_scale / v_scale
            pu[n] = i_base
        elif q in _POWER:
            net[n] = p_scale
            if q in _PER_PHASE_POWER:
                pu[n] = s_base if ph == "T" else s_base / 3.0
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


def _template(
    profile: dict[str, Any], meters: dict[str, dict], meter: str, keys: Sequence[str]
) -> _Template:
    qs, phs = zip(*(split_key(k) for k in keys), strict=True) if keys else ((), ())
    units = [QUANTITIES[q].unit if q in QUANTITIES else "" for q in qs]
    mmxu = [QUANTITIES[q].mmxu if q in QUANTITIES else "" for q in qs]
    m = meters.get(meter)
    if m is None:
        net, pu = np.full(len(keys), math.nan), np.full(len(keys), math.nan)
    else:
        net, pu = _meter_factors(profile, m, keys)
    obj = lambda xs: np.array(xs, dtype=object)  # noqa: E731
    return _Template(obj([meter] * len(keys)), obj(qs), obj(phs), obj(units), obj(mmxu), net, pu)


# ---------------------------------------------------------------- reading the journal


def _ro_connect(path: Path) -> sqlite3.Connection:
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    conn.row_factory = sqlite3.Row
    return conn


def _ts(values: Iterable[str | None]) -> pa.Array:
    arr = np.array(
        [np.datetime64(v[:-1] if v else "NaT", "us") for v in values], dtype="datetime64[us]"
    )
    return pa.array(arr, type=pa.timestamp("us"), from_pandas=True).cast(
        pa.timestamp("us", tz="UTC")
    )


_QUAL_NAMES = np.array([str(q) for q in QUALITY_CODES], dtype=object)


def _measurement_batches(
    conn: sqlite3.Connection, session: str, profile: dict[str, Any]
) -> Iterator[dict[str, Any]]:
    """Column dicts of at most BATCH_READINGS journal rows each, in snapshot order."""
    keysets = {r["id"]: json.loads(r["keys"]) for r in conn.execute("SELECT id, keys FROM keyset")}
    meters = {m["id"]: m for m in profile["meters"]}
    templates: dict[tuple[str, int], _Template] = {}
    cur = conn.execute(
        "SELECT r.snapshot, r.meter, r.keyset, r.vals, r.qual, s.step, s.role, s.time_utc"
        " FROM reading r JOIN snapshot s ON s.id = r.snapshot ORDER BY r.snapshot, r.pos"
    )
    while True:
        rows = cur.fetchmany(BATCH_READINGS)
        if not rows:
            return
        parts: dict[str, list] = {
            k: [] for k in ("snap", "step", "role", "time", "tpl", "vals", "qual", "n")
        }
        for r in rows:
            key = (r["meter"], r["keyset"])
            tpl = templates.get(key)
            if tpl is None:
                tpl = templates[key] = _template(profile, meters, r["meter"], keysets[r["keyset"]])
            vals = np.frombuffer(r["vals"], dtype="<f8")
            parts["vals"].append(vals)
            parts["qual"].append(np.frombuffer(r["qual"], dtype=np.uint8))
            parts["tpl"].append(tpl)
            parts["n"].append(len(vals))
            parts["snap"].append(r["snapshot"])
            parts["step"].append(r["step"])
            parts["role"].append(r["role"])
            parts["time"].append(r["time_utc"])
        n = np.array(parts["n"])
        value = np.concatenate(parts["vals"])
        tpls = parts["tpl"]
        net = np.concatenate([t.net for t in tpls])
        pu = np.concatenate([t.pu for t in tpls])
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
            "unit": np.concatenate([t.unit for t in tpls]),
            "quality": _QUAL_NAMES[np.concatenate(parts["qual"])],
            "value_network": value * net,
            "value_pu": value / pu,
            "mmxu": np.concatenate([t.mmxu for t in tpls]),
        }


def _num_array(x: np.ndarray) -> pa.Array:
    """NaN becomes null: a failed read is missing, never a number."""
    return pa.array(x, type=pa.float64(), mask=np.isnan(x))


def _measurement_tables(cols: dict[str, Any]) -> tuple[pa.Table, pa.Table]:
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
        "unit": pa.array(cols["unit"], pa.string()),
        "quality": pa.array(cols["quality"], pa.string()),
        "value_network": _num_array(cols["value_network"]),
        "value_pu": _num_array(cols["value_pu"]),
        "mmxu": pa.array(cols["mmxu"], pa.string()),
    }
    iso = pa.array(cols["time_iso"], pa.string())
    # the time column is the same per snapshot: parse each distinct value once
    uniq, inv = np.unique(cols["time_iso"].astype(str), return_inverse=True)
    ts = _ts(uniq.tolist()).take(pa.array(inv))
    pq_t = pa.table({**common, "time_utc": ts, **rest}).select(
        [c.name for c in TABLES["measurements"]["columns"]]
    )
    csv_t = pa.table({**common, "time_utc": iso, **rest}).select(
        [c.name for c in TABLES["measurements"]["columns"]]
    )
    return pq_t, csv_t


def _switch_text(d: dict | None) -> str | None:
    return None if d is None else ";".join(f"{k}={v}" for k, v in d.items())


def _small_tables(conn: sqlite3.Connection, journal: Journal) -> dict[str, list[dict[str, Any]]]:
    prof = journal.profile_dict
    out: dict[str, list[dict[str, Any]]] = {}
    out["snapshots"] = [
        {
            "snapshot": r["id"],
            "seq": r["seq"],
            "step": r["step"],
            "role": r["role"],
            "time_utc": r["time_utc"],
            "t_mono": r["t_mono"],
            "cycle_s": r["cycle_s"],
            "saved_utc": r["saved_utc"],
        }
        for r in conn.execute("SELECT * FROM snapshot ORDER BY id")
    ]
    out["polls"] = [
        {
            "snapshot": r["snapshot"],
            "meter": r["meter"],
            "state": r["state"],
            "exception_code": r["exception_code"],
            "error": r["error"],
            "error_count": r["error_count"],
            "latency_s": r["latency_s"],
            "last_good_utc": r["last_good_utc"],
        }
        for r in conn.execute(
            "SELECT snapshot, meter, state, exception_code, error, error_count, latency_s,"
            " last_good_utc FROM reading ORDER BY snapshot, pos"
        )
    ]
    out["switch_states"] = [
        {"snapshot": r["id"], "switch": k, "state": v}
        for r in conn.execute("SELECT id, switches FROM snapshot ORDER BY id")
        for k, v in json.loads(r["switches"]).items()
    ]
    checks = []
    for r in conn.execute("SELECT * FROM check_result ORDER BY id"):
        v, lim = r["value"], r["limit"]
        res = abs(v) / lim if v is not None and lim else None
        checks.append(
            {
                "step": r["step"],
                "snapshot": r["snapshot"],
                "check": r["check"],
                "subject": r["subject"],
                "status": r["status"],
                "value": v,
                "limit": lim,
                "residual": res,
                "unit": r["unit"],
                "message": r["message"],
                "cause": r["cause"],
            }
        )
    out["checks"] = checks
    history = journal.step_history()
    out["step_log"] = [
        {
            **{
                k: h[k]
                for k in (
                    "id",
                    "time_utc",
                    "step",
                    "state",
                    "outcome",
                    "operator",
                    "reason",
                    "settle_s",
                )
            },
            "actual_switches": _switch_text(h["actual_switches"]),
            "expected_switches": _switch_text(h["expected_switches"]),
        }
        for h in history
    ]
    out["steps"] = _steps_rows(prof, history)
    out["meters"] = _meter_rows(prof)
    out["topology"] = _topology_rows(prof)
    out["events"] = [
        {
            "id": r["id"],
            "time_utc": r["time_utc"],
            "kind": r["kind"],
            "step": r["step"],
            "operator": r["operator"],
            "message": r["message"],
            "data": r["data"],
        }
        for r in conn.execute("SELECT * FROM event ORDER BY id")
    ]
    return out


def _steps_rows(prof: dict[str, Any], history: list[dict]) -> list[dict[str, Any]]:
    rows = []
    for n, s in enumerate(prof.get("steps", []), start=1):
        mine = [h for h in history if h["step"] == s["id"]]
        last = mine[-1] if mine else {}
        settle = next((h["settle_s"] for h in mine if h["settle_s"] is not None), None)
        actual = next(
            (h["actual_switches"] for h in reversed(mine) if h["actual_switches"] is not None), None
        )
        outcome = next((h["outcome"] for h in reversed(mine) if h["outcome"]), None)
        reason = next((h["reason"] for h in reversed(mine) if h["reason"]), None)
        rows.append(
            {
                "id": s["id"],
                "order": n,
                "title": s.get("title"),
                "kind": s.get("kind"),
                "expected_switches": _switch_text(s.get("expect") or {}),
                "actual_switches": _switch_text(actual),
                "settle_s": settle,
                "state": last.get("state"),
                "outcome": outcome,
                "operator": last.get("operator"),
                "reason": reason,
                "started_utc": mine[0]["time_utc"] if mine else None,
                "ended_utc": last.get("time_utc"),
            }
        )
    return rows


def _endpoint(t: dict[str, Any]) -> str:
    if "host" in t:
        return f"tcp://{t['host']}:{t.get('port', 502)}"
    return f"rtu://{t.get('device', '?')}"


def _meter_rows(prof: dict[str, Any]) -> list[dict[str, Any]]:
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


def _topology_rows(prof: dict[str, Any]) -> list[dict[str, Any]]:
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


def _to_tables(name: str, rows: list[dict[str, Any]]) -> tuple[pa.Table, pa.Table]:
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
            c.name: pa.array(data[c.name], _ARROW[c.type] if c.type != "datetime" else pa.string())
            for c in cols
        }
    )
    pq_t = pa.table(
        {
            c.name: (
                _ts(data[c.name])
                if c.type == "datetime"
                else pa.array(data[c.name], _ARROW[c.type])
            )
            for c in cols
        }
    )
    return pq_t, csv_t


# ---------------------------------------------------------------- writing the folder


def _fsync_file(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


_CSV_OPTS = pacsv.WriteOptions(include_header=True, quoting_style="needed")


class _TableWriter:
    """Parquet and CSV of one table, written batch by batch."""

    def __init__(self, folder: Path, name: str):
        self.name = name
        self.pq_path = folder / f"{name}.parquet"
        self.csv_path = folder / f"{name}.csv"
        self._pq = pq.ParquetWriter(self.pq_path, arrow_schema(name), compression="zstd")
        self._csv = pacsv.CSVWriter(
            self.csv_path, arrow_schema(name, for_csv=True), write_options=_CSV_OPTS
        )
        self.rows = 0

    def write(self, pq_t: pa.Table, csv_t: pa.Table) -> None:
        self._pq.write_table(pq_t.cast(arrow_schema(self.name)))
        self._csv.write_table(csv_t.cast(arrow_schema(self.name, for_csv=True)))
        self.rows += pq_t.num_rows

    def close(self) -> None:
        self._pq.close()
        self._csv.close()


def default_dataset_dir(journal_path: Path, session_id: str) -> Path:
    return Path(journal_path).parent / f"{session_id}-dataset"


Progress = Callable[[int, int], None]  # (done, total) in journal rows


def export_session(
    journal_path_or_session: str | Path,
    out_dir: Path | None = None,
    *,
    overwrite: bool = False,
    progress: Progress | None = None,
) -> Path:
    """Write the session's dataset folder atomically; returns its path."""
    path = resolve_session(journal_path_or_session)
    journal = Journal.open(path)
    where = path  # what a failure message names: the journal, then the folder being written
    try:
        target = (
            Path(out_dir) if out_dir is not None else default_dataset_dir(path, journal.session_id)
        )
        where = target
        if target.exists() and not overwrite:
            raise BenchwalkError(
                f"{target}: a dataset already exists there; pass --overwrite to replace it or choose another --out"
            )
        target.parent.mkdir(parents=True, exist_ok=True)
        remove_stale_exports(target)
        tmp = target.parent / f".{target.name}.partial-{os.getpid()}"
        if tmp.exists():
            shutil.rmtree(tmp)
        try:
            _write_dataset(journal, path, tmp, progress)
            _swap_in(tmp, target)
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
        return target
    except OSError as exc:
        raise BenchwalkError(
            f"{exc.filename or where}: export failed ({exc.strerror or exc}); nothing was changed, the journal is intact"
        ) from exc
    except (pa.ArrowException, sqlite3.Error) as exc:
        raise BenchwalkError(
            f"{where}: export failed ({exc}); nothing was changed, the journal is intact"
        ) from exc
    finally:
        journal.close()


def _pid_alive(pid: int) -> bool:
    if pid <= 0:
        return True  # not a pid we could have written: leave it alone
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, OSError):
        return True
    return True


def remove_stale_exports(target: Path) -> list[Path]:
    """Remove what killed exports of ``target`` left beside it; returns what was removed.

    Only folders named exactly like our own temporaries (``.NAME.partial-PID``, and
    ``.NAME.old-PID`` once ``NAME`` exists again) whose process is gone: a running export's
    folder, another target's, a file or a symlink is never touched.
    """
    target = Path(target)
    pattern = re.compile(rf"\.{re.escape(target.name)}\.(partial|old)-(\d{{1,10}})")
    removed = []
    try:
        entries = list(os.scandir(target.parent))
    except OSError:
        return removed
    for e in entries:
        m = pattern.fullmatch(e.name)
        if m is None or not e.is_dir(follow_symlinks=False):
            continue
        pid = int(m.group(2))
        if pid == os.getpid() or _pid_alive(pid):
            continue
        if m.group(1) == "old" and not target.exists():
            continue  # a swap killed between its renames: this may be the only copy
        shutil.rmtree(e.path, ignore_errors=True)
        removed.append(Path(e.path))
    return removed


def _swap_in(tmp: Path, target: Path) -> None:
    old = None
    if target.exists():
        old = target.parent / f".{target.name}.old-{os.getpid()}"
        os.rename(target, old)
    os.rename(tmp, target)
    _fsync_dir(target.parent)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def _write_dataset(
    journal: Journal, journal_path: Path, folder: Path, progress: Progress | None
) -> None:
    data = folder / DATA_DIR
    data.mkdir(parents=True)
    conn = _ro_connect(journal_path)
    try:
        conn.execute(
            "BEGIN"
        )  # one read transaction: a consistent view while the runner may still append
        total = conn.execute("SELECT count(*) FROM reading").fetchone()[0]
        w = _TableWriter(data, "measurements")
        done = 0
        try:
            for cols in _measurement_batches(conn, journal.session_id, journal.profile_dict):
                w.write(*_measurement_tables(cols))
                done = min(total, done + BATCH_READINGS)
                if progress:
                    progress(done, total)
        finally:
            w.close()
        counts = {"measurements": w.rows}
        for name, rows in _small_tables(conn, journal).items():
            tw = _TableWriter(data, name)
            try:
                tw.write(*_to_tables(name, rows))
            finally:
                tw.close()
            counts[name] = tw.rows
    finally:
        conn.close()
    prof_dir = folder / PROFILE_DIR
    prof_dir.mkdir()
    profile_entries = []
    for i, (name, text) in enumerate(journal.profile_files()):
        rel = MAIN_PROFILE if i == 0 and name.endswith(".toml") else _safe_rel(name)
        dest = prof_dir / rel
        dest.parent.mkdir(parents=True, exist_ok=True)
        dest.write_bytes(
            text.encode("utf-8")
        )  # exactly the journalled text, no newline translation
        profile_entries.append(
            {
                "path": f"{PROFILE_DIR}/{rel}",
                "original_name": name,
                "hash": "sha256:" + _sha256(dest),
            }
        )
    for p in sorted(folder.rglob("*")):
        if p.is_file():
            _fsync_file(p)
    pkg = _datapackage(journal, folder, counts, profile_entries)
    (folder / "datapackage.json").write_text(
        json.dumps(pkg, indent=2, ensure_ascii=False) + "\n", encoding="utf-8"
    )
    _fsync_file(folder / "datapackage.json")
    for d in (data, prof_dir, folder):
        _fsync_dir(d)


def _safe_rel(name: str) -> str:
    parts = [p for p in Path(name).parts if p not in ("..", "/", "")]
    return "/".join(parts) or "companion.toml"


def _slug(text: str) -> str:
    return re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-") or "bench"


def _schema(name: str) -> dict[str, Any]:
    spec = TABLES[name]
    fields = []
    for c in spec["columns"]:
        f: dict[str, Any] = {"name": c.name, "type": c.type, "description": c.description}
        if c.unit:
            f["unit"] = c.unit
        if c.required:
            f["constraints"] = {"required": True}
        fields.append(f)
    schema: dict[str, Any] = {"$schema": TS_SCHEMA, "fields": fields, "missingValues": [""]}
    if "primaryKey" in spec:
        schema["primaryKey"] = spec["primaryKey"]
    if "foreignKeys" in spec:
        schema["foreignKeys"] = spec["foreignKeys"]
    return schema


def _datapackage(
    journal: Journal, folder: Path, counts: dict[str, int], profile_entries: list[dict]
) -> dict[str, Any]:
    resources = []
    for name in TABLES:
        csv_p = folder / DATA_DIR / f"{name}.csv"
        pq_p = folder / DATA_DIR / f"{name}.parquet"
        resources.append(
            {
                "name": name,
                "type": "table",
                "path": f"{DATA_DIR}/{name}.csv",
                "format": "csv",
                "mediatype": "text/csv",
                "encoding": "utf-8",
                "title": TABLES[name]["title"],
                "bytes": csv_p.stat().st_size,
                "hash": "sha256:" + _sha256(csv_p),
                "schema": _schema(name),
                # the same table as Parquet (real timestamps, faster to read); same columns and rows
                "benchwalk:parquet": {
                    "path": f"{DATA_DIR}/{name}.parquet",
                    "mediatype": "application/vnd.apache.parquet",
                    "bytes": pq_p.stat().st_size,
                    "hash": "sha256:" + _sha256(pq_p),
                },
                "benchwalk:rows": counts[name],
            }
        )
    return {
        "$schema": DP_SCHEMA,
        "name": f"benchwalk-{_slug(journal.session_id)}",
        "title": f"{journal.bench}: session {journal.session_id}",
        "description": (journal.profile_dict.get("bench", {}).get("description") or journal.bench),
        "created": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "contributors": [{"title": journal.operator, "roles": ["operator"]}]
        if journal.operator
        else [],
        "resources": resources,
        "benchwalk": {
            "format": 1,
            "software": f"benchwalk {__version__}",
            "session": journal.session_id,
            "bench": journal.bench,
            "operator": journal.operator,
            "session_started_utc": journal.created_utc,
            "profile_sha256": journal.profile_sha256,
            "profile_files": profile_entries,
            "meta": journal.meta,
            "sign_convention": "positive P and Q = power flowing from the meter's bus into its branch",
            "values": "primary, bench-side SI units; value_network and value_pu derived from the profile",
        },
    }


# ---------------------------------------------------------------- reading a dataset back


@dataclass
class Dataset:
    path: Path
    meta: dict[str, Any]  # the package's "benchwalk" property
    tables: dict[str, pd.DataFrame]
    profile_files: dict[str, str] = field(default_factory=dict)  # relative path -> text

    @property
    def session(self) -> str:
        return self.meta["session"]

    @property
    def profile_path(self) -> Path:
        return self.path / PROFILE_DIR / MAIN_PROFILE

    def load_profile(self):
        """The bench profile from the copied files (``meas.profile.load_profile``)."""
        from .profile import load_profile  # noqa: PLC0415 - keeps dataset import light

        if not self.profile_path.is_file():
            raise BenchwalkError(
                f"{self.path}: the dataset has no {PROFILE_DIR}/{MAIN_PROFILE} to rebuild the bench from"
            )
        try:
            return load_profile(self.profile_path)
        except ProfileError as exc:  # one line here: the full list is for `benchwalk lint`
            more = (
                f" (and {len(exc.problems) - 1} more; see benchwalk lint)"
                if len(exc.problems) > 1
                else ""
            )
            raise _bad(self.path, f"its profile does not load: {exc.problems[0]}{more}") from None

    def __getitem__(self, name: str) -> pd.DataFrame:
        return self.tables[name]


def _show_rel(rel: Any) -> str:
    """A descriptor path as one short printable line, whatever it holds."""
    text = rel if isinstance(rel, str) else repr(rel)
    text = text.encode("unicode_escape", "backslashreplace").decode("ascii")
    return text if len(text) <= 120 else text[:117] + "..."


def _bad(path: Path, what: str) -> BenchwalkError:
    return BenchwalkError(
        f"{path}: not a usable benchwalk dataset: {what}; export it again from the session journal"
    )


def read_package(folder: Path) -> dict[str, Any]:
    """The datapackage.json, checked for the parts benchwalk relies on."""
    folder = Path(folder)
    if not folder.is_dir():
        raise BenchwalkError(f"{folder}: no such dataset folder")
    dp = folder / "datapackage.json"
    try:
        pkg = json.loads(dp.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise _bad(folder, "datapackage.json is missing") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise _bad(folder, f"datapackage.json cannot be read ({exc})") from None
    except (RecursionError, ValueError):  # absurd nesting; numbers too long to convert
        raise _bad(
            folder, "datapackage.json cannot be read (nested too deep or a number too long)"
        ) from None
    if (
        not isinstance(pkg, dict)
        or not isinstance(pkg.get("benchwalk"), dict)
        or not isinstance(pkg.get("resources"), list)
    ):
        raise _bad(folder, "datapackage.json is not a benchwalk data package")
    meta = pkg["benchwalk"]
    for key in ("session", "bench"):
        if not isinstance(meta.get(key), str):
            raise _bad(folder, f"datapackage.json has no benchwalk.{key} text")
    if not isinstance(meta.get("profile_files", []), list):
        raise _bad(folder, "profile_files in datapackage.json is malformed")
    if not isinstance(meta.get("meta", {}), dict):
        raise _bad(folder, "benchwalk.meta in datapackage.json is malformed")
    return pkg


def _member(folder: Path, rel: Any) -> Path | None:
    """``folder / rel`` if ``rel`` is a relative path that stays inside the folder, else None.

    A descriptor is data from anyone: its paths must not reach /etc/passwd through an
    absolute path, ``..`` or a symlink.
    """
    if not isinstance(rel, str) or not rel or "\x00" in rel or "\\" in rel:
        return None
    parts = PurePosixPath(rel).parts
    if PurePosixPath(rel).is_absolute() or ".." in parts:
        return None
    try:
        p = folder / rel
        if not p.resolve().is_relative_to(folder.resolve()):
            return None
    except (OSError, RuntimeError, ValueError):
        return None
    return p


def _is_file(p: Path) -> bool:
    try:
        return p.is_file()
    except (OSError, ValueError):  # a name too long for the file system, say
        return False


def _verify_file(folder: Path, rel: str, expected_hash: Any, expected_bytes: Any = None) -> Path:
    p = _member(folder, rel)
    if p is None:
        raise _bad(folder, f"{_show_rel(rel)} is not a path inside the dataset folder")
    if not _is_file(p):
        raise _bad(folder, f"{_show_rel(rel)} is missing")
    if expected_bytes is not None and p.stat().st_size != expected_bytes:
        raise _bad(
            folder,
            f"{rel} has {p.stat().st_size} bytes, the package says {expected_bytes} (truncated or changed)",
        )
    if not isinstance(expected_hash, str) or not expected_hash.startswith("sha256:"):
        raise _bad(folder, f"{rel} has no sha256 in datapackage.json")
    if "sha256:" + _sha256(p) != expected_hash:
        raise _bad(
            folder, f"{rel} does not match its sha256 in datapackage.json (damaged or edited)"
        )
    return p


def _resources(folder: Path, pkg: dict[str, Any]) -> dict[str, dict[str, Any]]:
    out = {}
    for r in pkg["resources"]:
        if isinstance(r, dict) and isinstance(r.get("name"), str):
            out[r["name"]] = r
    return out


def verify_dataset(folder: Path) -> dict[str, Any]:
    """Check every file against its hash and size; returns the package. Cheap enough to do always."""
    folder = Path(folder)
    pkg = read_package(folder)
    res = _resources(folder, pkg)
    for name in TABLES:
        r = res.get(name)
        if r is None:
            raise _bad(folder, f"table {name} is not listed in datapackage.json")
        _verify_file(folder, r.get("path"), r.get("hash"), r.get("bytes"))
        alt = r.get("benchwalk:parquet")
        if not isinstance(alt, dict):
            raise _bad(folder, f"table {name} has no Parquet copy listed")
        _verify_file(folder, alt.get("path"), alt.get("hash"), alt.get("bytes"))
    for entry in pkg["benchwalk"].get("profile_files", []):
        if not isinstance(entry, dict):
            raise _bad(folder, "profile_files in datapackage.json is malformed")
        _verify_file(folder, entry.get("path"), entry.get("hash"))
    return pkg


def read_table(
    folder: Path, name: str, *, columns: list[str] | None = None, filters: Any = None
) -> pd.DataFrame:
    """One table from its Parquet copy, with its columns checked against the schema."""
    folder = Path(folder)
    p = folder / DATA_DIR / f"{name}.parquet"
    want = [c.name for c in TABLES[name]["columns"]]
    try:
        t = pq.read_table(p, columns=columns, filters=filters)
    except FileNotFoundError:
        raise _bad(folder, f"{DATA_DIR}/{name}.parquet is missing") from None
    except (OSError, pa.ArrowException, ValueError) as exc:
        raise _bad(folder, f"{DATA_DIR}/{name}.parquet cannot be read ({exc})") from None
    if columns is None and t.column_names != want:
        raise _bad(folder, f"{name} has columns {_show_rel(t.column_names)}, expected {want}")
    expected = arrow_schema(name)
    for f in t.schema:
        if f.name in expected.names and not f.type.equals(expected.field(f.name).type):
            raise _bad(
                folder, f"{name}.{f.name} holds {f.type}, expected {expected.field(f.name).type}"
            )
    try:
        return t.to_pandas()
    except (pa.ArrowException, ValueError, OverflowError) as exc:
        raise _bad(folder, f"{DATA_DIR}/{name}.parquet cannot be read ({exc})") from None


def load_dataset(
    folder: Path, *, tables: Sequence[str] | None = None, verify: bool = True
) -> Dataset:
    """The dataset's tables as pandas frames, after checking every file; BenchwalkError if damaged."""
    folder = Path(folder)
    pkg = verify_dataset(folder) if verify else read_package(folder)
    frames = {name: read_table(folder, name) for name in (tables or TABLES)}
    files = {}
    for entry in pkg["benchwalk"].get("profile_files", []):
        p = _member(folder, entry.get("path")) if isinstance(entry, dict) else None
        if p is None:
            raise _bad(folder, "profile_files in datapackage.json is malformed")
        try:
            files[entry["path"]] = p.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise _bad(folder, f"profile file cannot be read ({exc})") from None
    return Dataset(folder, pkg["benchwalk"], frames, files)


# ---------------------------------------------------------------- several sessions as one table


def write_collection(dataset_dirs: Iterable[Path], collection_dir: Path) -> Path:
    """Measurements of several datasets as one hive-partitioned Parquet collection.

    ``bench=<slug>/session=<id>/part-0.parquet``: DuckDB and pyarrow datasets read the folder
    as one table, with ``bench`` and ``session`` as partition columns. Re-adding a session
    replaces its partition atomically.
    """
    collection_dir = Path(collection_dir)
    collection_dir.mkdir(parents=True, exist_ok=True)
    for d in dataset_dirs:
        d = Path(d)
        pkg = verify_dataset(d)
        meta = pkg["benchwalk"]
        part = collection_dir / f"bench={_slug(str(meta['bench']))}" / f"session={meta['session']}"
        part.mkdir(parents=True, exist_ok=True)
        tmp = part / f".part-0.parquet.partial-{os.getpid()}"
        src = d / DATA_DIR / "measurements.parquet"
        try:
            pf = pq.ParquetFile(src)
            schema = pf.schema_arrow.remove(pf.schema_arrow.get_field_index("session"))
            with pq.ParquetWriter(tmp, schema, compression="zstd") as w:
                for batch in pf.iter_batches(batch_size=200_000):
                    w.write_table(pa.Table.from_batches([batch]).drop_columns(["session"]))
            _fsync_file(tmp)
            os.replace(tmp, part / "part-0.parquet")
            _fsync_dir(part)
        except (OSError, pa.ArrowException) as exc:
            tmp.unlink(missing_ok=True)
            raise BenchwalkError(f"{part}: cannot write the collection ({exc})") from exc
    return collection_dir


# ---------------------------------------------------------------- progress on a terminal


def terminal_progress(description: str):
    """A rich progress bar on stderr when it is a terminal, else None (quiet in pipes and tests)."""
    if not sys.stderr.isatty():
        return None, None
    from rich.console import Console  # noqa: PLC0415
    from rich.progress import BarColumn, Progress, TimeRemainingColumn

    bar = Progress(
        "[progress.description]{task.description}",
        BarColumn(),
        "{task.percentage:>3.0f}%",
        TimeRemainingColumn(),
        console=Console(stderr=True),
        transient=True,
    )
    task = bar.add_task(description, total=None)

    def update(done: int, total: int) -> None:
        bar.update(task, completed=done, total=total)

    return bar, update


# ---------------------------------------------------------------- offline re-check

HISTORY = 64  # snapshots the runner keeps for history-dependent checks (meas.walk.runner default)
CHECK_COLUMNS = [c.name for c in TABLES["checks"]["columns"]]


def _snapshots_of_step(
    folder: Path, step: str | None, snaps: pd.DataFrame, polls: pd.DataFrame, switches: pd.DataFrame
) -> list[tuple[int, Any]]:
    """The step's snapshots rebuilt from the tables, in journal order."""
    from .snapshot import CommState, MeterBlock, Quality, Snapshot  # noqa: PLC0415

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
    for s in mine.itertuples(index=False):
        g = by_snap.get(s.snapshot)
        blocks = {}
        vals_by_meter = {k: mg for k, mg in g.groupby("meter", sort=False)} if g is not None else {}
        for p in poll_by.get(s.snapshot, polls.iloc[0:0]).itertuples(index=False):
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
    rows: list[dict[str, Any]] = []
    steps = list(dict.fromkeys(snaps.loc[snaps["snapshot"].isin(wanted), "step"].tolist()))
    for n, step in enumerate(steps, start=1):
        step_key = None if step is None or (isinstance(step, float) and math.isnan(step)) else step
        try:
            rebuilt = _snapshots_of_step(folder, step_key, snaps, ds["polls"], ds["switch_states"])
        except (ValueError, KeyError, TypeError, AttributeError, OverflowError) as exc:
            raise _bad(
                folder,
                f"the snapshots of step {step_key} cannot be rebuilt ({type(exc).__name__}: "
                f"{_show_rel(str(exc))})",
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
                        "check": r.check,
                        "subject": r.subject,
                        "status": str(r.status),
                        "value": r.value,
                        "limit": r.limit,
                        "residual": r.residual,
                        "unit": r.unit,
                        "message": r.message,
                        "cause": r.cause,
                    }
                )
        if progress:
            progress(n, len(steps))
    out = pd.DataFrame(rows, columns=CHECK_COLUMNS)
    for c in ("value", "limit", "residual"):
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
        except (TypeError, ValueError, KeyError):
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
        return d.sort_values(["snapshot", "check", "subject"], kind="stable").reset_index(drop=True)

    a, b = norm(exported), norm(rechecked)
    if len(a) != len(b):
        return [f"the dataset has {len(a)} check results, the re-check gives {len(b)}"]
    diffs = []
    for col in CHECK_COLUMNS:
        x, y = a[col], b[col]
        if col in ("value", "limit", "residual"):
            xv, yv = x.to_numpy(float), y.to_numpy(float)
            same = (np.isnan(xv) & np.isnan(yv)) | np.isclose(xv, yv, rtol=rel, atol=0.0)
        else:
            same = (x.astype(str) == y.astype(str)).to_numpy()
        for i in np.flatnonzero(~same)[:5]:
            diffs.append(
                f"snapshot {a['snapshot'][i]} {a['check'][i]} {a['subject'][i]}: {col} "
                f"{x[i]!r} in the dataset, {y[i]!r} re-checked"
            )
    return diffs
