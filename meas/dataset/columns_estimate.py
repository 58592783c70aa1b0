"""The columns of the two tables of the session's joint estimate against the network model:
``meter_gains`` and ``coverage`` (filled by ``meas.dataset.estimate_tables``; added in
format 2.1).

Declarations only; ``meas.dataset.schema`` orders the tables and turns them into Arrow and
Table Schema.
"""

from __future__ import annotations

from .columns import TableSpec, col

ESTIMATE_TABLES: dict[str, TableSpec] = {
    "meter_gains": {
        "title": "Each meter's voltage and current gain from the session's joint estimate against the network model (empty, with the reason in the resource description, when no estimate could be made)",
        "columns": [
            col("meter", "string", "meter id (joins meters.id)", required=True),
            col(
                "quantity",
                "string",
                "voltage or current (a power's gain is their product)",
                required=True,
            ),
            col(
                "gain",
                "number",
                "estimated gain: what the meter reads over what the network implies; 1 reads true",
                unit="1",
            ),
            col("u", "number", "standard uncertainty of gain (k = 1)", unit="1"),
            col(
                "class_limit",
                "number",
                "the meter's class limit for the quantity as a fraction (0.005 = class 0.5); the estimate's prior is 1 +- class_limit / sqrt 3",
                unit="1",
            ),
            col(
                "beyond_class",
                "boolean",
                "abs(gain - 1) exceeds class_limit by more than the expanded uncertainty (bench.coverage_k x u)",
                required=True,
            ),
            col(
                "basis",
                "string",
                "joint fit (every meter's readings, the class prior on every gain) or refit (the meter named with a ratio error, its gain left free)",
                required=True,
            ),
            col(
                "cause",
                "string",
                "machine-readable cause tag of the finding on this meter and quantity (vt_ratio:1.100, ct_reversed:B, wiring, offset:i.B:+2.991, frozen:<step>, ambiguous:..., gain); empty when none",
            ),
            col(
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
            col("meter", "string", "meter id (joins meters.id)", required=True),
            col(
                "error_kind",
                "string",
                "vt_ratio, ct_ratio, ct_reversed:<phase>, phases_swapped:<pair>, offset:<reading key> (one reading off by a constant) or frozen (readings that stopped changing across steps)",
                required=True,
            ),
            col(
                "detectable",
                "boolean",
                "the session's captures can reveal this error on this meter",
                required=True,
            ),
            col(
                "min_factor",
                "number",
                "ratio errors: the smallest detectable abs(factor - 1) (0.015 = a ratio off by 1.5 %); empty for the other kinds",
                unit="1",
            ),
            col(
                "why_not",
                "string",
                "why it cannot be detected (no other reading predicts it, too little current, cannot be told apart from another meter); empty when detectable",
            ),
            col("message", "string", "the estimator's sentence for this meter and error kind"),
        ],
        "primaryKey": ["meter", "error_kind"],
        "foreignKeys": [
            {"fields": ["meter"], "reference": {"resource": "meters", "fields": ["id"]}}
        ],
    },
}
