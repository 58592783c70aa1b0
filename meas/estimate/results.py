"""What the estimator returns: plain frozen dataclasses, the public face of ``meas.estimate``."""

from __future__ import annotations

import math
from dataclasses import dataclass

from .build import Unverified


@dataclass(frozen=True)
class MeterGain:
    """A meter's estimated voltage or current gain (1 = reads what the network implies)."""

    meter: str
    kind: str  # "voltage" or "current"
    value: float
    std: float
    prior_std: float  # the class limit / √3


@dataclass(frozen=True)
class ParameterEstimate:
    """A model parameter after the fit, in its own unit (``tap_pct`` in points)."""

    name: str  # "L2.r_ohm"
    nominal: float
    value: float
    std: float
    prior_std: float

    @property
    def identified(self) -> bool:
        """The data narrowed the prior to under half (CALIBRATION_NOTES §1.4 thresholds)."""
        return self.prior_std > 0 and self.std / self.prior_std < 0.5


@dataclass(frozen=True)
class Finding:
    """A fault the fit points at: one meter, or several that this bench cannot tell apart."""

    meters: tuple[str, ...]
    cause: str  # machine tag: "vt_ratio:1.100", "ct_reversed:B", "phases_swapped:BC", ...
    sentence: str  # one line for a person
    figure: float  # the normalized test statistic
    limit: float  # the threshold it exceeded

    @property
    def ambiguous(self) -> bool:
        return len(self.meters) > 1


@dataclass(frozen=True)
class Coverage:
    """Whether this configuration can detect an error kind on a meter, and from what size."""

    meter: str
    error_kind: str  # "vt_ratio", "ct_ratio", "ct_reversed:B", "phases_swapped:BC"
    detectable: bool
    min_factor: float  # smallest detectable |factor - 1| for ratios (e.g. 0.018); NaN otherwise
    reason: str


@dataclass(frozen=True)
class Estimate:
    """The joint estimate of one or more captures (steps)."""

    converged: bool
    why: str  # why not, when not converged; else ""
    iterations: int
    chi2: float
    dof: int
    chi2_limit: float  # the 99 % quantile of chi-square with ``dof`` degrees of freedom
    steps: int
    gains: tuple[MeterGain, ...]
    parameters: tuple[ParameterEstimate, ...]
    findings: tuple[Finding, ...]
    coverage: tuple[Coverage, ...]
    unverified: tuple[Unverified, ...]
    meters: tuple[str, ...]  # meters whose readings entered the fit

    @property
    def chi2_ok(self) -> bool:
        return not math.isnan(self.chi2) and self.chi2 <= self.chi2_limit

    def coverage_of(self, meter: str, error_kind: str) -> Coverage | None:
        for c in self.coverage:
            if c.meter == meter and c.error_kind == error_kind:
                return c
        return None

    def gain(self, meter: str, kind: str) -> MeterGain | None:
        for g in self.gains:
            if g.meter == meter and g.kind == kind:
                return g
        return None


__all__ = ["Coverage", "Estimate", "Finding", "MeterGain", "ParameterEstimate", "Unverified"]
