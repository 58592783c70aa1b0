"""What every meter of the bench would read if it were perfect: the load flow seen through meters.

Pure (no I/O, no simulation): the simulated bench (``meas.sim``) emulates meters from it and
the dataset's ``model`` table records it, so "measured against model" is one join.

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

import numpy as np

from ..errors import BenchwalkError
from ..model import Meter, Profile
from ..quantities import LL_PAIRS, PHASES
from .admittance import build_network
from .elements import Element, element_models
from .loadflow import Solution, solve
from .topology import settled_states

_MAX_STATES = 256  # cached switch states per profile (a bench with 8 switches has 256)


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


def _wrap_deg(a: np.ndarray) -> np.ndarray:
    """Degrees wrapped to (-180, 180]."""
    w = np.mod(a + 180.0, 360.0) - 180.0
    return np.where(w == -180.0, 180.0, w)


def phase_values(
    v: np.ndarray, i: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """|V|, |I|, P and Q per phase (S = V I*): the per-phase core of ``meter_values``."""
    s = v * np.conj(i)
    return np.abs(v), np.abs(i), s.real, s.imag


def meter_values(
    v: np.ndarray, i: np.ndarray, *, apparent_power: str, frequency_hz: float
) -> dict[str, float]:
    """Every quantity a three-phase meter shows for phase-to-ground V and current I phasors.

    Pure function of the phasors; ``frequency_hz`` is what ``f.T`` reads (0 for a dead bus).
    """
    v = np.asarray(v, dtype=complex)
    i = np.asarray(i, dtype=complex)
    v_mag, i_mag, p, q = phase_values(v, i)
    s = p + 1j * q
    sa = np.abs(s)
    out: dict[str, float] = {}
    for k, ph in enumerate(PHASES):
        out[f"v_ln.{ph}"] = float(v_mag[k])
    for pair in LL_PAIRS:
        a, b = PHASES.index(pair[0]), PHASES.index(pair[1])
        out[f"v_ll.{pair}"] = float(abs(v[a] - v[b]))
    for k, ph in enumerate(PHASES):
        out[f"i.{ph}"] = float(i_mag[k])
    out["i.N"] = float(abs(i.sum()))
    s_total = float(abs(s.sum())) if apparent_power == "vector" else float(sa.sum())
    p_total = float(p.sum())
    for k, ph in enumerate(PHASES):
        out[f"p.{ph}"] = float(p[k])
        out[f"q.{ph}"] = float(q[k])
        out[f"s.{ph}"] = float(sa[k])
        out[f"pf.{ph}"] = float(p[k] / sa[k]) if sa[k] > 0 else 0.0
    out["p.T"] = p_total
    out["q.T"] = float(q.sum())
    out["s.T"] = s_total
    out["pf.T"] = p_total / s_total if s_total > 0 else 0.0
    out["f.T"] = float(frequency_hz)
    ref = np.angle(v[0], deg=True) if abs(v[0]) > 0 else 0.0
    v_ang = _wrap_deg(np.angle(v, deg=True) - ref)
    i_ang = _wrap_deg(np.angle(i, deg=True) - ref)
    for k, ph in enumerate(PHASES):
        out[f"v_ang.{ph}"] = float(v_ang[k]) if abs(v[k]) > 0 and abs(v[0]) > 0 else 0.0
        out[f"i_ang.{ph}"] = float(i_ang[k]) if abs(i[k]) > 0 and abs(v[0]) > 0 else 0.0
    out["v_ang.A"] = 0.0
    return out


def meter_phasors(profile: Profile, meter: Meter, sol: Solution) -> tuple[np.ndarray, np.ndarray]:
    """(V at the meter's bus, I into its branch at that bus), phase A-B-C."""
    v = sol.v[meter.bus]
    if meter.branch is None:
        return v, np.zeros(3, dtype=complex)
    try:
        br = profile.branch(meter.branch)
    except KeyError:
        raise BenchwalkError(
            f"meter {meter.id!r}: branch {meter.branch!r} is not in the profile"
        ) from None
    if meter.bus not in br.buses:
        raise BenchwalkError(
            f"meter {meter.id!r}: bus {meter.bus!r} is not an end of branch "
            f"{br.id!r} ({', '.join(br.buses)}); fix the meter's bus or branch"
        )
    return v, sol.current_into(br.id, meter.bus, br.from_bus)


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
