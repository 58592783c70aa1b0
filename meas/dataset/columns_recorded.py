"""The columns of the tables that hold what a session recorded: readings, polls, switch
states, steps and their transitions, check results and events (one row per journal row or
per value in one).

Declarations only; ``meas.dataset.schema`` orders the tables and turns them into Arrow and
Table Schema.
"""

from __future__ import annotations

from .columns import TableSpec, col

RECORDED_TABLES: dict[str, TableSpec] = {
    "measurements": {
        "title": "Every recorded value, one row per meter, quantity and phase per poll (a poll journalled twice, as a step's last settling and first capture row, appears once, as capture)",
        "columns": [
            col("session", "string", "session id", required=True),
            col("step", "string", "step id of the sequence; empty outside a step"),
            col(
                "snapshot",
                "integer",
                "snapshot row id in the journal (joins snapshots.snapshot)",
                required=True,
            ),
            col(
                "role",
                "string",
                "settling (before the step settled), capture (the step's record) or live",
                required=True,
            ),
            col("time_utc", "datetime", "poll time, UTC", required=True),
            col("meter", "string", "meter id (joins meters.id)", required=True),
            col(
                "quantity",
                "string",
                "quantity name: v_ln, v_ll, i, p, q, s, pf, f, v_ang, i_ang, e_imp, e_exp",
                required=True,
            ),
            col(
                "phase",
                "string",
                "A, B, C, N, AB, BC, CA, or T for total / single-valued",
                required=True,
            ),
            col(
                "value",
                "number",
                "primary, bench-side value in SI units as read; empty when the read failed",
            ),
            col(
                "u",
                "number",
                "standard uncertainty of value (k = 1) from the meter's accuracy class and register resolution, the rule the checks use; empty where no rule applies (i.N, energy counters)",
            ),
            col("unit", "string", "unit of value and value_network", required=True),
            col(
                "quality",
                "string",
                "ok, timeout, exception, decode, offline or stale; only ok values are valid",
                required=True,
            ),
            col(
                "value_network",
                "number",
                "value at network scale: V x zone scale, A x power_scale/voltage_scale, W/var/VA x power_scale",
            ),
            col(
                "value_pu",
                "number",
                "per unit on the bench bases (V: zone bench_v_ll, or over sqrt 3 for phase-neutral; power: s_base_va, over 3 per phase; A: base current)",
                unit="pu",
            ),
            col(
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
            col("snapshot", "integer", "snapshot row id in the journal", required=True),
            col("seq", "integer", "poll cycle number from the poller", required=True),
            col("step", "string", "step id; empty outside a step"),
            col("role", "string", "settling, capture or live", required=True),
            col("time_utc", "datetime", "poll time, UTC", required=True),
            col("t_mono", "number", "monotonic clock at the poll, for intervals", unit="s"),
            col("cycle_s", "number", "time the poll cycle took", unit="s"),
            col("saved_utc", "datetime", "when the journal committed it", required=True),
        ],
        "primaryKey": ["snapshot"],
    },
    "polls": {
        "title": "Communication state of each meter in each snapshot",
        "columns": [
            col("snapshot", "integer", "snapshot row id", required=True),
            col("meter", "string", "meter id", required=True),
            col("state", "string", "ok, degraded, failing or offline", required=True),
            col(
                "exception_code", "integer", "Modbus exception code the meter answered with, if any"
            ),
            col("error", "string", "what went wrong this cycle, one line"),
            col("error_count", "integer", "consecutive failed cycles", required=True),
            col("latency_s", "number", "request-response time", unit="s"),
            col("last_good_utc", "datetime", "last good answer, UTC"),
        ],
        "primaryKey": ["snapshot", "meter"],
        "foreignKeys": [
            {"fields": ["snapshot"], "reference": {"resource": "snapshots", "fields": ["snapshot"]}}
        ],
    },
    "switch_states": {
        "title": "Switch positions reported in each snapshot",
        "columns": [
            col("snapshot", "integer", "snapshot row id", required=True),
            col("switch", "string", "switch id", required=True),
            col("state", "string", "open, closed or unknown", required=True),
        ],
        "primaryKey": ["snapshot", "switch"],
        "foreignKeys": [
            {"fields": ["snapshot"], "reference": {"resource": "snapshots", "fields": ["snapshot"]}}
        ],
    },
    "steps": {
        "title": "The sequence, one row per step, with its final outcome",
        "columns": [
            col("id", "string", "step id", required=True),
            col("step_number", "integer", "position in the sequence, from 1", required=True),
            col("title", "string", "one line"),
            col("kind", "string", "manual, remote, capture, hold or note", required=True),
            col(
                "settle_s",
                "number",
                "time the network took to settle after the step's operation (its first settle; a retake does not count)",
                unit="s",
            ),
            col(
                "state",
                "string",
                "last state reached: accepted, skipped, reviewing, ...; empty if never started",
            ),
            col(
                "outcome",
                "string",
                "how the step ended: passed, accepted_with_failures, skipped or not_captured",
            ),
            col("operator", "string", "who took the last decision"),
            col("reason", "string", "reason given (skip, accept with failing checks)"),
            col("started_utc", "datetime", "first transition"),
            col("ended_utc", "datetime", "last transition"),
        ],
        "primaryKey": ["id"],
    },
    "step_log": {
        "title": "Every state transition of every step, in order",
        "columns": [
            col("id", "integer", "transition number", required=True),
            col("time_utc", "datetime", "when", required=True),
            col("step", "string", "step id", required=True),
            col("state", "string", "state entered", required=True),
            col("outcome", "string", "outcome at this transition"),
            col("operator", "string", "who"),
            col("reason", "string", "reason given"),
            col("settle_s", "number", "settle time", unit="s"),
            col("actual_switches", "string", "switch states found, SWITCH=state separated by ;"),
            col(
                "expected_switches", "string", "switch states expected, SWITCH=state separated by ;"
            ),
        ],
        "primaryKey": ["id"],
    },
    "checks": {
        "title": "Every check result recorded with a snapshot",
        "columns": [
            col("step", "string", "step id"),
            col("snapshot", "integer", "snapshot row id", required=True),
            col("check_id", "string", "check id", required=True),
            col("subject", "string", "meter, bus, branch or switch id", required=True),
            col("status", "string", "pass, warn, fail or n/a", required=True),
            col("value", "number", "the measured figure, in unit"),
            col("limit_value", "number", "the allowed figure (expanded uncertainty), in unit"),
            col("residual", "number", "|value| / limit; 1 is the edge of the band", unit="1"),
            col("unit", "string", "unit of value and limit"),
            col("message", "string", "one sentence: what is wrong, likely cause, what to look at"),
            col("cause", "string", "machine-readable cause tag"),
        ],
        "foreignKeys": [
            {"fields": ["snapshot"], "reference": {"resource": "snapshots", "fields": ["snapshot"]}}
        ],
    },
    "events": {
        "title": "Everything that happened besides readings: operations, notes, timeouts",
        "columns": [
            col("id", "integer", "event number", required=True),
            col("time_utc", "datetime", "when", required=True),
            col("kind", "string", "event kind", required=True),
            col("step", "string", "step id"),
            col("operator", "string", "who"),
            col("message", "string", "what"),
            col("data", "string", "details as a JSON object"),
        ],
        "primaryKey": ["id"],
    },
}
