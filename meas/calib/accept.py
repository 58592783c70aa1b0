"""Deviations of the model from the readings, before and after, and whether to accept the fit.

A deviation is (measured − model) in percent of the reading, with a floor so near-zero readings
are not judged in percent of nothing: 10 % of the bus's nominal voltage for V, 5 % of the rated
current (and of the matching power) for I, P and Q (common practice; the floors of the
reference study). The acceptance is uncertainty-aware, |dev| ≤ max(1.5 %, k·u): a flat 1.5 % is
out of reach for a class 2 reactive meter even with the true model, so a reading passes when
it agrees within the larger of the customary 1.5 % and k times its combined uncertainty
(meter class/√3, repeatability and, after the fit, the model's own uncertainty); both figures
are shown. k is the profile's coverage factor.

The fit is accepted when it converged, its χ² is not rejected at ``alpha`` and every reading
passes. Otherwise one sentence says why, naming the worst step, meter and quantity.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..model import Profile
from .fit import FitResult
from .observations import GAIN_KIND
from .problem import Problem, class_sigma

FLAT_LIMIT_PCT = 1.5  # common practice for a calibrated model's deviation
V_FLOOR = 0.10
I_FLOOR = 0.05
DRIFT_T = 4.0  # a step whose voltages all move together by this many standard errors


@dataclass(frozen=True)
class Deviations:
    base: np.ndarray  # what a percent is of, per row
    u_meas: np.ndarray  # combined standard uncertainty of the reading (class and spread)
    dev_before: np.ndarray  # percent
    dev_after: np.ndarray
    u_before: np.ndarray  # percent, k not applied
    u_after: np.ndarray
    limit_before: np.ndarray  # percent: max(flat, k u)
    limit_after: np.ndarray
    k: float

    @property
    def pass_before(self) -> np.ndarray:
        return np.abs(self.dev_before) <= self.limit_before

    @property
    def pass_after(self) -> np.ndarray:
        return np.abs(self.dev_after) <= self.limit_after


def deviation_bases(profile: Profile, problem: Problem) -> np.ndarray:
    obs = problem.obs
    out = np.zeros(len(obs))
    s_base = profile.bench.s_base_va
    for i in range(len(obs)):
        meter = profile.meter(obs.meter[i])
        zone = profile.zone_of_bus(meter.bus)
        v_ph = zone.bench_v_ll / math.sqrt(3.0)
        rated_i = meter.ct_primary_a or s_base / (math.sqrt(3.0) * zone.bench_v_ll)
        floor = {
            "v_ln": V_FLOOR * v_ph,
            "i": I_FLOOR * rated_i,
        }.get(obs.quantity[i], I_FLOOR * rated_i * v_ph)
        out[i] = max(abs(float(obs.value[i])), floor)
    return out


def deviations(profile: Profile, problem: Problem, fit: FitResult) -> Deviations:
    obs = problem.obs
    base = deviation_bases(profile, problem)
    cls = np.array(
        [class_sigma(profile, obs.meter[i], GAIN_KIND[obs.quantity[i]]) for i in range(len(obs))]
    )
    u_meas = np.hypot(cls * np.abs(obs.value), obs.sigma)
    k = profile.checks.coverage_k
    u_b = 100.0 * u_meas / base
    u_a = 100.0 * np.hypot(u_meas, fit.model_u) / base
    return Deviations(
        base=base,
        u_meas=u_meas,
        dev_before=100.0 * (obs.value - fit.model_before) / base,
        dev_after=100.0 * (obs.value - fit.model_after) / base,
        u_before=u_b,
        u_after=u_a,
        limit_before=np.maximum(FLAT_LIMIT_PCT, k * u_b),
        limit_after=np.maximum(FLAT_LIMIT_PCT, k * u_a),
        k=k,
    )


@dataclass(frozen=True)
class Verdict:
    accepted: bool
    reason: str  # one or two sentences; empty when accepted


def drifting_steps(problem: Problem, fit: FitResult) -> list[str]:
    """Steps whose voltage residuals, over every meter, sit together off zero (a moving EMF).

    A step counts when the mean of its weighted voltage residuals is more than DRIFT_T standard
    errors off zero, and only if such step means carry most of the voltage misfit: when every
    reading is off in its own way, that is not a drifting supply.
    """
    obs = problem.obs
    out, explained, total = [], 0.0, 0.0
    for k, st in enumerate(obs.steps):
        rows = [i for i in range(len(obs)) if obs.step[i] == k and obs.quantity[i] == "v_ln"]
        if len(rows) < 2:
            continue
        r = fit.weighted[rows]
        explained += len(r) * float(np.mean(r)) ** 2
        total += float(r @ r)
        if abs(float(np.mean(r)) * math.sqrt(len(r))) > DRIFT_T:
            out.append(st.id)
    return out if total > 0 and explained >= 0.5 * total else []


def judge(problem: Problem, fit: FitResult, dev: Deviations, alpha: float) -> Verdict:
    obs = problem.obs
    text = ""
    if not fit.converged:
        text = f"the fit did not converge after {fit.nfev} evaluations ({fit.message}). "
    if fit.chi2_rejected(alpha):
        worst = int(np.argmax(fit.normalized))
        text += (
            f"χ² = {fit.chi2:.1f} for {fit.dof} degrees of freedom (p = {fit.p_value:.2g}) rejects "
            f"the fit at {alpha:g}: the readings do not fit one model within their uncertainty; "
            f"the worst is step {obs.key(worst)} (normalized residual {fit.normalized[worst]:.1f})."
        )
        drift = drifting_steps(problem, fit)
        if drift and not problem.emf_per_step:
            text += (
                f" The voltages of every meter move together in step {', '.join(drift[:3])}"
                f"{' and more' if len(drift) > 3 else ''}, as when the supply EMF drifts between "
                "steps: fit one source EMF per step with --emf per-step (the source impedance then "
                "rests on its prior and on what the EMF cannot explain)."
            )
    if text:
        return Verdict(False, text.strip())
    bad = ~dev.pass_after
    if np.any(bad):
        ratio = np.abs(dev.dev_after) / dev.limit_after
        worst = int(np.argmax(ratio))
        return Verdict(
            False,
            f"{int(bad.sum())} of {len(bad)} readings deviate beyond max({FLAT_LIMIT_PCT} %, "
            f"{dev.k:g}·u) after the fit; the worst is step {obs.key(worst)}: "
            f"{dev.dev_after[worst]:+.2f} % against {dev.limit_after[worst]:.2f} %.",
        )
    return Verdict(True, "")
