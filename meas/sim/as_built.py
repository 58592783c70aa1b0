"""The network the simulated bench is really built as: the nameplate model, off within tolerance.

A real bench never matches its nameplate, so the simulated one need not either. ``as_built``
returns the true branches the simulated bench runs its load flow on, while the profile (and so
every check, the estimator and calibration) keeps the nameplate model.

- With a seed (``--as-built SEED``) every adjustable parameter of ``meas.network.parameters`` is
  drawn uniformly within its ± tolerance limit: ``nominal x (1 + u x tol/100)``, or for
  ``tap_pct`` ``nominal + u x tol`` points, with ``u`` in [-1, 1]. Each parameter's ``u`` comes
  from a generator seeded with the seed and the CRC-32 of the parameter's name, so a draw
  depends on nothing else (not on the other branches, not on the platform).
- Explicit errors (``--model-error L2.r_ohm:1.2``) set a parameter relative to its nameplate
  value: a factor multiplies it (> 0); for ``tap_pct`` the number is an offset in percentage
  points. They override a drawn value and may lie outside the tolerance (said so, not refused).

The applied values go into the session's journal meta (``AsBuilt.meta``) so a dataset says
what the true network was; ``from_meta`` rebuilds it for a resume.
"""

from __future__ import annotations

import math
import zlib
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, replace
from typing import Any, Literal

import numpy as np

from ..errors import BenchwalkError, ProfileError
from ..model import Branch, Profile, TransformerParams
from ..network.elements import element_models
from ..network.loadflow import SolverError
from ..network.parameters import MAX_ABSOLUTE_POINTS, ModelParameter, model_parameters, with_values
from .readings import BenchState, ideal_readings

Origin = Literal["drawn", "given"]
SEED_OPTION = "--as-built"
ERROR_OPTION = "--model-error"
# A factor beyond this is a different network, not a model error (and the load flow may not
# converge on it); our choice.
MAX_FACTOR = 10.0


@dataclass(frozen=True)
class AppliedValue:
    """One parameter of the true network: its nameplate data and the value the bench runs."""

    parameter: ModelParameter
    value: float
    origin: Origin  # "drawn" from the seed, or "given" by an explicit model error

    @property
    def factor(self) -> float:
        """value / nominal, or for an absolute-scale parameter (tap) the offset in points."""
        p = self.parameter
        if p.scale == "absolute":
            return self.value - p.nominal
        return self.value / p.nominal if p.nominal else 1.0

    @property
    def within_tolerance(self) -> bool:
        return abs(self.value - self.parameter.nominal) <= self.parameter.limit * (1 + 1e-12)

    def text(self) -> str:
        p = self.parameter
        how = f"{self.factor:+.3f} points" if p.scale == "absolute" else f"x{self.factor:.4f}"
        out = f"{p.name} {p.nominal:.6g} -> {self.value:.6g} ({how}, {self.origin})"
        return out if self.within_tolerance else out + " outside its tolerance"


@dataclass(frozen=True)
class AsBuilt:
    """The true network of a simulated bench: branches, what was applied, and the seed."""

    branches: tuple[Branch, ...]
    applied: tuple[AppliedValue, ...]
    seed: int | None

    @property
    def values(self) -> dict[str, float]:
        """Parameter name -> the value the simulated bench runs."""
        return {a.parameter.name: a.value for a in self.applied}

    def profile(self, nameplate: Profile) -> Profile:
        """The profile with the true branches (for the bench's load flow only)."""
        return replace(nameplate, branches=self.branches)

    def summary(self) -> str:
        """One line for the console: how the true network differs from the nameplate."""
        return summary_of(self.meta())

    def meta(self, model_errors: Iterable[str] = ()) -> dict[str, Any]:
        """JSON for the journal's session meta (and so the dataset's ``meta``)."""
        return {
            "seed": self.seed,
            "model_errors": list(model_errors),
            "parameters": [
                {
                    "name": a.parameter.name,
                    "nominal": a.parameter.nominal,
                    "value": a.value,
                    "factor": a.factor,
                    "scale": a.parameter.scale,
                    "tolerance": a.parameter.tolerance,
                    "origin": a.origin,
                    "within_tolerance": a.within_tolerance,
                }
                for a in self.applied
            ],
        }


