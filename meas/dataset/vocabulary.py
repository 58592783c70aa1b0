"""The dataset's self-description tables: what each quantity is (``quantities``) and the
numeric bases and scales of the bench (``bench``), so a calibration tool needs no benchwalk.

The IEC 61850-7-4 names follow the logical nodes MMXU (measurements: per-phase values in the
WYE/DEL data objects, totals in the Tot* data objects) and MMTR (metering: energy counters,
DmdWh = energy flowing away from the busbar, SupWh = towards it) [from memory].
"""

from __future__ import annotations

import math
from typing import Any

from ..bases import bases_of_json, network_factor, per_unit_base
from ..quantities import QUANTITIES, key

Json = dict[str, Any]
Row = dict[str, Any]

ANGLE_REFERENCE = (
    "degrees, referred to the meter's own phase-A voltage phasor (v_ang.A = 0), in (-180, 180]; "
    "positive sequence: B lags A by 120"
)
SIGN = "positive = power flowing from the meter's bus into its branch"
PF_SIGN = "P / |S| with the sign of P (IEC convention, no lead/lag sign); 0 where S = 0"
Q_DEFINITION = (
    "fundamental reactive power Q = Im(V I*), per phase; positive = lagging (inductive) current "
    "drawn from the bus into the branch"
)
S_PHASE = "apparent power |V I*| of the phase"
S_TOTAL = (
    "depends on the meter (meters.apparent_power): vector = |S_A + S_B + S_C|, arithmetic = "
    "|S_A| + |S_B| + |S_C| (IEEE Std 1459-2010 names both)"
)

_PHASE_WORD = {"A": "phase A", "B": "phase B", "C": "phase C", "N": "neutral", "T": "total"}
_TOTALS = {"p": "TotW", "q": "TotVAr", "s": "TotVA", "pf": "TotPF"}
_ENERGY = {"e_imp": "DmdWh", "e_exp": "SupWh"}


def iec61850(quantity: str, phase: str) -> tuple[str, str, str]:
    """(logical node class, data object, attribute path) of a reading in IEC 61850-7-4 terms."""
    if quantity in _ENERGY:
        return "MMTR", _ENERGY[quantity], "actVal"
    if phase == "T" and quantity in _TOTALS:
        return "MMXU", _TOTALS[quantity], "mag.f"
    if quantity == "f":
        return "MMXU", "Hz", "mag.f"
    do = QUANTITIES[quantity].mmxu.split(".")[0]  # PhV, PPV, A, W, VAr, VA, PF
    part = "ang" if quantity in ("v_ang", "i_ang") else "mag"
    sub = "neut" if phase == "N" else f"phs{phase}"
    return "MMXU", do, f"{sub}.cVal.{part}.f"


def _definition(quantity: str, phase: str) -> str:
    q = QUANTITIES[quantity]
    text = f"{q.description}, {_PHASE_WORD.get(phase, phase)}"
    if quantity == "i" and phase == "N":
        text = "neutral (residual) current |I_A + I_B + I_C|, rms"
    if quantity in ("p", "q", "s", "e_imp", "e_exp"):
        text += f"; {SIGN}" if quantity != "s" else ""
    if quantity == "e_imp":
        text = "active energy counter, positive P integrated (flow from the bus into the branch)"
    if quantity == "e_exp":
        text = "active energy counter, negative P integrated (flow from the branch into the bus)"
    return text


def quantity_rows() -> list[Row]:
    """One row per quantity key the dataset can hold."""
    rows = []
    for q in QUANTITIES.values():
        for ph in q.phases:
            ln, do, attr = iec61850(q.name, ph)
            rows.append(
                {
                    "quantity": q.name,
                    "phase": ph,
                    "reading_key": key(q.name, ph),
                    "unit": q.unit,
                    "definition": _definition(q.name, ph),
                    "angle_reference": ANGLE_REFERENCE if q.name in ("v_ang", "i_ang") else None,
                    "pf_sign": PF_SIGN if q.name == "pf" else None,
                    "q_definition": Q_DEFINITION if q.name == "q" else None,
                    "s_definition": (S_TOTAL if ph == "T" else S_PHASE) if q.name == "s" else None,
                    "sign_convention": SIGN if q.name in ("p", "q", "e_imp", "e_exp") else None,
                    "iec61850_ln": ln,
                    "iec61850_do": do,
                    "iec61850_attribute": attr,
                }
            )
    return rows


def bench_rows(prof: Json) -> list[Row]:
    """One row per voltage zone: the bench's numeric bases and network scales."""
    bench = prof["bench"]
    checks = prof.get("checks") or {}
    rows = []
    for z in bench["zones"]:
        bus = next((b["id"] for b in prof["buses"] if b.get("zone") == z["id"]), None)
        b = bases_of_json(prof, bus) if bus is not None else None

        def base(k: str, b: Any = b) -> float | None:
            pu = per_unit_base(b, k) if b is not None else None
            return None if pu is None or not math.isfinite(pu.base) else pu.base

        rows.append(
            {
                "bench": bench.get("name"),
                "zone": z["id"],
                "frequency_hz": bench.get("frequency_hz"),
                "s_base_va": bench.get("s_base_va"),
                "s_base_phase_va": base("p.A"),
                "bench_v_ll": z["bench_v_ll"],
                "network_v_ll": z["network_v_ll"],
                "v_base_ll": base("v_ll.AB"),
                "v_base_ln": base("v_ln.A"),
                "i_base": base("i.A"),
                "power_scale": bench.get("power_scale"),
                "voltage_scale": (
                    b.voltage_scale if b is not None else z["network_v_ll"] / z["bench_v_ll"]
                ),
                "current_scale": network_factor(b, "i.A") if b is not None else None,
                "coverage_k": checks.get("coverage_k", 2.0),
                "warn_fraction": checks.get("warn_fraction", 0.7),
            }
        )
    return rows
