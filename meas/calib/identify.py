"""What the data can tell: posterior against prior, weak directions, correlated pairs.

Every unknown is in units of its prior standard uncertainty, so the ratio of posterior to
prior uncertainty is simply √C_jj. Our thresholds: below 0.5 "measured", 0.5–0.9 "partly",
from 0.9 "prior only" (the data do not reach it; its value stays the profile's ± tolerance).
The singular values of the data rows of the weighted Jacobian (same units) name the
directions: a singular value below 1 means the data know that combination less well than the
prior does, and its right singular vector says which parameters form it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .problem import Unknown

MEASURED_BELOW = 0.5
PRIOR_FROM = 0.9
Z95 = 1.959963984540054  # two-sided 95 % normal quantile
CORRELATED = 0.9


def verdict(ratio: float) -> str:
    if ratio < MEASURED_BELOW:
        return "measured"
    if ratio < PRIOR_FROM:
        return "partly"
    return "prior only"


@dataclass(frozen=True)
class Estimate:
    """One unknown after the fit, in its own unit (gains as a fraction)."""

    name: str
    kind: str
    nominal: float
    value: float
    u: float  # standard uncertainty
    low95: float
    high95: float
    prior_u: float
    ratio: float  # posterior / prior standard uncertainty
    verdict: str


def estimates(unknowns: tuple[Unknown, ...], z: np.ndarray, cov: np.ndarray) -> list[Estimate]:
    out = []
    for j, u in enumerate(unknowns):
        sz = math.sqrt(max(float(cov[j, j]), 0.0))
        val = u.value(float(z[j]))
        lo, hi = u.value(float(z[j]) - Z95 * sz), u.value(float(z[j]) + Z95 * sz)
        if u.kind == "gain" or u.additive:
            std, prior = sz * u.s, u.s
        else:
            std, prior = abs(val) * sz * u.s, abs(u.nominal) * u.s
        out.append(
            Estimate(
                u.name,
                u.kind,
                u.nominal,
                val,
                std,
                min(lo, hi),
                max(lo, hi),
                prior,
                sz,
                verdict(sz),
            )
        )
    return out


@dataclass(frozen=True)
class Direction:
    """One singular value of the data Jacobian and the unknowns that make up its direction."""

    value: float
    members: tuple[tuple[str, float], ...]  # (name, component) largest first

    def describe(self, n: int = 3) -> str:
        return " ".join(f"{c:+.2f}·{name}" for name, c in self.members[:n])


def directions(
    unknowns: tuple[Unknown, ...], jac_data: np.ndarray, only: int | None = None
) -> list[Direction]:
    """Singular values of the data rows (ascending), over the first ``only`` unknowns."""
    cols = len(unknowns) if only is None else only
    if cols == 0 or jac_data.shape[0] == 0:
        return []
    _, s, vt = np.linalg.svd(jac_data[:, :cols], full_matrices=False)
    out = []
    for k in np.argsort(s):
        v = vt[k]
        order = np.argsort(-np.abs(v))
        members = tuple((unknowns[j].name, float(v[j])) for j in order if abs(v[j]) >= 0.1)
        out.append(Direction(float(s[k]), members))
    return out


def correlated_pairs(
    unknowns: tuple[Unknown, ...], cov: np.ndarray, threshold: float = CORRELATED
) -> list[tuple[str, str, float]]:
    """Pairs of unknowns whose posterior correlation exceeds the threshold in magnitude."""
    d = np.sqrt(np.clip(np.diag(cov), 1e-300, None))
    corr = cov / np.outer(d, d)
    out = []
    n = len(unknowns)
    for a in range(n):
        for b in range(a + 1, n):
            if abs(corr[a, b]) > threshold:
                out.append((unknowns[a].name, unknowns[b].name, float(corr[a, b])))
    return sorted(out, key=lambda t: -abs(t[2]))
