"""The adjustable parameters of the network model and how far each may be off its nameplate.

One owner for three users: the estimator (parameters as unknowns with priors), calibration
(parameters fitted to a session) and the as-built simulated bench (a true network that is not
the nameplate). A parameter is named ``BRANCH.key`` with the key as the profile's ``model``
table writes it (``L2.r_ohm``, ``T1.uk_pct``, ``LD1.p_w``).

Tolerances are ± limits as nameplates and datasheets state them, in percent of the value, except
``tap_pct`` whose tolerance is in percentage points (its nominal value is often 0). A profile can
state its own per parameter (``tolerance_pct`` in the ``model`` table); otherwise the defaults
below apply. As a prior they become a standard uncertainty by the rectangular rule, u = a/√3
(JCGM 100:2008 §4.3.7; common practice for a stated limit).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, replace
from typing import Literal

from ..model import (
    Branch,
    BranchParams,
    LineParams,
    PhaseValues,
    SourceParams,
)

Scale = Literal["relative", "absolute"]

# Default ± limits, percent of the value (percentage points for tap_pct). These are our choices
# for a bench or a new installation whose data come from nameplates and cable tables:
# - source: the supply's short-circuit power and X/R are rarely known better than ±50 %; its
#   open-circuit voltage is measured at the bus to a few percent.
# - line: R and X from cable tables at an assumed temperature and length, ±20 %; charging B
#   ±50 % (hardly ever measurable at LV).
# - transformer: IEC 60076-1 allows ±10 % on the short-circuit impedance of a two-winding
#   transformer below 10 % uk (from memory, common practice); the load-loss share ±20 %; the tap
#   position ±1 point.
# - load and shunt: a load bank's or capacitor bank's rating ±10 % (IEC 60871-1 allows -5/+10 %
#   on a capacitor's output, from memory).
DEFAULT_TOLERANCE_PCT: dict[str, dict[str, float]] = {
    "source": {"v_ll": 5.0, "sc_va": 50.0, "x_r": 50.0},
    "line": {"r_ohm": 20.0, "x_ohm": 20.0, "b_us": 50.0},
    "transformer": {"uk_pct": 10.0, "ur_pct": 20.0, "tap_pct": 1.0},
    "load": {"p_w": 10.0, "q_var": 10.0},
    "shunt": {"q_var": 10.0, "p_w": 10.0},
}
ABSOLUTE_KEYS = frozenset({"tap_pct"})
# A relative tolerance must stay below this: at 100 % the value could reach zero.
MAX_RELATIVE_PCT = 90.0
MAX_ABSOLUTE_POINTS = 20.0


@dataclass(frozen=True)
class ModelParameter:
    """One adjustable value of the network model with its nameplate value and tolerance.

    ``nominal`` is the profile value; for per-phase load and shunt values it is the
    three-phase total, and an adjustment scales all three phases together.
    """

    branch: str
    key: str
    nominal: float
    tolerance: float  # ± limit: percent of nominal, or points when scale is "absolute"
    scale: Scale
    stated: bool  # True when the profile states the tolerance, False for the default

    @property
    def name(self) -> str:
        return f"{self.branch}.{self.key}"

    @property
    def limit(self) -> float:
        """The ± limit in the parameter's own unit."""
        if self.scale == "absolute":
            return self.tolerance
        return abs(self.nominal) * self.tolerance / 100.0

    @property
    def std(self) -> float:
        """Standard uncertainty of the nameplate value (rectangular rule)."""
        return self.limit / math.sqrt(3.0)


def tolerance_keys(kind: str, params: BranchParams) -> tuple[str, ...]:
    """The keys of a branch kind that can carry a tolerance (as written in its model table)."""
    keys = tuple(DEFAULT_TOLERANCE_PCT.get(kind, {}))
    if isinstance(params, LineParams) and params.length_km is not None:
        return tuple(k + "_per_km" for k in keys)
    return keys


def _base_key(key: str) -> str:
    return key.removesuffix("_per_km")


def _total(v: PhaseValues) -> float:
    return float(sum(v)) if isinstance(v, tuple) else float(v)


def _value(params: BranchParams, key: str) -> float | None:
    raw = getattr(params, _base_key(key), None)
    if raw is None:
        return None
    if isinstance(raw, tuple):
        return _total(raw)
    if isinstance(raw, bool) or not isinstance(raw, int | float):
        return None
    return float(raw)


def branch_parameters(branch: Branch) -> tuple[ModelParameter, ...]:
    """The adjustable parameters of one branch; none without a model or for an ideal source."""
    params = branch.model
    if params is None:
        return ()
    if isinstance(params, SourceParams) and math.isinf(params.sc_va):
        return (ModelParameter(branch.id, "v_ll", params.v_ll, *_tol(branch, "v_ll")),)
    out = []
    for key in tolerance_keys(branch.kind, params):
        value = _value(params, key)
        if value is None:
            continue
        out.append(ModelParameter(branch.id, key, value, *_tol(branch, key)))
    return tuple(out)


def _tol(branch: Branch, key: str) -> tuple[float, Scale, bool]:
    scale: Scale = "absolute" if key in ABSOLUTE_KEYS else "relative"
    stated = dict(branch.tolerance_pct)
    if key in stated:
        return stated[key], scale, True
    return DEFAULT_TOLERANCE_PCT[branch.kind][_base_key(key)], scale, False


def model_parameters(branches: Iterable[Branch]) -> tuple[ModelParameter, ...]:
    """Every adjustable parameter of the network model, in branch order."""
    return tuple(p for b in branches for p in branch_parameters(b))


def _scaled(v: PhaseValues, factor: float) -> PhaseValues:
    if isinstance(v, tuple):
        return (v[0] * factor, v[1] * factor, v[2] * factor)
    return v * factor


def _set(params: BranchParams, key: str, value: float) -> BranchParams:
    """The parameters with ``key`` set to ``value`` (a per-phase value scaled to that total)."""
    field = _base_key(key)
    old = getattr(params, field)
    if isinstance(old, tuple):
        total = _total(old)
        new: PhaseValues = _scaled(old, value / total) if total else (value / 3,) * 3
        return replace(params, **{field: new})  # type: ignore[arg-type]
    return replace(params, **{field: value})  # type: ignore[arg-type]


def with_values(branches: Iterable[Branch], values: Mapping[str, float]) -> tuple[Branch, ...]:
    """The branches with the named parameters (``BRANCH.key``) set to new values.

    Raises KeyError naming a parameter that is not in the model: callers validate user input
    against ``model_parameters`` first.
    """
    branches = tuple(branches)
    by_branch: dict[str, dict[str, float]] = {}
    for name, value in values.items():
        branch, _, key = name.partition(".")
        by_branch.setdefault(branch, {})[key] = value
    known = {p.name for p in model_parameters(branches)}
    unknown = sorted(set(values) - known)
    if unknown:
        raise KeyError(f"not a parameter of the network model: {', '.join(unknown)}")
    out = []
    for b in branches:
        params = b.model
        changes = by_branch.get(b.id)
        if params is None or not changes:
            out.append(b)
            continue
        for key, value in changes.items():
            params = _set(params, key, value)
        out.append(replace(b, model=params))
    return tuple(out)


__all__ = [
    "ABSOLUTE_KEYS",
    "DEFAULT_TOLERANCE_PCT",
    "MAX_ABSOLUTE_POINTS",
    "MAX_RELATIVE_PCT",
    "ModelParameter",
    "branch_parameters",
    "model_parameters",
    "tolerance_keys",
    "with_values",
]
