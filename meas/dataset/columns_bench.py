"""The columns of the tables that describe the bench the session ran on: meters, topology,
each step's switch configuration, the quantity vocabulary, the per-unit bases and the
profile model's ideal readings.

Declarations only; ``meas.dataset.schema`` orders the tables and turns them into Arrow and
Table Schema.
"""

from __future__ import annotations

from .columns import TableSpec, col

BENCH_TABLES: dict[str, TableSpec] = {
    "meters": {
        "title": "The instruments",
        "columns": [
            col("id", "string", "meter id", required=True),
            col("label", "string", "name on the bench"),
            col("map", "string", "register map id", required=True),
            col("bus", "string", "bus where the voltage is measured", required=True),
            col(
                "branch",
                "string",
                "branch whose current it measures; empty for a voltage-only meter",
            ),
            col("zone", "string", "voltage zone of the bus"),
            col("sign_convention", "string", "what positive P and Q mean for this meter"),
            col(
                "apparent_power",
                "string",
                "definition of the meter's total S: vector |S_A+S_B+S_C| or arithmetic |S_A|+|S_B|+|S_C|",
            ),
            col("reports", "string", "primary or secondary values"),
            col("ct_ratio", "number", "primary A per secondary A", unit="A/A"),
            col("vt_ratio", "number", "primary V per secondary V", unit="V/V"),
            col("ct_primary_a", "number", "rated CT primary current", unit="A"),
            col("class_p", "string", "active power accuracy class"),
            col("class_q", "string", "reactive power accuracy class"),
            col("class_v", "string", "voltage accuracy class"),
            col("class_i", "string", "current accuracy class"),
            col("endpoint", "string", "tcp://host:port or rtu://device"),
            col("unit_id", "integer", "Modbus unit id"),
        ],
        "primaryKey": ["id"],
    },
    "topology": {
        "title": "Buses, branches and switches of the bench",
        "columns": [
            col("element", "string", "bus, branch or switch", required=True),
            col("id", "string", "element id", required=True),
            col(
                "kind",
                "string",
                "branch kind (source, line, transformer, load, shunt) or switch operation",
            ),
            col("label", "string", "name on the bench"),
            col("zone", "string", "voltage zone (buses; from-bus zone for branches)"),
            col("from_bus", "string", "branch from-bus"),
            col("to_bus", "string", "branch to-bus; empty for one-ended branches"),
            col("branch", "string", "switch: the branch it opens"),
            col("normal", "string", "switch: normal state"),
            col("bench_v_ll", "number", "zone nominal line-to-line voltage on the bench", unit="V"),
            col(
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
            col("step", "string", "step id", required=True),
            col(
                "step_number",
                "integer",
                "position of the step in the sequence, from 1",
                required=True,
            ),
            col("switch", "string", "switch id", required=True),
            col("expected", "string", "open or closed: the configuration the step checks"),
            col("actual", "string", "open, closed or unknown at the step's last transition"),
            col("operated", "boolean", "the step operates this switch", required=True),
        ],
        "primaryKey": ["step", "switch"],
    },
    "quantities": {
        "title": "What each quantity key means: unit, definition, conventions, IEC 61850-7-4 name",
        "columns": [
            col("quantity", "string", "quantity name", required=True),
            col("phase", "string", "A, B, C, N, AB, BC, CA or T (total)", required=True),
            col("reading_key", "string", "quantity.phase as benchwalk writes it", required=True),
            col("unit", "string", "SI unit of the value", required=True),
            col("definition", "string", "what the value is", required=True),
            col("angle_reference", "string", "angles: what they are referred to"),
            col("pf_sign", "string", "power factor: its sign convention"),
            col("q_definition", "string", "reactive power: its definition and sign"),
            col("s_definition", "string", "apparent power: its definition"),
            col("sign_convention", "string", "powers and energies: what positive means"),
            col("iec61850_ln", "string", "IEC 61850-7-4 logical node class (MMXU or MMTR)"),
            col("iec61850_do", "string", "IEC 61850-7-4 data object"),
            col("iec61850_attribute", "string", "attribute path in the data object"),
        ],
        "primaryKey": ["quantity", "phase"],
    },
    "bench": {
        "title": "The bench's numeric per-unit bases and network scales, one row per voltage zone",
        "columns": [
            col("bench", "string", "bench name"),
            col("zone", "string", "voltage zone id", required=True),
            col("frequency_hz", "number", "nominal frequency", unit="Hz"),
            col("s_base_va", "number", "three-phase power base", unit="VA"),
            col("s_base_phase_va", "number", "per-phase power base (s_base_va / 3)", unit="VA"),
            col("bench_v_ll", "number", "zone nominal line-to-line voltage on the bench", unit="V"),
            col("network_v_ll", "number", "line-to-line voltage it stands for", unit="V"),
            col("v_base_ll", "number", "per-unit base of line-to-line voltage", unit="V"),
            col("v_base_ln", "number", "per-unit base of phase-to-neutral voltage", unit="V"),
            col("i_base", "number", "per-unit base of current", unit="A"),
            col("power_scale", "number", "network W per bench W", unit="1"),
            col("voltage_scale", "number", "network V per bench V", unit="1"),
            col("current_scale", "number", "network A per bench A", unit="1"),
            col(
                "coverage_k",
                "number",
                "coverage factor of the checks' limits (u is k = 1)",
                unit="1",
            ),
            col("warn_fraction", "number", "fraction of a limit that warns", unit="1"),
        ],
        "primaryKey": ["zone"],
    },
    "model": {
        "title": "The profile model's ideal readings for every switch configuration captured (empty without model data)",
        "columns": [
            col("step", "string", "step whose captures had this configuration"),
            col(
                "switches",
                "string",
                "the configuration, SWITCH=state separated by ; (sorted)",
                required=True,
            ),
            col("meter", "string", "meter id", required=True),
            col("quantity", "string", "quantity name", required=True),
            col("phase", "string", "phase", required=True),
            col(
                "value",
                "number",
                "predicted primary, bench-side value in SI units, the meter's sign convention",
            ),
            col("unit", "string", "unit of value", required=True),
        ],
        "primaryKey": ["step", "switches", "meter", "quantity", "phase"],
    },
}
