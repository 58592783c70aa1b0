"""What every meter of the bench would read if it were perfect: the load flow seen through meters.

``ideal_readings(profile, switch_states)`` solves the network for that switch state (cached per
state, so calling it after every switching operation is cheap) and returns, for every meter,
every key of ``meas.quantities`` except the energy counters (those integrate ``p.T`` over time,
which the meter emulation does). Values are PRIMARY, bench-side SI units, in the meter's sign
convention: positive P/Q = power flowing from the meter's ``bus`` into its ``branch``.

Conventions:
- per-phase S = V I* (V phase-to-ground, I into the branch at the meter's bus);
- ``s.T`` follows the map's ``apparent_power``: "vector" = |sum of complex S_k|, "arithmetic" =
  sum of |S_k| (IEEE Std 1459-2010 names both);
- pf per phase = P/|S| carrying the sign of P (IEC convention); ``pf.T`` = p.T / s.T; where the
  apparent power is zero (no current, or a dead bus) pf reads 0, so pf * s = p always holds and
  a dead meter never shows a convincing unity power factor;
- ``i.N`` = |Ia + Ib + Ic| (the residual current a four-wire meter computes);
- angles in degrees, referred to the meter's own V_A (so ``v_ang.A`` = 0), in (-180, 180];
  an angle without a phasor (zero V_A or zero current) reads 0;
- ``f.T`` = the bench's nominal frequency on an energized bus, 0 on a dead one; a dead meter
  reads 0 everywhere. A voltage-only meter (branch None) reads 0 current and power.
"""

from __future__ import annotations

import weakref
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Protocol

import numpy as np

from ..model import Profile
from ..network.admittance import build_network
from ..network.elements import Element, element_models
from ..network.loadflow import Solution, solve
from ..network.readings import meter_phasors, meter_values
from ..network.topology import settled_states

_MAX_STATES = 256  # cached switch states per profile (a bench with 8 switches has 256)


class IdealReadings(Protocol):
    """What the meter emulation reads of a solved state: ``BenchState`` or a hand-made one.

    A ``phasors`` attribute like ``BenchState``'s is used when present.
    """

    @property
    def meters(self) -> Mapping[str, Mapping[str, float]]: ...


@dataclass(frozen=True)
class BenchState:
    """Ideal readings of every meter for one switch state.

    ``phasors`` holds each meter's (V, I) phase A-B-C phasors in its own sign convention, for
    emulation that distorts the phasors (wiring faults) and recomputes with ``meter_values``.
    Shared with the cache: treat the arrays as read-only (they are flagged so).
    """

    meters: dict[str, dict[str, float]]
    energized: dict[str, bool]
    solution: Solution
    phasors: dict[str, tuple[np.ndarray, np.ndarray]]


class _ProfileCache:
    def __init__(self, profile: Profile):
        self.models: dict[str, Element] = element_models(profile)
        self.states: dict[tuple[str, ...], BenchState] = {}


_CACHE: dict[int, _ProfileCache] = {}


def _cache_for(profile: Profile) -> _ProfileCache:
    entry = _CACHE.get(id(profile))
    if entry is None:
        entry = _ProfileCache(profile)
        _CACHE[id(profile)] = entry
        weakref.finalize(profile, _CACHE.pop, id(profile), None)
    return entry


def _compute(
    profile: Profile, states: Mapping[str, str], models: Mapping[str, Element]
) -> BenchState:
    net = build_network(profile, states, models)
    sol = solve(net)
    meters: dict[str, dict[str, float]] = {}
    phasors: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    for m in profile.meters:
        v, i = meter_phasors(profile, m, sol)
        live = sol.energized.get(m.bus, False)
        try:
            apparent = profile.meter_map(m.id).apparent_power
        except KeyError:
            apparent = (
                "arithmetic"  # map validation is meas.profile's job; keep the simulator usable
            )
        meters[m.id] = meter_values(
            v, i, apparent_power=apparent, frequency_hz=profile.bench.frequency_hz if live else 0.0
        )
        phasors[m.id] = (v, i)
    return BenchState(meters=meters, energized=dict(sol.energized), solution=sol, phasors=phasors)


def ideal_readings(profile: Profile, switch_states: Mapping[str, str]) -> BenchState:
    """Ideal primary readings of every meter for a switch state (id -> "open"/"closed").

    Switches missing from ``switch_states`` are in their ``normal`` state. Results are cached
    per profile object and effective switch state; the returned dicts are fresh copies.
    Raises ``ProfileError`` for a branch without a model and ``SolverError`` if the flow diverges.
    """
    entry = _cache_for(profile)
    key = tuple(settled_states(profile, switch_states).values())  # validates ids and words
    state = entry.states.get(key)
    if state is None:
        state = _compute(
            profile, dict(zip((s.id for s in profile.switches), key, strict=True)), entry.models
        )
        if len(entry.states) >= _MAX_STATES:
            entry.states.pop(next(iter(entry.states)))
        entry.states[key] = state
    return BenchState(
        meters={m: dict(vals) for m, vals in state.meters.items()},
        energized=dict(state.energized),
        solution=state.solution,
        phasors=dict(state.phasors),
    )


def dead_values(apparent_power: str = "arithmetic") -> dict[str, float]:
    """What a meter on a dead bus reads (all zero), for callers that need it without a profile."""
    z = np.zeros(3, dtype=complex)
    return meter_values(z, z, apparent_power=apparent_power, frequency_hz=0.0)
