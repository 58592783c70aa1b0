"""Standard uncertainty of the predicted short-circuit figures from a parameter covariance.

The delta method (JCGM 100:2008 §5.1.2, first-order propagation): u^2(y) = g^T Sigma g, with
g = dy/dp by central differences on the network model's parameters (``BRANCH.key`` names of
``meas.network.parameters``, the names a calibration reports). A calibration gives Sigma; with
none, ``nameplate_covariance`` gives the diagonal prior of the profile's tolerances (u = a /
sqrt(3)), so the prediction always states an uncertainty.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np

from ..errors import BenchwalkError
from ..model import Profile
from ..network.parameters import model_parameters, with_values

# the figures propagated, as attributes of ``ShortCircuit`` (zk as its magnitude)
FIGURES = ("ikss_a", "ip_a", "r_x", "zk_abs_ohm")


@dataclass(frozen=True)
class Covariance:
    """Parameter names (``BRANCH.key``), their values and covariance, in the parameters' units."""

    names: tuple[str, ...]
    values: tuple[float, ...]
    matrix: np.ndarray

    def __post_init__(self) -> None:
        n = len(self.names)
        if self.matrix.shape != (n, n) or len(self.values) != n:
            raise BenchwalkError(
                f"covariance: {n} parameters but a {self.matrix.shape} matrix and {len(self.values)} values"
            )


def nameplate_covariance(profile: Profile, names: Sequence[str] | None = None) -> Covariance:
    """The diagonal prior of the model's tolerances (rectangular rule), for the named parameters
    or every series parameter that moves a short-circuit current (loads and shunts excluded)."""
    params = [p for p in model_parameters(profile.branches) if names is None or p.name in names]
    if names is None:
        kinds = {b.id: b.kind for b in profile.branches}
        params = [
            p
            for p in params
            if kinds[p.branch] in ("source", "line", "transformer")
            and not p.key.startswith(("b_us", "v_ll", "tap"))
        ]
    return Covariance(
        tuple(p.name for p in params),
        tuple(p.nominal for p in params),
        np.diag([p.std**2 for p in params]),
    )


def calibrated_profile(profile: Profile, cov: Covariance) -> Profile:
    """The profile with the covariance's parameter values (a calibration's estimates)."""
    try:
        return replace(
            profile,
            branches=with_values(profile.branches, dict(zip(cov.names, cov.values, strict=True))),
        )
    except KeyError as exc:
        raise BenchwalkError(f"covariance: {exc.args[0]}") from None


def propagate(
    profile: Profile,
    cov: Covariance,
    evaluate: Callable[[Profile], Mapping[str, float]],
    rel_step: float = 1e-6,
) -> dict[str, float]:
    """Standard uncertainty of every figure ``evaluate`` returns, by the delta method."""
    base = calibrated_profile(profile, cov)
    keys = list(evaluate(base))
    grads = np.zeros((len(keys), len(cov.names)))
    values = dict(zip(cov.names, cov.values, strict=True))
    for j, name in enumerate(cov.names):
        h = rel_step * max(abs(values[name]), 1e-6)
        out = []
        for sign in (1.0, -1.0):
            v = dict(values)
            v[name] = values[name] + sign * h
            out.append(evaluate(replace(profile, branches=with_values(profile.branches, v))))
        grads[:, j] = [(out[0][k] - out[1][k]) / (2 * h) for k in keys]
    var = np.einsum("ij,jk,ik->i", grads, cov.matrix, grads)
    return {k: float(np.sqrt(max(v, 0.0))) for k, v in zip(keys, var, strict=True)}
