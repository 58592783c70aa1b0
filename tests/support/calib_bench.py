"""Synthetic campaigns on an as-built demo bench, for the calibration tests and benchmark.

The "true" bench is the demo profile with some model values changed (``with_values``); its
meters read the true load flow (``meas.sim.readings.ideal_readings``) through a systematic gain
per meter and quantity kind, drawn uniformly within the meter's class limit, and a seeded
random repeatability per capture. The configurations are the demo sequence's capture steps.
Invented data, for tests only.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import replace
from pathlib import Path

import numpy as np

from meas.calib.observations import (
    FIT_QUANTITIES,
    GAIN_KIND,
    Observations,
    RawRow,
    StepConfig,
    pooled_observations,
)
from meas.calib.select import observable
from meas.calib.steps import sequence_configs
from meas.model import Profile
from meas.network.parameters import model_parameters, with_values
from meas.profile import load_profile
from meas.sim.readings import ideal_readings
from meas.tolerance import class_spec

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"


def demo_profile() -> Profile:
    return load_profile(DEMO)


def as_built(profile: Profile, factors: Mapping[str, float]) -> Profile:
    """The profile with parameters ``BRANCH.key`` multiplied by the given factors."""
    nominal = {p.name: p.nominal for p in model_parameters(profile.branches)}
    values = {k: nominal[k] * f for k, f in factors.items()}
    return replace(profile, branches=with_values(profile.branches, values))


def random_as_built(profile: Profile, rng: np.random.Generator, names: Sequence[str]) -> Profile:
    """A true bench whose named parameters are off their profile values within tolerance."""
    by_name = {p.name: p for p in model_parameters(profile.branches)}
    factors = {}
    for n in names:
        p = by_name[n]
        factors[n] = math.exp(rng.normal(0.0, p.std / abs(p.nominal)))
    return as_built(profile, factors)


def live_configs(profile: Profile, skip: Sequence[str] = ()) -> list[StepConfig]:
    """The demo's capture steps that energize something beyond the source busbar."""
    out = []
    for c in sequence_configs(profile, skip):
        seen = observable(profile, c)
        if sum(len(v) for v in seen.values()) > len([m for m in seen if seen[m]]):
            out.append(c)
    return out


def synthesize(
    nominal: Profile,
    true: Profile,
    configs: Sequence[StepConfig],
    seed: int,
    *,
    repeatability: float = 2e-4,
    captures: int = 5,
    gain_of_class: float = 1.0,
    emf_drift: Sequence[float] | None = None,
) -> tuple[Observations, dict[tuple[str, str], float]]:
    """Readings of the true bench as the fit sees them, and the true meter gains."""
    rng = np.random.default_rng(seed)
    gains: dict[tuple[str, str], float] = {}
    for m in nominal.meters:
        for kind in ("v", "i", "p", "q"):
            a = class_spec(kind, getattr(m.classes, kind)).main_pct / 100.0 * gain_of_class
            gains[(m.id, kind)] = float(rng.uniform(-a, a))
    rows: list[RawRow] = []
    for k, c in enumerate(configs):
        prof = true
        if emf_drift is not None:
            src = [b for b in true.branches if b.kind == "source"][0]
            assert src.model is not None
            v = src.model.v_ll * (1.0 + emf_drift[k])  # type: ignore[union-attr]
            prof = replace(true, branches=with_values(true.branches, {f"{src.id}.v_ll": v}))
        state = ideal_readings(prof, c.switches)
        seen = observable(nominal, c)
        for m in nominal.meters:
            for qty in FIT_QUANTITIES:
                if qty not in seen[m.id]:
                    continue
                for ph in ("A", "B", "C"):
                    ideal = state.meters[m.id][f"{qty}.{ph}"]
                    g = gains[(m.id, GAIN_KIND[qty])]
                    noise = rng.normal(0.0, repeatability, captures)
                    samples = tuple(float(x) for x in ideal * (1 + g) * (1 + noise))
                    rows.append(RawRow(k, m.id, qty, ph, samples))
    configs = [replace(c, captures=captures) for c in configs]
    return pooled_observations(nominal, configs, rows), gains
