"""Model-aware verification of readings: a three-phase weighted-least-squares estimator over the
network model with meter gains and model parameters as unknowns, its bad-data tests and the
coverage it gives each meter.

Public API (everything else is internal and may change):

- ``Estimator(profile)``: build once per profile; ``.run(captures) -> Estimate`` where
  ``captures`` is a sequence of steps, each a sequence of ``Snapshot``s of one switch state
  (the first snapshot's ``switches`` decide the topology). Steps are estimated jointly: state
  per step, meter gains and model parameters shared.
- ``estimate(profile, captures) -> Estimate``: the same, one-off.
- ``Estimate``: ``converged``/``why``, ``chi2``/``dof``/``chi2_limit``/``chi2_ok``,
  ``gains`` (``MeterGain(meter, kind, value, std, prior_std)``), ``parameters``
  (``ParameterEstimate(name, nominal, value, std, prior_std)``), ``findings``
  (``Finding(meters, cause, sentence, figure, limit)``; more than one meter = a tie the bench
  cannot resolve), ``coverage`` (``Coverage(meter, error_kind, detectable, min_factor,
  reason)``), ``unverified`` (``Unverified(meter, quantity, reason, step)``), ``meters``.
- ``THRESHOLD``: the normalized statistic above which a finding is made.
- ``RATIO_KINDS``: the coverage kinds that make readings unverified;
  ``Estimator(profile, coverage=RATIO_KINDS)`` reports only those (the verdict's part).

Method and defaults: docs/estimator.md. The engine (``core``) also runs textbook
positive-sequence networks (one node per bus), which is how it is tested against
Abur & Expósito's example.
"""

from .api import Estimator, estimate
from .build import Unverified
from .coverage import RATIO_KINDS
from .diagnose import THRESHOLD
from .results import Coverage, Estimate, Finding, MeterGain, ParameterEstimate

__all__ = [
    "RATIO_KINDS",
    "THRESHOLD",
    "Coverage",
    "Estimate",
    "Estimator",
    "Finding",
    "MeterGain",
    "ParameterEstimate",
    "Unverified",
    "estimate",
]