def summary_of(meta: Mapping[str, Any]) -> str:
    """One line from ``AsBuilt.meta`` (as a journal or dataset holds it)."""
    rows = list(meta.get("parameters", ()))
    parts = []
    if meta.get("seed") is not None:
        drawn = sum(r.get("origin") == "drawn" for r in rows)
        parts.append(f"seed {meta['seed']}, {drawn} parameters drawn within tolerance")
    for r in rows:
        if r.get("origin") == "given":
            how = (
                f"{r['factor']:+g} points" if r.get("scale") == "absolute" else f"x{r['factor']:g}"
            )
            late = "" if r.get("within_tolerance") else " (outside its tolerance)"
            parts.append(f"{r['name']} {how}{late}")
    return "as-built network: " + "; ".join(parts) if parts else "nameplate network"


def parse_seed(text: str | int) -> int:
    """``--as-built SEED``: a whole number >= 0."""
    try:
        seed = int(str(text).strip())
    except ValueError:
        raise BenchwalkError(
            f"{SEED_OPTION} {text!r}: the seed must be a whole number such as 7"
        ) from None
    if seed < 0:
        raise BenchwalkError(f"{SEED_OPTION} {text!r}: the seed must be 0 or more")
    return seed


def parse_model_error(text: str) -> tuple[str, float]:
    """``"L2.r_ohm:1.2"`` -> ``("L2.r_ohm", 1.2)``; the syntax only (names need the profile)."""
    name, sep, raw = text.strip().rpartition(":")
    branch, dot, key = name.partition(".")
    if not sep or not dot or not branch.strip() or not key.strip():
        raise BenchwalkError(
            f"{ERROR_OPTION} {text!r}: write BRANCH.KEY:FACTOR, for example L2.r_ohm:1.2"
        )
    try:
        number = float(raw)
    except ValueError:
        raise BenchwalkError(
            f"{ERROR_OPTION} {text!r}: {raw.strip()!r} is not a number; write BRANCH.KEY:FACTOR"
        ) from None
    if not math.isfinite(number):
        raise BenchwalkError(f"{ERROR_OPTION} {text!r}: the number must be finite")
    return f"{branch.strip()}.{key.strip()}", number


def parse_model_errors(texts: Iterable[str]) -> dict[str, float]:
    """Every ``--model-error``; a later one for the same parameter wins."""
    return dict(parse_model_error(t) for t in texts)


def _resolve(name: str, known: Mapping[str, ModelParameter], profile: Profile) -> str:
    """The parameter a user's name means: as written, or ``r_ohm`` for a per-km ``r_ohm_per_km``."""
    if name in known:
        return name
    if name + "_per_km" in known:
        return name + "_per_km"
    branch = name.partition(".")[0]
    mine = [p.key for p in known.values() if p.branch == branch]
    if mine:
        hint = f"{branch} has {', '.join(mine)}"
    elif any(b.id == branch for b in profile.branches):
        hint = f"{branch} has no model data to change"
    else:
        hint = f"{branch} is not a branch of {profile.path}"
    raise BenchwalkError(
        f"{ERROR_OPTION} {name}: not a parameter of the network model ({hint}); "
        "see docs/as-built.md"
    )


def _checked(p: ModelParameter, number: float) -> float:
    """The true value an explicit model error sets, or one line saying what to write."""
    if p.scale == "absolute":
        if abs(number) > MAX_ABSOLUTE_POINTS:
            raise BenchwalkError(
                f"{ERROR_OPTION} {p.name}:{number:g}: for {p.key} the number is an offset in "
                f"percentage points; give one from -{MAX_ABSOLUTE_POINTS:g} to {MAX_ABSOLUTE_POINTS:g}"
            )
        return p.nominal + number
    if number <= 0 or number > MAX_FACTOR:
        raise BenchwalkError(
            f"{ERROR_OPTION} {p.name}:{number:g}: the factor must be above 0 and at most "
            f"{MAX_FACTOR:g} (1.2 = 20 % above the nameplate value)"
        )
    if p.nominal == 0:
        raise BenchwalkError(
            f"{ERROR_OPTION} {p.name}:{number:g}: {p.name} is 0 in the profile, so a factor "
            "cannot change it; pick another parameter"
        )
    return p.nominal * number


def draw(p: ModelParameter, seed: int) -> float:
    """The parameter's value drawn uniformly within ± its limit, from the seed and its name."""
    rng = np.random.default_rng([seed, zlib.crc32(p.name.encode("utf-8"))])
    u = float(rng.uniform(-1.0, 1.0))
    if p.scale == "absolute":
        return p.nominal + u * p.tolerance
    return p.nominal * (1.0 + u * p.tolerance / 100.0)


