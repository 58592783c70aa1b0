"""Run the fit and judge it: covariance, χ² test, normalized residuals.

Levenberg–Marquardt (``scipy.optimize.least_squares``, MINPACK) from the profile values. At
the optimum the covariance of the unknowns is C = (JᵀJ)⁻¹ over data and prior rows (the
linearised Gauss–Markov result; pseudo-inverse if rank-deficient). Because every unknown has a
prior row, the χ² of the whole cost has m_data + n_prior − n = m_data degrees of freedom
(the MAP cost of a linear Gaussian model). The normalized residual of a reading is
|r| / √Ω_ii with Ω = I − J_d C J_dᵀ in weighted units (Abur & Gómez Expósito 2004, bad-data
chapter, from memory): above about 3 the reading, or the model there, is suspect.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

# chi2.sf(x, k) = chdtrc(k, x): scipy.stats costs a second to import
from scipy.special import chdtrc

from ..errors import BenchwalkError
from ..network.loadflow import SolverError
from .problem import Problem

BIG_RESIDUAL = 1e6  # returned for a trial point whose load flow diverges, so LM steps back


@dataclass(frozen=True)
class FitResult:
    z: np.ndarray  # unknowns at the optimum, prior-σ units
    cov: np.ndarray  # covariance of z
    jac: np.ndarray  # weighted Jacobian at the optimum (data rows, then prior rows)
    model_before: np.ndarray  # model readings at the profile values (no gains)
    model_after: np.ndarray  # at the optimum (no gains)
    gains: np.ndarray  # per data row, fitted meter gain
    weighted: np.ndarray  # data residuals / σ at the optimum
    normalized: np.ndarray  # |r_N| per data row
    model_u: np.ndarray  # standard uncertainty of model_after per row (propagated from cov)
    chi2: float
    dof: int
    p_value: float
    converged: bool
    message: str
    nfev: int
    njev: int
    solves: int
    seconds: float  # wall time
    cpu_seconds: (
        float  # this process's CPU time: what the fit costs on a machine shared with others
    )
    method: str

    @property
    def max_normalized(self) -> float:
        return float(np.max(self.normalized)) if len(self.normalized) else 0.0

    def chi2_rejected(self, alpha: float) -> bool:
        return self.p_value < alpha


def _guarded(problem: Problem):
    def fun(z: np.ndarray) -> np.ndarray:
        try:
            return problem.residuals(z)
        except SolverError:
            return np.full(len(problem.obs) + len(problem.unknowns), BIG_RESIDUAL)

    def jac(z: np.ndarray) -> np.ndarray:
        try:
            return problem.jacobian(z)
        except SolverError:
            raise BenchwalkError(
                "the load flow diverged while fitting (a trial model could not carry the load); "
                "check the profile's model values and tolerances"
            ) from None

    return fun, jac


def run_fit(
    problem: Problem, *, method: str = "trf", max_nfev: int = 40, tol: float = 1e-8
) -> FitResult:
    """Fit from the profile values (z = 0) and collect everything the report needs."""
    t0, c0 = time.perf_counter(), time.process_time()
    n = len(problem.unknowns)
    z0 = np.zeros(n)
    solves0 = problem.predictor.solves
    before = problem.model(z0).copy()
    fun, jac = _guarded(problem)
    res = least_squares(
        fun, z0, jac=jac, method=method, ftol=tol, xtol=tol, gtol=tol, max_nfev=max_nfev
    )
    z = res.x
    r = problem.residuals(z)
    # trf evaluates the Jacobian after each accepted step, so the last one is at the optimum
    # (with the plain squared loss it is returned unmodified); lm's is not, so recompute
    J = res.jac if method == "trf" and res.jac.shape == (len(r), n) else problem.jacobian(z)
    J = np.asarray(J, float)
    seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
    m = len(problem.obs)
    G = J.T @ J
    cov = np.linalg.pinv(G, rcond=1e-12, hermitian=True)
    Jd = J[:m]
    lev = np.einsum("ij,jk,ik->i", Jd, cov, Jd)
    omega = np.clip(1.0 - lev, 1e-12, None)
    weighted = r[:m]
    after = problem.model(z).copy()
    # model-reading uncertainty: d(model)/dz = -J_d·σ/(1+g) for the model unknowns only
    g1 = 1.0 + problem.row_gains(z)
    dh = -Jd[:, : problem.n_model] * (problem.sigma / g1)[:, None]
    cm = cov[: problem.n_model, : problem.n_model]
    model_u = np.sqrt(np.clip(np.einsum("ij,jk,ik->i", dh, cm, dh), 0.0, None))
    chi2 = float(r @ r)
    dof = m  # every unknown has a prior row: m_data + n_prior - n
    converged = (
        bool(res.success) and np.all(np.isfinite(r)) and float(np.max(np.abs(r))) < BIG_RESIDUAL
    )
    return FitResult(
        z=z,
        cov=cov,
        jac=J,
        model_before=before,
        model_after=after,
        gains=problem.row_gains(z),
        weighted=weighted,
        normalized=np.abs(weighted) / np.sqrt(omega),
        model_u=model_u,
        chi2=chi2,
        dof=dof,
        p_value=float(chdtrc(dof, chi2)) if dof > 0 else math.nan,
        converged=bool(converged),
        message=str(res.message),
        nfev=int(res.nfev),
        njev=int(res.njev or 0),
        solves=problem.predictor.solves - solves0,
        seconds=seconds,
        cpu_seconds=cpu,
        method=method,
    )
