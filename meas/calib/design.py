"""Before the campaign: what a sequence will calibrate, and which extra step would help most.

No data yet, so the readings are what the profile's model predicts, with the uncertainty an
assumed repeatability gives (per capture, relative, floored at the register resolution), and
the same unknowns and priors as the fit (model parameters, meter gains). The linearised
posterior at the profile values, C = (JᵀJ + I)⁻¹ in prior units, then says per parameter
whether the planned steps measure it or leave it to its prior. The data rows of every step add
their own JᵀJ, so one Jacobian over the planned steps and every switch configuration the
profile's switches allow scores each candidate step cheaply: the gain in information is the
drop of Σ log(posterior/prior) over the model parameters.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from ..errors import BenchwalkError
from ..model import Profile
from .identify import Estimate, estimates, verdict
from .observations import (
    DEFAULT_REPEATABILITY,
    FIT_QUANTITIES,
    Observations,
    RawRow,
    StepConfig,
    pooled_observations,
)
from .predict import NetworkPredictor
from .problem import Problem
from .select import observable
from .selection import select_parameters
from .steps import allowed_configs, describe, sequence_configs


@dataclass(frozen=True)
class Candidate:
    config: StepConfig
    gain: float  # drop of the sum of log(post/prior) over the model parameters
    ratios: dict[str, float]  # post/prior of every model parameter with this step added
    nearest: str  # the planned step it differs least from
    changes: dict[str, str]  # switch -> state, against that step


@dataclass(frozen=True)
class CampaignPlan:
    steps: tuple[StepConfig, ...]
    parameters: tuple[Estimate, ...]  # posterior at the profile values with the planned steps
    candidates: tuple[Candidate, ...]  # best first
    best_for: dict[str, Candidate]  # parameter not measured -> the step that helps it most
    repeatability: float

    def by_verdict(self, which: str) -> list[str]:
        return [e.name for e in self.parameters if e.verdict == which]


def _layout(
    profile: Profile, configs: Sequence[StepConfig], values: np.ndarray | None
) -> list[RawRow]:
    rows = []
    n = 0
    for k, c in enumerate(configs):
        seen = observable(profile, c)
        for m in profile.meters:
            for q in FIT_QUANTITIES:
                if q not in seen[m.id]:
                    continue
                for ph in ("A", "B", "C"):
                    v = 1.0 if values is None else float(values[n])
                    rows.append(RawRow(k, m.id, q, ph, (v,) * max(1, c.captures)))
                    n += 1
    return rows


def _observations(
    profile: Profile, configs: Sequence[StepConfig], repeatability: float
) -> Observations:
    rows = _layout(profile, configs, None)
    first = pooled_observations(profile, configs, rows, repeatability=repeatability)
    h = NetworkPredictor(profile, first).predict({})
    rows = _layout(profile, configs, h)
    return pooled_observations(profile, configs, rows, repeatability=repeatability)


def _ratios(info: np.ndarray, n_model: int) -> np.ndarray:
    cov = np.linalg.pinv(info, hermitian=True)
    return np.sqrt(np.clip(np.diag(cov)[:n_model], 0.0, None))


def plan_campaign(
    profile: Profile,
    *,
    skip: Sequence[str] = (),
    params: Sequence[str] = (),
    repeatability: float = DEFAULT_REPEATABILITY,
    emf_per_step: bool = False,
    captures: int = 5,
) -> CampaignPlan:
    """The identifiability of the profile's sequence (less ``skip``) and the best added steps."""
    unknown = [s for s in skip if s not in {st.id for st in profile.steps}]
    if unknown:
        raise BenchwalkError(f"{profile.path}: --skip {unknown[0]!r} is not a step of the sequence")
    planned = sequence_configs(profile, skip)
    planned = [c for c in planned if any(observable(profile, c).values())]
    if not planned:
        raise BenchwalkError(f"{profile.path}: the sequence has no capture step with a live meter")
    seen = [dict(c.switches) for c in planned]
    extra = [
        replace(c, captures=captures)
        for c in allowed_configs(profile, captures)
        if dict(c.switches) not in seen
    ]
    configs = planned + extra
    obs = _observations(profile, configs, repeatability)
    chosen = select_parameters(profile, params)
    problem = Problem(
        profile, obs, NetworkPredictor(profile, obs), chosen, emf_per_step=emf_per_step
    )
    n = len(problem.unknowns)
    z = np.zeros(n)
    jac = problem.jacobian(z)[: len(obs)]
    per_step = [jac[obs.step == k] for k in range(len(configs))]
    base = np.eye(n) + sum((b.T @ b for b in per_step[: len(planned)]), np.zeros((n, n)))
    cov = np.linalg.pinv(base, hermitian=True)
    ests = [e for e in estimates(problem.unknowns, z, cov) if e.kind == "parameter"]
    n_model = problem.n_model
    ratio0 = _ratios(base, n_model)
    names = [u.name for u in problem.unknowns[:n_model]]
    is_param = np.array([u.kind == "parameter" for u in problem.unknowns[:n_model]])
    cands = []
    for k in range(len(planned), len(configs)):
        b = per_step[k]
        r = _ratios(base + b.T @ b, n_model)
        gain = float(np.sum(np.log(ratio0[is_param] / r[is_param])))
        near, changes = _nearest(planned, configs[k])
        cands.append(
            Candidate(configs[k], gain, dict(zip(names, map(float, r), strict=True)), near, changes)
        )
    cands.sort(key=lambda c: -c.gain)
    best_for = {}
    for e in ests:
        if e.verdict == "measured" or not cands:
            continue
        best = min(cands, key=lambda c: (c.ratios[e.name], -c.gain))
        if verdict(best.ratios[e.name]) != e.verdict and best.ratios[e.name] < e.ratio * 0.9:
            best_for[e.name] = best
    return CampaignPlan(tuple(planned), tuple(ests), tuple(cands), best_for, repeatability)


def _nearest(planned: Sequence[StepConfig], c: StepConfig) -> tuple[str, dict[str, str]]:
    def diff(p: StepConfig) -> dict[str, str]:
        return {k: v for k, v in c.switches.items() if p.switches.get(k) != v}

    best = min(planned, key=lambda p: len(diff(p)))
    return best.id, diff(best)


def proposal(c: Candidate) -> str:
    """A step in words: what to switch from the nearest planned step."""
    moves = ", ".join(
        f"{'close' if v == 'closed' else 'open'} {k}" for k, v in sorted(c.changes.items())
    )
    return f"after step {c.nearest}: {moves} ({describe(c.config.switches)})"