def as_built(
    profile: Profile, seed: int | None = None, factors: Mapping[str, float] | None = None
) -> AsBuilt:
    """The true network from a seed and/or explicit factors (see the module docstring).

    Raises ``BenchwalkError`` (one line naming the option) for an unknown parameter, a factor
    out of range, or a true network the load flow cannot model.
    """
    params = model_parameters(profile.branches)
    known = {p.name: p for p in params}
    applied: dict[str, AppliedValue] = {}
    if seed is not None:
        for p in params:
            applied[p.name] = AppliedValue(p, draw(p, seed), "drawn")
    for raw, number in (factors or {}).items():
        p = known[_resolve(raw, known, profile)]
        applied[p.name] = AppliedValue(p, _checked(p, number), "given")
    ordered = tuple(applied[p.name] for p in params if p.name in applied)
    return _build(profile, ordered, seed)


def from_options(profile: Profile, seed: int | str | None, model_errors: Iterable[str]) -> AsBuilt:
    """The true network from the command-line options ``--as-built`` and ``--model-error``."""
    factors = parse_model_errors(model_errors)
    return as_built(profile, None if seed is None else parse_seed(seed), factors)


def _build(profile: Profile, applied: tuple[AppliedValue, ...], seed: int | None) -> AsBuilt:
    branches = with_values(profile.branches, {a.parameter.name: a.value for a in applied})
    built = AsBuilt(branches, applied, seed)
    why = next(filter(None, map(_unphysical, branches)), None)
    try:
        element_models(built.profile(profile))
    except (ProfileError, ValueError) as exc:
        element_models(profile)  # a nameplate model that cannot be built says so itself
        why = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    if why is None and applied:
        try:  # the bench starts in the normal switch state: its load flow must converge
            ideal_readings(built.profile(profile), {})
        except SolverError:
            why = "its load flow does not converge with the switches in their normal state"
    if why is not None:
        option = ERROR_OPTION if any(a.origin == "given" for a in applied) else SEED_OPTION
        raise BenchwalkError(
            f"{option}: the as-built network is not one the load flow can model ({why}); "
            "choose smaller model errors"
        )
    return built


def _unphysical(branch: Branch) -> str | None:
    """What a changed value breaks of the loader's rules (docs/profile-format.md), if anything;
    the other rules hold under a positive factor."""
    m = branch.model
    if isinstance(m, TransformerParams):
        if m.ur_pct >= m.uk_pct:
            return f"{branch.id}: ur_pct {m.ur_pct:g} is not below uk_pct {m.uk_pct:g}"
        if m.tap_pct < -50:
            return f"{branch.id}: tap_pct {m.tap_pct:g} is below -50"
    return None


def from_meta(profile: Profile, session_meta: Mapping[str, Any]) -> AsBuilt | None:
    """The true network a session recorded under ``as_built`` in its journal meta (None when
    it ran on the nameplate network), for a resume on the same bench."""
    meta = session_meta.get("as_built")
    if not meta:
        return None
    known = {p.name: p for p in model_parameters(profile.branches)}
    applied = []
    for row in meta.get("parameters", ()):
        p = known.get(str(row.get("name")))
        if p is None:
            raise BenchwalkError(
                f"{profile.path}: the session ran an as-built network with {row.get('name')}, "
                "which this profile no longer has; resume with the profile it started with"
            )
        origin: Origin = "given" if row.get("origin") == "given" else "drawn"
        applied.append(AppliedValue(p, float(row["value"]), origin))
    seed = meta.get("seed")
    return _build(profile, tuple(applied), None if seed is None else int(seed))


def readings_on(true_profile: Profile) -> Callable[[Profile, dict[str, str]], BenchState]:
    """A ``readings`` function for the bench: the load flow of the true network, whatever
    profile the emulator holds (it keeps the nameplate one for everything else)."""

    def readings(_nameplate: Profile, states: dict[str, str]) -> BenchState:
        return ideal_readings(true_profile, states)

    return readings


__all__ = [
    "ERROR_OPTION",
    "SEED_OPTION",
    "AppliedValue",
    "AsBuilt",
    "as_built",
    "draw",
    "from_meta",
    "from_options",
    "parse_model_error",
    "parse_model_errors",
    "readings_on",
    "summary_of",
]
