"""The dataset's tables: their columns, descriptions and units, as Table Schema and as Arrow.

One definition serves the writer (``meas.dataset.export``), the reader (``meas.dataset.read``)
and the ``datapackage.json`` that describes every table to anyone else.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, NotRequired, TypedDict

import pyarrow as pa

DATA_DIR = "data"
PROFILE_DIR = "profile"
MAIN_PROFILE = "profile.toml"
TS_SCHEMA = "https://datapackage.org/profiles/2.0/tableschema.json"


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


class Reference(TypedDict):
    resource: str
    fields: list[str]


class ForeignKey(TypedDict):
    fields: list[str]
    reference: Reference


class TableSpec(TypedDict):
    """A table as ``datapackage.json`` describes it (keys spelt as Table Schema spells them)."""

    title: str
    columns: list[Col]
    primaryKey: NotRequired[list[str]]
    foreignKeys: NotRequired[list[ForeignKey]]


TABLES: dict[str, TableSpec] = {
    "measurements": {
        "title": "Every recorded value, one row per meter, quantity and phase per poll (a poll journalled twice, as a step's last settling and first capture row, appears once, as capture)",
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
            _c(
                "u",
                "number",
                "standard uncertainty of value (k = 1) from the meter's accuracy class and register resolution, the rule the checks use; empty where no rule applies (i.N, energy counters)",
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
            _c(
                "iec61850",
                "string",
                "IEC 61850-7-4 logical node class, data object and attribute (quantities table)",
            ),
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
        "title": "One row per recorded poll cycle (once, even when journalled twice)",
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
            _c("step_number", "integer", "position in the sequence, from 1", required=True),
            _c("title", "string", "one line"),
            _c("kind", "string", "manual, remote, capture, hold or note", required=True),
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
            _c(
                "outcome",
                "string",
                "how the step ended: passed, accepted_with_failures, skipped or not_captured",
            ),
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
            _c("check_id", "string", "check id", required=True),
            _c("subject", "string", "meter, bus, branch or switch id", required=True),
            _c("status", "string", "pass, warn, fail or n/a", required=True),
            _c("value", "number", "the measured figure, in unit"),
            _c("limit_value", "number", "the allowed figure (expanded uncertainty), in unit"),
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
            _c(
                "apparent_power",
                "string",
                "definition of the meter's total S: vector |S_A+S_B+S_C| or arithmetic |S_A|+|S_B|+|S_C|",
            ),
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
    "step_switches": {
        "title": "Per step and switch: the state expected (the whole configuration by then) and the one found",
        "columns": [
            _c("step", "string", "step id", required=True),
            _c(
                "step_number",
                "integer",
                "position of the step in the sequence, from 1",
                required=True,
            ),
            _c("switch", "string", "switch id", required=True),
            _c("expected", "string", "open or closed: the configuration the step checks"),
            _c("actual", "string", "open, closed or unknown at the step's last transition"),
            _c("operated", "boolean", "the step operates this switch", required=True),
        ],
        "primaryKey": ["step", "switch"],
    },
    "quantities": {
        "title": "What each quantity key means: unit, definition, conventions, IEC 61850-7-4 name",
        "columns": [
            _c("quantity", "string", "quantity name", required=True),
            _c("phase", "string", "A, B, C, N, AB, BC, CA or T (total)", required=True),
            _c("reading_key", "string", "quantity.phase as benchwalk writes it", required=True),
            _c("unit", "string", "SI unit of the value", required=True),
            _c("definition", "string", "what the value is", required=True),
            _c("angle_reference", "string", "angles: what they are referred to"),
            _c("pf_sign", "string", "power factor: its sign convention"),
            _c("q_definition", "string", "reactive power: its definition and sign"),
            _c("s_definition", "string", "apparent power: its definition"),
            _c("sign_convention", "string", "powers and energies: what positive means"),
            _c("iec61850_ln", "string", "IEC 61850-7-4 logical node class (MMXU or MMTR)"),
            _c("iec61850_do", "string", "IEC 61850-7-4 data object"),
            _c("iec61850_attribute", "string", "attribute path in the data object"),
        ],
        "primaryKey": ["quantity", "phase"],
    },
    "bench": {
        "title": "The bench's numeric per-unit bases and network scales, one row per voltage zone",
        "columns": [
            _c("bench", "string", "bench name"),
            _c("zone", "string", "voltage zone id", required=True),
            _c("frequency_hz", "number", "nominal frequency", unit="Hz"),
            _c("s_base_va", "number", "three-phase power base", unit="VA"),
            _c("s_base_phase_va", "number", "per-phase power base (s_base_va / 3)", unit="VA"),
            _c("bench_v_ll", "number", "zone nominal line-to-line voltage on the bench", unit="V"),
            _c("network_v_ll", "number", "line-to-line voltage it stands for", unit="V"),
            _c("v_base_ll", "number", "per-unit base of line-to-line voltage", unit="V"),
            _c("v_base_ln", "number", "per-unit base of phase-to-neutral voltage", unit="V"),
            _c("i_base", "number", "per-unit base of current", unit="A"),
            _c("power_scale", "number", "network W per bench W", unit="1"),
            _c("voltage_scale", "number", "network V per bench V", unit="1"),
            _c("current_scale", "number", "network A per bench A", unit="1"),
            _c(
                "coverage_k",
                "number",
                "coverage factor of the checks' limits (u is k = 1)",
                unit="1",
            ),
            _c("warn_fraction", "number", "fraction of a limit that warns", unit="1"),
        ],
        "primaryKey": ["zone"],
    },
    "model": {
        "title": "The profile model's ideal readings for every switch configuration captured (empty without model data)",
        "columns": [
            _c("step", "string", "step whose captures had this configuration"),
            _c(
                "switches",
                "string",
                "the configuration, SWITCH=state separated by ; (sorted)",
                required=True,
            ),
            _c("meter", "string", "meter id", required=True),
            _c("quantity", "string", "quantity name", required=True),
            _c("phase", "string", "phase", required=True),
            _c(
                "value",
                "number",
                "predicted primary, bench-side value in SI units, the meter's sign convention",
            ),
            _c("unit", "string", "unit of value", required=True),
        ],
        "primaryKey": ["step", "switches", "meter", "quantity", "phase"],
    },
    "meter_gains": {
        "title": "Each meter's voltage and current gain from the session's joint estimate against the network model (empty, with the reason in the resource description, when no estimate could be made)",
        "columns": [
            _c("meter", "string", "meter id (joins meters.id)", required=True),
            _c(
                "quantity",
                "string",
                "voltage or current (a power's gain is their product)",
                required=True,
            ),
            _c(
                "gain",
                "number",
                "estimated gain: what the meter reads over what the network implies; 1 reads true",
                unit="1",
            ),
            _c("u", "number", "standard uncertainty of gain (k = 1)", unit="1"),
            _c(
                "class_limit",
                "number",
                "the meter's class limit for the quantity as a fraction (0.005 = class 0.5); the estimate's prior is 1 +- class_limit / sqrt 3",
                unit="1",
            ),
            _c(
                "beyond_class",
                "boolean",
                "abs(gain - 1) exceeds class_limit by more than the expanded uncertainty (bench.coverage_k x u)",
                required=True,
            ),
            _c(
                "basis",
                "string",
                "joint fit (every meter's readings, the class prior on every gain) or refit (the meter named with a ratio error, its gain left free)",
                required=True,
            ),
            _c(
                "cause",
                "string",
                "machine-readable cause tag of the finding on this meter and quantity (vt_ratio:1.100, ct_reversed:B, wiring, ambiguous:..., gain); empty when none",
            ),
            _c(
                "message",
                "string",
                "one sentence: what the estimate found and what to look at; empty when nothing",
            ),
        ],
        "primaryKey": ["meter", "quantity"],
        "foreignKeys": [
            {"fields": ["meter"], "reference": {"resource": "meters", "fields": ["id"]}}
        ],
    },
    "coverage": {
        "title": "Per meter and error kind: whether the session's captured configurations let the network model detect it, and from what size (empty, with the reason in the resource description, when no estimate could be made)",
        "columns": [
            _c("meter", "string", "meter id (joins meters.id)", required=True),
            _c(
                "error_kind",
                "string",
                "vt_ratio, ct_ratio, ct_reversed:<phase> or phases_swapped:<pair>",
                required=True,
            ),
            _c(
                "detectable",
                "boolean",
                "the session's captures can reveal this error on this meter",
                required=True,
            ),
            _c(
                "min_factor",
                "number",
                "ratio errors: the smallest detectable abs(factor - 1) (0.015 = a ratio off by 1.5 %); empty for the other kinds",
                unit="1",
            ),
            _c(
                "why_not",
                "string",
                "why it cannot be detected (no other reading predicts it, too little current, cannot be told apart from another meter); empty when detectable",
            ),
            _c("message", "string", "the estimator's sentence for this meter and error kind"),
        ],
        "primaryKey": ["meter", "error_kind"],
        "foreignKeys": [
            {"fields": ["meter"], "reference": {"resource": "meters", "fields": ["id"]}}
        ],
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

ARROW_TYPES = {
    "string": pa.string(),
    "boolean": pa.bool_(),
    "integer": pa.int64(),
    "number": pa.float64(),
    "datetime": pa.timestamp("us", tz="UTC"),
}


FORMAT_VERSION = 2
# Additions within a format version raise the minor number (docs/dataset-format.md): a reader
# of format 2 reads every 2.x dataset; a table added in a minor is absent from older ones.
FORMAT_MINOR = 1
ADDED_IN_MINOR = {"meter_gains": 1, "coverage": 1}


def tables_in(minor: int) -> list[str]:
    """The tables a dataset of format 2.``minor`` holds (older datasets lack later additions)."""
    return [t for t in TABLES if ADDED_IN_MINOR.get(t, 0) <= minor]


SIGN_CONVENTION = "positive P and Q = power flowing from the meter's bus into its branch"


def arrow_schema(table: str, *, for_csv: bool = False) -> pa.Schema:
    """Parquet keeps real timestamps; CSV gets ISO 8601 text with a Z (what Table Schema parses).

    Every field carries its description (and unit) as Parquet field metadata, and the schema
    the table's title, key, the format version and the sign convention, for readers without
    ``datapackage.json``.
    """
    spec = TABLES[table]
    fields = []
    for c in spec["columns"]:
        meta = {"description": c.description}
        if c.unit:
            meta["unit"] = c.unit
        typ = pa.string() if for_csv and c.type == "datetime" else ARROW_TYPES[c.type]
        fields.append(pa.field(c.name, typ, metadata=meta))
    meta = {
        "benchwalk:table": table,
        "benchwalk:title": spec["title"],
        "benchwalk:format": str(FORMAT_VERSION),
        "benchwalk:format_minor": str(FORMAT_MINOR),
        "benchwalk:sign_convention": SIGN_CONVENTION,
    }
    if "primaryKey" in spec:
        meta["benchwalk:key"] = ",".join(spec["primaryKey"])
    return pa.schema(fields, metadata=meta)


def column_names(table: str) -> list[str]:
    return [c.name for c in TABLES[table]["columns"]]


def table_schema(name: str) -> dict[str, Any]:
    """The table's Table Schema, as ``datapackage.json`` lists it."""
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
