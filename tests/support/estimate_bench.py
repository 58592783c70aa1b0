"""Synthetic captures for the estimator's tests: a true bench that is not the nameplate model.

The true network is the demo profile with every model parameter moved within its tolerance by
a seeded draw (``meas.network.parameters.with_values``); readings come from the simulated
bench's load flow and meter emulation (``meas.sim``: per-phase noise and wiring faults), and
each meter then gets a voltage gain and a current gain drawn uniformly within its class limits
(the systematic part of a class error, which the simulator leaves out).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path

import numpy as np
import pytest

from meas.estimate.results import Estimate
from meas.model import Profile
from meas.network.parameters import model_parameters, with_values
from meas.profile import load_profile
from meas.sim.faults import Fault
from meas.sim.meters import snapshot_from_sim
from meas.sim.readings import ideal_readings
from meas.snapshot import Snapshot
from meas.tolerance import class_spec

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"
_V = {"v_ln", "v_ll"}
_I = {"i"}
_PQ = {"p", "q", "s"}


def demo() -> Profile:
    return load_profile(DEMO)


def as_built(profile: Profile, seed: int) -> Profile:
    """The profile with every parameter drawn uniformly within ± its tolerance (seeded)."""
    rng = np.random.default_rng(seed)
    values = {}
    for p in model_parameters(profile.branches):
        if p.scale == "absolute":
            values[p.name] = p.nominal + rng.uniform(-1, 1) * p.limit
        else:
            values[p.name] = p.nominal * (1 + rng.uniform(-1, 1) * p.tolerance / 100)
    return dataclasses.replace(profile, branches=with_values(profile.branches, values))


def meter_gains(profile: Profile, seed: int) -> dict[str, tuple[float, float]]:
    """Per meter (voltage gain, current gain), uniform within the class limits (seeded)."""
    rng = np.random.default_rng(seed + 7919)
    out = {}
    for m in profile.meters:
        av = class_spec("v", m.classes.v).main_pct / 100
        ai = class_spec("i", m.classes.i).main_pct / 100
        out[m.id] = (1 + rng.uniform(-av, av), 1 + rng.uniform(-ai, ai))
    return out


def _with_gains(snap: Snapshot, gains: Mapping[str, tuple[float, float]]) -> Snapshot:
    blocks = {}
    for mid, b in snap.meters.items():
        gv, gi = gains.get(mid, (1.0, 1.0))
        vals = {}
        for k, x in b.values.items():
            q = k.split(".")[0]
            f = gv if q in _V else gi if q in _I else gv * gi if q in _PQ else 1.0
            vals[k] = x * f
        blocks[mid] = dataclasses.replace(b, values=vals)
    return dataclasses.replace(snap, meters=blocks)


def capture(
    true: Profile,
    states: Mapping[str, str],
    faults: Sequence[Fault],
    rng: np.random.Generator,
    gains: Mapping[str, tuple[float, float]],
    n: int = 3,
) -> list[Snapshot]:
    """``n`` snapshots of one steady switch state, as the poller would decode them."""
    ideal = ideal_readings(true, dict(states))
    return [
        _with_gains(snapshot_from_sim(true, states, faults, rng, i, ideal=ideal), gains)
        for i in range(n)
    ]


def sequence_states(profile: Profile) -> Iterator[tuple[str, dict[str, str]]]:
    """(step id, switch states) of every capturing step of the profile's sequence, in order."""
    states = {s.id: s.normal for s in profile.switches}
    for st in profile.steps:
        states.update(st.operate)
        states.update(st.expect)
        if st.capture is not None and st.kind != "note" and st.kind != "hold":
            yield st.id, dict(states)


# the simulator's fault kinds (meas.sim.faults) and the cause words the estimator gives them
FAULT_CAUSE = {
    "vt-ratio": "vt_ratio",
    "ct-ratio": "ct_ratio",
    "ct-reversed": "ct_reversed",
    "phases-swapped": "phases_swapped",
}


def fault_matrix(meters: list[str]) -> list[str]:
    """Issue 11's matrix per meter: VT ratio 0.9 and 1.1, CT ratio 0.8, a reversed CT per phase,
    a swapped pair per pair (as ``--fault`` texts)."""
    out = []
    for m in meters:
        out += [f"vt-ratio:{m}:0.9", f"vt-ratio:{m}:1.1", f"ct-ratio:{m}:0.8"]
        out += [f"ct-reversed:{m}:{p}" for p in "ABC"]
        out += [f"phases-swapped:{m}:{p}" for p in ("A-B", "B-C", "C-A")]
    return out


def assert_named_or_uncovered(
    e: Estimate, fault: Fault, clean: Estimate, where: tuple[object, ...]
) -> bool:
    """Issue 11's contract for one fault in one capture: never two meters, never a wrong
    meter; where the clean capture's coverage said the fault is detectable, it is named on its
    meter with its cause (and a ratio with its factor within 0.02). True when it was named."""
    arg = "" if fault.kind in ("vt-ratio", "ct-ratio") else str(fault.arg).replace("-", "")
    label = FAULT_CAUSE[fault.kind] + (f":{arg}" if arg else "")
    where = (*where, [x.sentence for x in e.findings])
    assert len(e.findings) <= 1, where  # never two meters for one fault
    for x in e.findings:
        assert fault.meter in x.meters, where  # never a wrong meter
    cov = clean.coverage_of(fault.meter, label)
    if cov is None or not cov.detectable:
        for x in e.findings:  # a tie may name the right meter among others, never alone wrong
            assert x.ambiguous or x.meters == (fault.meter,), where
        return False
    assert e.findings, where  # coverage said it can be seen here
    x = e.findings[0]
    assert x.meters == (fault.meter,), where
    assert x.cause.startswith(FAULT_CAUSE[fault.kind]), where
    if arg:
        assert x.cause.endswith(arg), where
    else:
        factor = float(str(fault.arg))
        assert float(x.cause.split(":")[1]) == pytest.approx(factor, abs=0.02), where
    return True
