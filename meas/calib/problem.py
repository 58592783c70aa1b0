"""The least-squares problem: unknowns, priors, weighted residuals and their Jacobian.

Unknowns are kept in units of their prior standard uncertainty, so every one is O(1) and its
prior is simply the row ``z`` (MAP estimation; nameplate ± tolerance entered as a
pseudo-measurement, never a hard fix, which biases the rest):

- a model parameter as a log-multiplier of its profile value, value = nominal·exp(z·s) with s
  its relative prior uncertainty (log keeps R, X and powers positive); ``tap_pct``, whose
  tolerance is in points, additively: nominal + z·s;
- optionally one source EMF multiplier per step, exp(z·s) with the prior of ``v_ll`` (for a
  supply that drifts between steps; the shared ``v_ll`` then drops out);
- one gain per meter and quantity kind (V, I, P, Q), a reading being (1 + g)·model, with prior
  s = class limit/√3: a class limit is mostly one systematic error of the instrument, the same
  in every step, so it is an unknown rather than independent noise. With ``gains=False`` the
  class limit is instead added to every reading's uncertainty as if independent.

Data rows are (measured − (1 + g)·model)/σ with σ from the repeatability.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np

from ..model import Profile
from ..network.parameters import ModelParameter
from ..tolerance import class_spec
from .observations import GAIN_KIND, Observations
from .predict import Predictor, SensitivityPredictor

UnknownKind = Literal["parameter", "emf", "gain"]
FD_STEP = 1e-4  # finite-difference step, in prior standard uncertainties


@dataclass(frozen=True)
class Unknown:
    name: str  # "L1.r_ohm", "emf@STEP", "M1.v gain"
    kind: UnknownKind
    nominal: float
    s: float  # prior standard uncertainty: relative (log) or in the unit (additive)
    additive: bool = False
    parameter: ModelParameter | None = None

    def value(self, z: float) -> float:
        if self.kind == "gain":
            return z * self.s
        if self.additive:
            return self.nominal + z * self.s
        return self.nominal * math.exp(z * self.s)


def parameter_unknown(p: ModelParameter) -> Unknown:
    if p.scale == "absolute":
        return Unknown(p.name, "parameter", p.nominal, p.std, additive=True, parameter=p)
    return Unknown(p.name, "parameter", p.nominal, p.std / abs(p.nominal), parameter=p)


def class_sigma(profile: Profile, meter: str, kind: str) -> float:
    """Relative standard uncertainty of a meter's class limit for a quantity kind (a/√3)."""
    designation = getattr(profile.meter(meter).classes, kind)
    return class_spec(kind, designation).main_pct / 100.0 / math.sqrt(3.0)


