"""Switching configurations: those a sequence will capture, and every one its switches allow.

A step's configuration is what the switches are in when it captures: every switch starts in the
state the first step expects (else its normal state) and each step's ``operate`` and
``expect`` change it, as the walk would. The configurations the switches allow are every
open/closed combination that energizes at least one metered branch.
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping, Sequence

from ..model import Profile
from ..network.admittance import build_network
from ..network.elements import element_models
from .observations import StepConfig


def sequence_configs(profile: Profile, skip: Sequence[str] = ()) -> list[StepConfig]:
    """The capture steps of the profile's sequence with their switch states, in order."""
    state = {s.id: s.normal for s in profile.switches}
    out = []
    for step in profile.steps:
        state.update(step.operate)
        state.update(step.expect)
        if step.capture is None or step.id in skip:
            continue
        out.append(StepConfig(step.id, dict(state), captures=step.capture.snapshots))
    return out


def describe(switches: Mapping[str, str]) -> str:
    return ", ".join(f"{k} {v}" for k, v in sorted(switches.items()))


def allowed_configs(profile: Profile, captures: int = 5) -> list[StepConfig]:
    """Every switch combination under which some meter sees current (named by what is closed)."""
    models = element_models(profile)
    ids = [s.id for s in profile.switches]
    metered = {m.branch for m in profile.meters if m.branch is not None}
    out = []
    for states in itertools.product(("open", "closed"), repeat=len(ids)):
        sw = dict(zip(ids, states, strict=True))
        net = build_network(profile, sw, models)
        live = (set(net.branch_buses) - net.open_branches) & metered
        if not live:
            continue
        closed = [k for k, v in sw.items() if v == "closed"] or ["nothing"]
        out.append(StepConfig("closed: " + " ".join(closed), sw, captures=captures))
    return out
