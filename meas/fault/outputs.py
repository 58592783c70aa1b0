"""The outputs of a fault validation: ``summary.json``, ``phases.csv`` and ``waveform.svg``.

Written into one folder (``fault/`` of a dataset folder is where a session report can find
``summary.json``; the report owns whether and how it shows it). Each file is written whole to
a temporary name and renamed, so a reader never sees half a file.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from dataclasses import asdict
from pathlib import Path
from typing import Any

from ..cautions import STAGED_FAULT_CAUTION
from ..shortcircuit.iec60909 import ShortCircuit
from .compare import Comparison
from .plot import waveform_svg
from .record import Record
from .waveform import Analysis

SUMMARY_VERSION = 1
PHASE_COLUMNS = (
    "phase", "faulted", "inception_ms", "alpha_deg", "alpha_from", "ik_fit_a", "ik_fit_u_a", "ik_dft_a",
    "tau_ms", "tau_u_ms", "r_x", "r_x_u", "peak_sampled_a", "peak_recorded_a", "peak_sampling_bound_a", "peak_fit_a",
    "peak_predicted_a", "fit_rms_a",
)  # fmt: skip


def _num(v: float) -> float | None:
    return float(v) if math.isfinite(v) else None


def _sc(sc: ShortCircuit) -> dict[str, Any]:
    d = asdict(sc)
    for k in ("zk_ohm", "z1_ohm", "z2_ohm", "z0_ohm"):
        z = d.pop(k)
        d[k.replace("_ohm", "")] = {"r_ohm": _num(z.real), "x_ohm": _num(z.imag)}
    return {k: (_num(v) if isinstance(v, float) else v) for k, v in d.items()}


def summary(
    record: Record, analysis: Analysis, comp: Comparison, profile_path: str
) -> dict[str, Any]:
    return {
        "version": SUMMARY_VERSION,
        "caution": STAGED_FAULT_CAUTION,
        "record": {
            "path": record.path,
            "revision": record.revision,
            "format": record.data_format,
            "fs_hz": record.fs_hz,
            "frequency_hz": record.frequency_hz,
            "values": record.values,
            "channels": {
                "currents": list(record.current_names),
                "voltages": list(record.voltage_names),
            },
            "notes": list(record.notes),
        },
        "analysis": {
            "inception_s": analysis.inception_s,
            "u_pre_ll_v": analysis.u_pre_ll_v,
            "fault_end_s": analysis.fault_end_s,
        },
        "prediction": {
            "profile": profile_path,
            "bus": comp.bus,
            "fault": comp.fault,
            "scale": comp.scale,
            "un_v": comp.un_v,
            "c_like_for_like": comp.c_like,
            "like_for_like": _sc(comp.like),
            "iec_max": _sc(comp.iec_max),
            "iec_min": _sc(comp.iec_min),
            "uncertainty_from": comp.uncertainty_source,
        },
        "comparison": [
            {
                "key": f.key,
                "label": f.label,
                "unit": f.unit,
                "measured": _num(f.measured),
                "u_measured": _num(f.u_measured),
                "predicted": _num(f.predicted),
                "u_predicted": _num(f.u_predicted),
                "deviation": _num(f.deviation),
                "deviation_pct": _num(f.deviation_pct),
                "limit": _num(f.limit),
                "verdict": f.verdict,
                "note": f.note,
            }
            for f in comp.figures
        ],
        "ikss_in_iec_band": comp.in_iec_band,
        "verdict": comp.verdict,
    }


def phases_csv(analysis: Analysis, comp: Comparison) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(PHASE_COLUMNS)
    for p in analysis.phases:
        pred = comp.predicted_peak_by_phase.get(p.name, math.nan)
        w.writerow(
            [p.name, p.faulted]
            + [f"{v:.9g}" for v in (p.inception_s * 1e3, p.alpha_deg)]
            + [p.alpha_source]
            + [
                f"{v:.9g}"
                for v in (
                    p.ik_fit_a,
                    p.ik_fit_u_a,
                    p.ik_dft_a,
                    p.tau_s * 1e3,
                    p.tau_u_s * 1e3,
                    p.r_x,
                    p.r_x_u,
                    p.peak_a,
                    p.peak_recorded_a,
                    p.peak_sampling_bound_a,
                    p.peak_fit_a,
                    pred,
                    p.fit_rms_a,
                )
            ]
        )
    return buf.getvalue()


def _atomic(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".part")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)


def write_outputs(
    out: Path, record: Record, analysis: Analysis, comp: Comparison, profile_path: str
) -> dict[str, Path]:
    """Write the three files into ``out`` and return their paths."""
    out.mkdir(parents=True, exist_ok=True)
    paths = {
        "summary": out / "summary.json",
        "phases": out / "phases.csv",
        "waveform": out / "waveform.svg",
    }
    _atomic(
        paths["summary"], json.dumps(summary(record, analysis, comp, profile_path), indent=2) + "\n"
    )
    _atomic(paths["phases"], phases_csv(analysis, comp))
    title = (
        f"{Path(record.path).name}: fault at {comp.bus} ({comp.fault}), measured against predicted"
    )
    _atomic(paths["waveform"], waveform_svg(analysis, comp, title))
    return paths
