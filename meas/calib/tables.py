"""A calibration as tables: parameters, identifiability, deviations, meter gains, fit statistics.

One place builds the rows, so the CSV files, the HTML report and the command's summary agree.
"""

from __future__ import annotations

import math
import platform
from typing import Any

import numpy as np
import pandas as pd
import scipy

from .. import __version__
from ..tolerance import class_spec
from .run import Calibration

_UNITS = {
    "v_ll": "V",
    "sc_va": "VA",
    "x_r": "1",
    "r_ohm": "ohm",
    "x_ohm": "ohm",
    "b_us": "uS",
    "uk_pct": "%",
    "ur_pct": "%",
    "tap_pct": "% points",
    "p_w": "W",
    "q_var": "var",
}


def unit_of(name: str) -> str:
    key = name.partition(".")[2]
    base = key.removesuffix("_per_km")
    unit = _UNITS.get(base, "")
    return unit + "/km" if key.endswith("_per_km") else unit


def parameters_table(c: Calibration) -> pd.DataFrame:
    stated = {p.name: p.stated for p in c.params}
    rows = []
    for e in c.parameters:
        rows.append(
            {
                "parameter": e.name,
                "unit": unit_of(e.name),
                "profile_value": e.nominal,
                "calibrated_value": e.value,
                "u": e.u,
                "low95": e.low95,
                "high95": e.high95,
                "prior_u": e.prior_u,
                "post_prior": e.ratio,
                "verdict": e.verdict,
                "change_pct": 100.0 * (e.value / e.nominal - 1.0) if e.nominal else math.nan,
                "tolerance": "stated" if stated.get(e.name) else "default",
            }
        )
    for e in c.emfs:
        rows.append(
            {
                "parameter": e.name,
                "unit": "1",
                "profile_value": e.nominal,
                "calibrated_value": e.value,
                "u": e.u,
                "low95": e.low95,
                "high95": e.high95,
                "prior_u": e.prior_u,
                "post_prior": e.ratio,
                "verdict": e.verdict,
                "change_pct": 100.0 * (e.value - 1.0),
                "tolerance": "source EMF multiplier of this step",
            }
        )
    return pd.DataFrame(rows)


def identifiability_table(c: Calibration) -> pd.DataFrame:
    return pd.DataFrame(
        [
            {"rank": k + 1, "singular_value": d.value, "combination": d.describe(4)}
            for k, d in enumerate(c.directions)
        ]
    )


def correlations_table(c: Calibration) -> pd.DataFrame:
    return pd.DataFrame(c.correlations, columns=["a", "b", "correlation"])


def deviations_table(c: Calibration) -> pd.DataFrame:
    o, f, d = c.obs, c.fit, c.deviations
    return pd.DataFrame(
        {
            "step": [o.steps[int(k)].id for k in o.step],
            "meter": list(o.meter),
            "quantity": list(o.quantity),
            "phase": list(o.phase),
            "measured": o.value,
            "u_repeat": o.sigma,
            "u_meas": d.u_meas,
            "model_before": f.model_before,
            "model_after": f.model_after,
            "u_model_after": f.model_u,
            "dev_before_pct": d.dev_before,
            "dev_after_pct": d.dev_after,
            "u_before_pct": d.u_before,
            "u_after_pct": d.u_after,
            "limit_before_pct": d.limit_before,
            "limit_after_pct": d.limit_after,
            "pass_before": d.pass_before,
            "pass_after": d.pass_after,
            "r_norm": f.normalized,
        }
    )


def gains_table(c: Calibration) -> pd.DataFrame:
    rows = []
    for e in c.gains:
        meter, _, rest = e.name.partition(".")
        kind = rest.removesuffix(" gain")
        designation = getattr(c.profile.meter(meter).classes, kind)
        limit = class_spec(kind, designation).main_pct
        rows.append(
            {
                "meter": meter,
                "quantity": kind,
                "class": designation,
                "class_limit_pct": limit,
                "gain_pct": 100.0 * e.value,
                "u_pct": 100.0 * e.u,
                "post_prior": e.ratio,
                "beyond_class": abs(100.0 * e.value) > limit,
            }
        )
    return pd.DataFrame(rows)


def fit_summary(c: Calibration, dataset: dict[str, Any]) -> dict[str, Any]:
    f = c.fit
    return {
        "accepted": c.verdict.accepted,
        "reason": c.verdict.reason,
        "chi2": f.chi2,
        "dof": f.dof,
        "p_value": f.p_value,
        "alpha": c.options.alpha,
        "max_normalized_residual": f.max_normalized,
        "converged": f.converged,
        "solver_message": f.message,
        "method": f"scipy.optimize.least_squares ({f.method})",
        "function_evaluations": f.nfev,
        "jacobian_evaluations": f.njev,
        "load_flows": f.solves,
        "wall_time_s": f.seconds,
        "cpu_time_s": f.cpu_seconds,
        "readings": len(c.obs),
        "steps": [s.id for s in c.obs.steps],
        "unknowns": len(c.problem.unknowns),
        "parameters": [p.name for p in c.params],
        "fixed_at_profile": list(c.fixed),
        "noise_model": c.options.noise,
        "emf": "per-step" if c.options.emf_per_step else "shared",
        "repeatability": c.options.repeatability or "pooled within-step scatter of the captures",
        "acceptance": {"flat_pct": 1.5, "k": c.deviations.k},
        "readings_passing_before": int(np.sum(c.deviations.pass_before)),
        "readings_passing_after": int(np.sum(c.deviations.pass_after)),
        "notes": list(c.notes),
        "dataset": dataset,
        "software": {
            "benchwalk": __version__,
            "python": platform.python_version(),
            "numpy": np.__version__,
            "scipy": scipy.__version__,
            "pandas": pd.__version__,
        },
    }


def parameter_covariance(c: Calibration) -> dict[str, object]:
    """The fitted parameters' covariance in their own units, in the form ``benchwalk fault
    check --covariance`` reads (``meas/fault/inputs.py``): a calibration's uncertainty carried
    into the predicted short-circuit currents. First order: a log-multiplier z gives
    value = nominal·exp(s·z), so d value/dz = s·value (s·1 for an additive parameter)."""
    idx = [j for j, u in enumerate(c.problem.unknowns) if u.kind == "parameter"]
    est = {e.name: e for e in c.parameters}
    names = [c.problem.unknowns[j].name for j in idx]
    scale = []
    for j in idx:
        u = c.problem.unknowns[j]
        scale.append(u.s if u.additive else u.s * abs(est[u.name].value))
    d = np.asarray(scale)
    cov = c.fit.cov[np.ix_(idx, idx)] * np.outer(d, d)
    return {
        "parameters": names,
        "values": [est[n].value for n in names],
        "covariance": cov.tolist(),
    }