class Problem:
    """Residuals and Jacobian of one calibration, for ``scipy.optimize.least_squares``."""

    def __init__(
        self,
        profile: Profile,
        obs: Observations,
        predictor: Predictor,
        params: Sequence[ModelParameter],
        *,
        emf_per_step: bool = False,
        gains: bool = True,
        emf_rel_std: float | None = None,
    ):
        self.obs = obs
        self.predictor = predictor
        source_v = [p for p in params if p.key == "v_ll"]
        kept = [p for p in params if not (emf_per_step and p.key == "v_ll")]
        unknowns = [parameter_unknown(p) for p in kept]
        self.emf_per_step = emf_per_step
        if emf_per_step:
            s = emf_rel_std
            if s is None:
                s = source_v[0].std / abs(source_v[0].nominal) if source_v else 0.05 / math.sqrt(3)
            unknowns += [Unknown(f"emf@{st.id}", "emf", 1.0, s) for st in obs.steps]
        self.n_model = len(unknowns)
        self.gain_of_row = np.full(len(obs), -1, dtype=int)
        sigma = obs.sigma.copy()
        if gains:
            index: dict[tuple[str, str], int] = {}
            for i in range(len(obs)):
                key = (obs.meter[i], GAIN_KIND[obs.quantity[i]])
                if key not in index:
                    index[key] = len(unknowns)
                    unknowns.append(
                        Unknown(f"{key[0]}.{key[1]} gain", "gain", 0.0, class_sigma(profile, *key))
                    )
                self.gain_of_row[i] = index[key]
        else:
            cls = np.array(
                [
                    class_sigma(profile, obs.meter[i], GAIN_KIND[obs.quantity[i]])
                    for i in range(len(obs))
                ]
            )
            sigma = np.hypot(sigma, cls * np.abs(obs.value))
        self.sigma = sigma
        self.unknowns = tuple(unknowns)
        self._last: tuple[np.ndarray, np.ndarray] | None = None
        self.evaluations = 0

    # ------------------------------------------------------------ unpacking

    def values(self, z: np.ndarray) -> dict[str, float]:
        return {
            u.name: u.value(float(z[j]))
            for j, u in enumerate(self.unknowns)
            if u.kind == "parameter"
        }

    def emf(self, z: np.ndarray) -> np.ndarray | None:
        if not self.emf_per_step:
            return None
        return np.array(
            [u.value(float(z[j])) for j, u in enumerate(self.unknowns) if u.kind == "emf"]
        )

    def row_gains(self, z: np.ndarray) -> np.ndarray:
        g = np.zeros(len(self.obs))
        has = self.gain_of_row >= 0
        idx = self.gain_of_row[has]
        g[has] = z[idx] * np.array([self.unknowns[j].s for j in idx])
        return g

    def model(self, z: np.ndarray) -> np.ndarray:
        """Model readings (without meter gains) at ``z``; the last one is kept for the Jacobian."""
        if self._last is not None and np.array_equal(self._last[0], z):
            return self._last[1]
        h = self.predictor.predict(self.values(z), self.emf(z))
        self.evaluations += 1
        self._last = (np.array(z, copy=True), h)
        return h

    # ------------------------------------------------------------ least squares

    def data_residuals(self, z: np.ndarray) -> np.ndarray:
        h = self.model(z)
        return (self.obs.value - (1.0 + self.row_gains(z)) * h) / self.sigma

    def residuals(self, z: np.ndarray) -> np.ndarray:
        return np.concatenate([self.data_residuals(z), z])

    def jacobian(self, z: np.ndarray) -> np.ndarray:
        """d(residuals)/dz: model columns from the predictor's sensitivities when it has them
        (one load flow per step), else by forward differences; exact for gains and priors."""
        if isinstance(self.predictor, SensitivityPredictor):
            return self.analytic_jacobian(z)
        return self.difference_jacobian(z)

    def analytic_jacobian(self, z: np.ndarray) -> np.ndarray:
        """The Jacobian from implicit-function sensitivities of the load flow."""
        assert isinstance(self.predictor, SensitivityPredictor)
        z = np.asarray(z, float)
        values, emf = self.values(z), self.emf(z)
        names = [u.name for u in self.unknowns[: self.n_model] if u.kind == "parameter"]
        h, dh = self.predictor.sensitivities(values, names, emf)
        self.evaluations += 1
        self._last = (np.array(z, copy=True), h)
        # chain rule to prior units: d value / dz = s (additive) or value·s (log, emf)
        dz = np.array(
            [
                u.s if u.additive else u.value(float(z[j])) * u.s
                for j, u in enumerate(self.unknowns[: self.n_model])
            ]
        )
        g1 = 1.0 + self.row_gains(z)
        m, n = len(self.obs), len(self.unknowns)
        jac = np.zeros((m + n, n))
        jac[:m, : self.n_model] = -(g1 / self.sigma)[:, None] * dh * dz[None, :]
        return self._exact_columns(jac, z, h)

    def _exact_columns(self, jac: np.ndarray, z: np.ndarray, h: np.ndarray) -> np.ndarray:
        m, n = len(self.obs), len(self.unknowns)
        for i in np.flatnonzero(self.gain_of_row >= 0):
            j = self.gain_of_row[i]
            jac[i, j] = -h[i] * self.unknowns[j].s / self.sigma[i]
        jac[m:, :] = np.eye(n)
        return jac

    def difference_jacobian(self, z: np.ndarray) -> np.ndarray:
        """Forward differences of whole load flows for the model unknowns."""
        z = np.asarray(z, float)
        h = self.model(z)
        g1 = 1.0 + self.row_gains(z)
        m, n = len(self.obs), len(self.unknowns)
        jac = np.zeros((m + n, n))
        values, emf = self.values(z), self.emf(z)
        for j, u in enumerate(self.unknowns[: self.n_model]):
            zz = z.copy()
            zz[j] += FD_STEP
            if u.kind == "parameter":
                steps = self.predictor.affected(u.name)
                if not steps:
                    continue
                vv = dict(values)
                vv[u.name] = u.value(float(zz[j]))
                hh = self.predictor.predict(vv, emf, steps, h)
            else:
                k = [i for i, w in enumerate(self.unknowns) if w.kind == "emf"].index(j)
                ee = self.emf(zz)
                hh = self.predictor.predict(values, ee, [k], h)
            jac[:m, j] = -g1 * (hh - h) / FD_STEP / self.sigma
        return self._exact_columns(jac, z, h)
