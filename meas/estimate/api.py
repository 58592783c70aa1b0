"""One estimate: build the terms, fit, name the faults one at a time, and say what was covered."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import replace

# chi2.ppf(p, k) = chdtri(k, 1 - p): scipy.stats costs a second to import
from scipy.special import chdtri

from ..model import Profile
from ..snapshot import Snapshot
from .build import Builder, Problem, Unverified
from .core import StepModel
from .coverage import NAMES, coverage, kind_of, label, unverified_from
from .diagnose import THRESHOLD, Tests, gain_from_data, rivals, tests
from .identify import TRIAL_ITER, Trial, best_trial, suspects, trials
from .offset_frozen import NAMES as _MORE
from .offset_frozen import peak
from .offset_frozen_words import coverage as _more_coverage
from .offset_frozen_words import sentence as _more_sentence
from .results import Estimate, Finding, MeterGain, ParameterEstimate
from .solver import Fit, Starts, solve

CHI2_P = 0.99
# iterations of one fit: a clean capture takes 3 or 4. A fit with a gross error (a reversed
# CT) may need many more, and given 100 it sometimes settles in a wrong local minimum whose
# linear statistics then point at other meters (the meshed fault matrix caught one); at 40
# such a fit is reported as not converged, the identification ranks suspects by dropping each
# meter instead, and the per-snapshot family says "not checked" rather than blame a meter
MAX_ITER = 40
MAX_FINDINGS = 1  # one fault named per estimate: a second could be the first one misread


def _dof(fit: Fit) -> int:
    rows = sum(len(ev.r) for ev in fit.evals)
    return int(rows - (fit.lay.n - fit.lay.ns))


class Estimator:
    """The estimator for one profile; build once, run on any list of captures."""

    def __init__(
        self,
        profile: Profile,
        *,
        max_iter: int = MAX_ITER,
        exact: bool = True,
        coverage: frozenset[str] | None = None,
    ):
        """``max_iter``: see MAX_ITER.
        ``exact=False`` names faults from the linearized statistics alone (one fit, no
        refits: what the per-snapshot check family can afford); a wiring fault is then named
        on its meter as "wiring" and its kind left to the per-phase wiring checks.
        ``coverage``: the error kinds whose coverage the estimate reports (None: every kind).
        Only the ratio kinds make readings unverified (``RATIO_KINDS``), so a caller that
        wants the verdict alone, as the per-snapshot check family, asks for those."""
        self.profile = profile
        self.builder = Builder(profile)
        self.max_iter = max_iter
        self.exact = exact
        self.coverage = coverage
        self.starts = Starts()  # where earlier solves ended, per step structure

    def run(self, captures: Sequence[Sequence[Snapshot]]) -> Estimate:
        """Estimate jointly over ``captures`` (one inner sequence of snapshots per step)."""
        pr = self.builder.problem(captures)
        if not pr.steps:
            topo = [u.reason for u in pr.unverified if u.meter == "*"]
            return _empty(pr, topo[0] if topo else "no live meter gave readings in these captures")
        fit0 = solve(pr.steps, pr.priors, max_iter=self.max_iter, starts=self.starts)
        findings: list[Finding] = []
        fit, steps, keys = fit0, list(pr.steps), list(pr.keys)
        cov_fit, cov_steps, cov_keys = fit0, steps, keys
        ts0: Tests | None = None
        for _ in range(MAX_FINDINGS):
            if fit.converged:
                ts = tests(fit, steps, keys, pr.gains)
                if fit is fit0:
                    ts0 = ts
                if peak(fit, steps, keys, ts, self.exact) < THRESHOLD:
                    break
            if not self.exact:
                lin = _identify_linear(fit, ts, pr) if fit.converged else None
                if lin is not None:
                    findings.append(lin)
                break
            budget = min(TRIAL_ITER, self.max_iter)
            sus = suspects(fit, steps, keys, pr.priors, pr, budget)
            picked = best_trial(
                fit,
                trials(fit, steps, pr.priors, pr, sus, keys, budget, self.max_iter),
            )
            if picked is None:
                break
            top, rv, same = picked
            findings.append(_finding(fit, top, rv, same, pr))
            if not fit.converged or cov_fit is fit0 and not fit0.converged:
                cov_fit, cov_steps, cov_keys = top.fit, top.steps, keys
            if rv:
                break  # a tie: removing either would be a guess
            steps, keys = _without(steps, keys, {top.meter})
            if not any(st.meters for st in steps):
                break
            nxt = solve(steps, pr.priors, x0=top.fit.x, max_iter=self.max_iter)
            if not nxt.converged:
                nxt = solve(steps, pr.priors, max_iter=self.max_iter)
            fit = nxt
        if not fit.converged and not findings:
            return _empty(pr, f"the estimate did not converge: {fit.why}", fit.iterations)
        if not fit.converged:
            fit = cov_fit
        dof = _dof(fit)
        limit = float(chdtri(dof, 1.0 - CHI2_P)) if dof > 0 else math.nan
        named = {m for f in findings for m in f.meters}
        if cov_fit is not fit0 or ts0 is None:
            ts0 = tests(cov_fit, cov_steps, cov_keys, pr.gains)
        cov = coverage(cov_fit, ts0, self.coverage)
        # the linearized identification names no offset or frozen meter
        if self.exact and (self.coverage is None or self.coverage & set(_MORE)):
            more = _more_coverage(cov_fit, cov_steps, cov_keys, ts0)
            cov += tuple(c for c in more if self.coverage is None or kind_of(c) in self.coverage)
        return Estimate(
            converged=True,
            why="",
            iterations=fit0.iterations,
            chi2=float(fit.cost),
            dof=dof,
            chi2_limit=limit,
            steps=len(pr.steps),
            gains=_gains(cov_fit, fit, pr, named),
            parameters=_parameters(fit, pr),
            findings=tuple(findings),
            coverage=cov,
            unverified=tuple(pr.unverified) + unverified_from(cov),
            meters=tuple(sorted({mt.name for st in pr.steps for mt in st.meters})),
        )


def estimate(profile: Profile, captures: Sequence[Sequence[Snapshot]]) -> Estimate:
    """One-off estimate; keep an ``Estimator`` for repeated use (it caches per-profile terms)."""
    return Estimator(profile).run(captures)


# ---------------------------------------------------------------------------- identification


def _finding(base: Fit, top: Trial, rv: list[Trial], same: list[Trial], pr: Problem) -> Finding:
    figure = math.sqrt(max(base.cost - top.score, 0.0))
    if rv:
        meters = tuple(sorted({top.meter} | {t.meter for t in rv}))
        what = ", ".join(
            f"{t.meter} ({NAMES[t.kind]}{' ' + t.arg if t.arg else ''})" for t in [top, *rv]
        )
        sentence = (
            f"{' or '.join(meters)}: cannot be told apart on this bench ({what} explain the "
            "readings equally well); another meter on the same flow, or a step that loads it "
            "differently, would tell"
        )
        return Finding(meters, "ambiguous:" + label(top.kind, top.arg), sentence, figure, THRESHOLD)
    m = top.meter
    if top.kind in _MORE:
        cause, sentence = _more_sentence(top, pr)
    elif top.kind in ("vt_ratio", "ct_ratio"):
        gi = pr.gains[(m, "v" if top.kind == "vt_ratio" else "i")]
        k = float(top.fit.x[gi])
        sd = math.sqrt(max(float(top.fit.ginv[gi, gi]), 0.0))
        what = "voltages" if top.kind == "vt_ratio" else "currents and powers"
        cause = f"{top.kind}:{k:.3f}"
        sentence = (
            f"{m}: {what} {k:.3f} ± {sd:.3f} of what the network implies: the "
            f"{NAMES[top.kind]} looks set wrong by a factor {k:.2f}"
        )
    elif top.kind == "ct_reversed":
        cause = f"ct_reversed:{top.arg}"
        sentence = (
            f"{m}: phase {top.arg} power runs against what the network implies: the CT of "
            f"phase {top.arg} looks reversed"
        )
    else:
        cause = f"phases_swapped:{top.arg}"
        sentence = (
            f"{m}: currents of phases {top.arg[0]} and {top.arg[1]} sit where the other's "
            "should: the current inputs look swapped"
        )
    if same:
        alt = " or ".join(sorted({NAMES[t.kind] + (f" {t.arg}" if t.arg else "") for t in same}))
        sentence += f" (a {alt} fits about as well)"
    return Finding((m,), cause, sentence, figure, THRESHOLD)


def _identify_linear(fit: Fit, ts: Tests, pr: Problem) -> Finding | None:
    """The largest statistic names the meter; a ratio cause only when it is a plain one."""
    if not len(ts.t):
        return None
    order = sorted(range(len(ts.hyps)), key=lambda h: (-ts.t[h], ts.hyps[h].meter, h))
    h = order[0]
    if ts.t[h] < THRESHOLD:
        return None
    hy = ts.hyps[h]
    figure = float(ts.t[h])
    rv = rivals(ts, h)
    if rv:
        meters = tuple(sorted({hy.meter} | {ts.hyps[g].meter for g in rv}))
        sentence = (
            f"{' or '.join(meters)}: cannot be told apart on this bench (each explains the "
            "readings as well); another meter on the same flow, or a step that loads it "
            "differently, would tell"
        )
        return Finding(meters, "ambiguous:" + label(hy.kind, hy.arg), sentence, figure, THRESHOLD)
    wiring = max(
        (
            float(ts.t[g])
            for g in order
            if ts.hyps[g].meter == hy.meter and ts.hyps[g].kind in _WIRING
        ),
        default=0.0,
    )
    if hy.kind in ("vt_ratio", "ct_ratio") and wiring < 0.5 * figure:
        gi = ts.gain_index[(hy.meter, "v" if hy.kind == "vt_ratio" else "i")]
        om = 1.0 - float(fit.ginv[gi, gi]) / float(fit.prior_std[gi]) ** 2
        k, sd = gain_from_data(fit, gi, om)
        if 0.5 <= k <= 2.0:
            what = "voltages" if hy.kind == "vt_ratio" else "currents and powers"
            return Finding(
                (hy.meter,),
                f"{hy.kind}:{k:.3f}",
                f"{hy.meter}: {what} {k:.3f} ± {sd:.3f} of what the network implies: the "
                f"{NAMES[hy.kind]} looks set wrong by a factor {k:.2f}",
                figure,
                THRESHOLD,
            )
    return Finding(
        (hy.meter,),
        "wiring",
        f"{hy.meter}: its current readings disagree with what the network implies (a reversed "
        "CT or swapped current inputs); the per-phase wiring checks say which",
        figure,
        THRESHOLD,
    )


_WIRING = ("ct_reversed", "phases_swapped")


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


def _empty(pr: Problem, why: str, iterations: int = 0) -> Estimate:
    ids = sorted({m for ms in pr.meter_ids for m in ms})
    unv = tuple(pr.unverified) + tuple(Unverified(m, "all", why) for m in ids)
    return Estimate(
        False,
        why,
        iterations,
        math.nan,
        0,
        math.nan,
        len(pr.steps),
        (),
        (),
        (),
        (),
        unv,
        tuple(ids),
    )


__all__ = ["Estimator", "estimate"]
