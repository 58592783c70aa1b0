"""Which model parameters a calibration adjusts: ``BRANCH.key`` names, globs allowed.

The default is every parameter of the model (each has a stated or default tolerance, see
``meas.network.parameters``), except a relative one whose profile value is zero: a multiplier
of zero stays zero, so it is left at the profile value and the report says so.
"""

from __future__ import annotations

import fnmatch
from collections.abc import Sequence

from ..errors import BenchwalkError
from ..model import Profile
from ..network.parameters import ModelParameter, model_parameters


def fittable(p: ModelParameter) -> bool:
    return p.scale == "absolute" or (p.nominal != 0.0 and p.tolerance > 0.0)


def select_parameters(profile: Profile, patterns: Sequence[str] = ()) -> list[ModelParameter]:
    """The parameters named by ``patterns`` (all fittable ones when empty), in model order."""
    every = list(model_parameters(profile.branches))
    names = [p.name for p in every]
    if not patterns:
        return [p for p in every if fittable(p)]
    chosen: set[str] = set()
    for pat in patterns:
        hits = fnmatch.filter(names, pat)
        if not hits:
            kind = (
                "glob matches no parameter"
                if any(c in pat for c in "*?[")
                else "is not a parameter"
            )
            raise BenchwalkError(
                f"--param {pat!r} {kind} of the model in {profile.path}; "
                f"its parameters are {', '.join(names)}"
            )
        chosen.update(hits)
    out = [p for p in every if p.name in chosen]
    zero = [p.name for p in out if not fittable(p)]
    if zero:
        raise BenchwalkError(
            f"--param {zero[0]}: its profile value is 0, so a relative tolerance cannot move it; "
            "give it a nonzero value in the profile or leave it out"
        )
    return out
