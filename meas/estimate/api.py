"""One estimate: build the terms, fit, name the faults one at a time, and say what was covered."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import replace

import numpy as np
from scipy.stats import chi2 as _chi2

from ..model import Profile
from ..snapshot import Snapshot
from .build import Builder, Problem, Unverified
from .core import Fit, StepModel, omega_diag, solve
from .diagnose import CRITICAL, POWER_Z, THRESHOLD, TIE_RHO, Tests, gain_from_data, rivals, tests
from .results import Coverage, Estimate, Finding, MeterGain, ParameterEstimate

CHI2_P = 0.99
MAX_FINDINGS = 3
_NAMES = {
    "vt_ratio": "VT ratio",
    "ct_ratio": "CT ratio",
    "ct_reversed": "reversed CT",
    "phases_swapped": "swapped current inputs",
}


def _dof(fit: Fit) -> int:
    rows = sum(len(ev.r) for ev in fit.evals)
    return int(rows - (fit.lay.n - fit.lay.ns))


def _label(kind: str, arg: str) -> str:
    return f"{kind}:{arg}" if arg else kind


class Estimator:
    """The estimator for one profile; build once, run on any list of captures."""

    def __init__(self, profile: Profile):
        self.profile = profile
        self.builder = Builder(profile)

    def run(self, captures: Sequence[Sequence[Snapshot]]) -> Estimate:
        """Estimate jointly over ``captures`` (one inner sequence of snapshots per step)."""
        pr = self.builder.problem(captures)
        if not pr.steps:
            return _empty(pr, "no live meter gave readings in these captures")
        fit0 = solve(pr.steps, pr.priors)
        if not fit0.converged:
            return _empty(pr, f"the estimate did not converge: {fit0.why}", fit0.iterations)
        ts0 = tests(fit0, pr.steps, pr.keys, pr.gains)
        findings: list[Finding] = []
        fit, steps, keys, ts = fit0, list(pr.steps), list(pr.keys), ts0
        for _ in range(MAX_FINDINGS):
            f = _identify(fit, ts, pr)
            if f is None:
                break
            findings.append(f)
            if f.ambiguous:
                break  # a tie: removing either would be a guess
            steps, keys = _without(steps, keys, set(f.meters))
            if not any(st.meters for st in steps):
                break
            nxt = solve(steps, pr.priors, x0=None)
            if not nxt.converged:
                break
            fit = nxt
            ts = tests(fit, steps, keys, pr.gains)
        dof = _dof(fit)
        limit = float(_chi2.ppf(CHI2_P, dof)) if dof > 0 else math.nan
        named = {m for f in findings for m in f.meters}
        cov = _coverage(fit0, ts0, pr)
        return Estimate(
            converged=True,
            why="",
            iterations=fit0.iterations,
            chi2=float(fit.cost),
            dof=dof,
            chi2_limit=limit,
            steps=len(pr.steps),
            gains=_gains(fit0, fit, pr, named),
            parameters=_parameters(fit, pr),
            findings=tuple(findings),
            coverage=cov,
            unverified=tuple(pr.unverified) + _unverified_from(cov),
            meters=tuple(sorted({mt.name for st in pr.steps for mt in st.meters})),
        )


def estimate(profile: Profile, captures: Sequence[Sequence[Snapshot]]) -> Estimate:
    """One-off estimate; keep an ``Estimator`` for repeated use (it caches per-profile terms)."""
    return Estimator(profile).run(captures)


# ---------------------------------------------------------------------------- identification


def _identify(fit: Fit, ts: Tests, pr: Problem) -> Finding | None:
    if not len(ts.t):
        return None
    order = sorted(range(len(ts.hyps)), key=lambda h: (-ts.t[h], ts.hyps[h].meter, h))
    h = order[0]
    if ts.t[h] < THRESHOLD:
        return None
    hy = ts.hyps[h]
    rv = rivals(ts, h)
    meters = tuple(sorted({hy.meter} | {ts.hyps[g].meter for g in rv}))
    same = [
        g
        for g in order[1:]
        if ts.hyps[g].meter == hy.meter and ts.t[g] >= 0.97 * ts.t[h] and ts.hyps[g].kind != hy.kind
    ]
    figure = float(ts.t[h])
    if len(meters) > 1:
        what = ", ".join(f"{ts.hyps[g].meter} ({_NAMES[ts.hyps[g].kind]})" for g in [h, *rv])
        sentence = (
            f"{' or '.join(meters)}: cannot be told apart on this bench ({what} explain the "
            f"readings equally well); another meter on the same flow, or a step that loads it "
            "differently, would tell"
        )
        return Finding(meters, "ambiguous:" + _label(hy.kind, hy.arg), sentence, figure, THRESHOLD)
    cause, sentence = _cause(fit, ts, h, pr)
    if same:
        alt = " or ".join(_NAMES[ts.hyps[g].kind] for g in same)
        sentence += f" (a {alt} fits about as well)"
    return Finding(meters, cause, sentence, figure, THRESHOLD)


def _cause(fit: Fit, ts: Tests, h: int, pr: Problem) -> tuple[str, str]:
    hy = ts.hyps[h]
    m = hy.meter
    if hy.kind in ("vt_ratio", "ct_ratio"):
        gi = ts.gain_index[(m, "v" if hy.kind == "vt_ratio" else "i")]
        om = 1.0 - float(fit.ginv[gi, gi]) / float(fit.prior_std[gi]) ** 2
        k, s = gain_from_data(fit, gi, om)
        what = "voltages" if hy.kind == "vt_ratio" else "currents and powers"
        return (
            f"{hy.kind}:{k:.3f}",
            f"{m}: {what} {k:.3f} ± {s:.3f} of what the network implies: the "
            f"{_NAMES[hy.kind]} looks set wrong by a factor {k:.2f}",
        )
    if hy.kind == "ct_reversed":
        return (
            f"ct_reversed:{hy.arg}",
            f"{m}: phase {hy.arg} power runs against what the network implies: the CT of "
            f"phase {hy.arg} looks reversed",
        )
    return (
        f"phases_swapped:{hy.arg}",
        f"{m}: currents of phases {hy.arg[0]} and {hy.arg[1]} sit where the other's should: "
        "the current inputs look swapped",
    )


def _without(
    steps: Sequence[StepModel], keys: Sequence[Sequence[Sequence[str]]], drop: set[str]
) -> tuple[list[StepModel], list[list[list[str]]]]:
    out, kout = [], []
    for st, ks in zip(steps, keys, strict=True):
        keep = [i for i, mt in enumerate(st.meters) if mt.name not in drop]
        out.append(replace(st, meters=tuple(st.meters[i] for i in keep)))
        kout.append([list(ks[i]) for i in keep])
    return out, kout


# ---------------------------------------------------------------------------- reporting


def _gains(fit0: Fit, fit: Fit, pr: Problem, named: set[str]) -> tuple[MeterGain, ...]:
    out = []
    for (mid, g), idx in sorted(pr.gains.items()):
        src = fit0 if mid in named else fit
        out.append(
            MeterGain(
                mid,
                "voltage" if g == "v" else "current",
                float(src.x[idx]),
                math.sqrt(max(float(src.ginv[idx, idx]), 0.0)),
                pr.priors[idx].std,
            )
        )
    return tuple(out)


def _parameters(fit: Fit, pr: Problem) -> tuple[ParameterEstimate, ...]:
    out = []
    for k, mp in enumerate(pr.params):
        x, s = float(fit.x[k]), math.sqrt(max(float(fit.ginv[k, k]), 0.0))
        scale = 1.0 if mp.scale == "absolute" else mp.nominal
        out.append(ParameterEstimate(mp.name, mp.nominal, x * scale, s * abs(scale), mp.std))
    return tuple(out)


def _coverage(fit: Fit, ts: Tests, pr: Problem) -> tuple[Coverage, ...]:
    _, om_prior = omega_diag(fit)
    out = []
    for h, hy in enumerate(ts.hyps):
        label = _label(hy.kind, hy.arg)
        tied = sorted(
            {
                ts.hyps[g].meter
                for g in range(len(ts.hyps))
                if ts.hyps[g].meter != hy.meter
                and abs(ts.q[h, g]) >= TIE_RHO * math.sqrt(max(ts.q[h, h] * ts.q[g, g], 1e-300))
                and ts.q[g, g] > CRITICAL * ts.bb[g]
            }
        )
        name = f"{hy.meter} {_NAMES[hy.kind]}" + (f" {hy.arg}" if hy.arg else "")
        if hy.kind in ("vt_ratio", "ct_ratio"):
            gi = ts.gain_index[(hy.meter, "v" if hy.kind == "vt_ratio" else "i")]
            om = float(om_prior[gi])
            if om < CRITICAL:
                out.append(
                    Coverage(hy.meter, label, False, math.nan, f"{name}: no other reading predicts it")
                )
                continue
            delta = (THRESHOLD + POWER_Z) * float(fit.prior_std[gi]) / math.sqrt(om)
            if tied:
                out.append(
                    Coverage(
                        hy.meter,
                        label,
                        False,
                        delta,
                        f"{name}: cannot be told apart from {' or '.join(tied)} on this bench",
                    )
                )
                continue
            out.append(
                Coverage(
                    hy.meter, label, True, delta, f"{name}: detectable beyond ±{100 * delta:.1f} %"
                )
            )
            continue
        strength = math.sqrt(max(float(ts.q[h, h]), 0.0))
        if ts.q[h, h] <= CRITICAL * max(ts.bb[h], 1e-300) or strength < THRESHOLD + POWER_Z:
            why = "too little current in these steps" if ts.bb[h] < 1.0 else "no other reading predicts it"
            out.append(Coverage(hy.meter, label, False, math.nan, f"{name}: {why}"))
        elif tied:
            out.append(
                Coverage(
                    hy.meter,
                    label,
                    False,
                    math.nan,
                    f"{name}: cannot be told apart from {' or '.join(tied)} on this bench",
                )
            )
        else:
            out.append(
                Coverage(hy.meter, label, True, math.nan, f"{name}: detectable (strength {strength:.0f})")
            )
    return tuple(out)


def _unverified_from(cov: Sequence[Coverage]) -> tuple[Unverified, ...]:
    out = []
    for c in cov:
        if c.error_kind in ("vt_ratio", "ct_ratio") and not c.detectable:
            qty = "voltage" if c.error_kind == "vt_ratio" else "current and power"
            out.append(Unverified(c.meter, qty, c.reason))
    return tuple(out)


def _empty(pr: Problem, why: str, iterations: int = 0) -> Estimate:
    ids = sorted({m for ms in pr.meter_ids for m in ms})
    unv = tuple(pr.unverified) + tuple(Unverified(m, "all", why) for m in ids)
    return Estimate(
        False, why, iterations, math.nan, 0, math.nan, len(pr.steps), (), (), (), (), unv, tuple(ids)
    )


__all__ = ["Estimator", "estimate"]
_ = np
