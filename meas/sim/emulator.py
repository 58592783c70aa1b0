"""The simulated bench without sockets: PLC, transients, energy counters, faults and noise.

``BenchEmulator(profile)`` answers what every meter reports at a time ``t``: the PLC moves the
switches, the load flow gives the steady state of each switch configuration (cached), the
transient carries the readings from one steady state to the next, and each meter applies its
wiring faults and noise. ``meas.sim.bench.SimulatedBench`` serves these values over Modbus.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Mapping, Sequence

import numpy as np

from ..errors import BenchwalkError
from ..model import Profile, SwitchState
from ..scaling import to_primary
from ..snapshot import Snapshot
from .clock import CycleClock
from .faults import Fault, find, validate_faults
from .meters import Phasors, phasors_from_ideal, snapshot_of, values_from_phasors
from .plc import PlcSim, Transient, settle_settings
from .readings import IdealReadings, ideal_readings


def _phasors(state: IdealReadings, meter_id: str, ideal: Mapping[str, float], f0: float) -> Phasors:
    """The load flow's own phasors when it gives them, else rebuilt from magnitudes and angles."""
    given = getattr(state, "phasors", {}).get(meter_id)
    if given is None:
        return phasors_from_ideal(ideal, f0)
    v, i = given
    return Phasors(
        np.array(v, dtype=complex), np.array(i, dtype=complex), float(ideal.get("f.T", f0))
    )


class BenchEmulator:
    """The bench's state through time, pure of I/O. ``readings`` replaces the load flow (tests
    with hand-made ideal readings); ``clock`` is the time source (seconds, monotonic).

    On a ``CycleClock`` each meter's noise comes from a generator seeded with (seed, meter,
    cycle), so the values of a cycle do not depend on how often ``compute`` ran before it;
    on any other clock one generator seeded once serves every draw."""

    def __init__(
        self,
        profile: Profile,
        faults: Sequence[Fault] = (),
        *,
        seed: int | None = None,
        noise: bool = True,
        readings: Callable[[Profile, dict[str, str]], IdealReadings] | None = None,
        clock: Callable[[], float] = time.monotonic,
    ):
        validate_faults(profile, faults)
        self.profile = profile
        self.noise = noise
        seed = profile.sim.get("seed") if seed is None else seed
        self.rng = np.random.default_rng(seed)
        # the per-cycle noise streams' root: the seed, or fresh entropy when none is given
        entropy = np.random.SeedSequence().entropy if seed is None else seed
        self._entropy = int(entropy)  # type: ignore[arg-type]
        self._readings = readings
        self.clock = clock
        self.update_hz = float(profile.sim.get("update_hz", 10))
        if not math.isfinite(self.update_hz) or self.update_hz < 10:
            raise BenchwalkError(
                f"{profile.path}: sim.update_hz must be at least 10, got {self.update_hz:g}"
            )
        self.tau, self.transient_kind = settle_settings(profile)
        self.plc = PlcSim(profile, t=clock())
        self._faults: tuple[Fault, ...] = tuple(faults)
        self._cache: dict[tuple, dict[str, Phasors]] = {}
        self._transient: Transient | None = None
        self._energy = {m.id: [0.0, 0.0] for m in profile.meters}
        self._last_pt = {m.id: 0.0 for m in profile.meters}
        self._last_t: float | None = None
        self.values: dict[
            str, dict[str, float]
        ] = {}  # last written, engineering units, meter's side
        self.loads: int = 0  # load flows computed (cache misses)

    # ------------------------------------------------------------------ faults

    @property
    def faults(self) -> tuple[Fault, ...]:
        return self._faults

    def set_faults(self, faults: Sequence[Fault]) -> None:
        """Change the injected faults while running (``frozen`` freezes from this moment)."""
        validate_faults(self.profile, faults)
        self._admit(faults)
        self._faults = tuple(faults)
        self._faults_changed()

    def _admit(self, faults: Sequence[Fault]) -> None:
        """Refuse faults that cannot start now (a served bench has some); none here."""

    def _faults_changed(self) -> None:
        """Hook for what follows the faults (a served bench's unit gates)."""

    # ------------------------------------------------------------------ switches and readings

    def switch_states(self) -> dict[str, SwitchState]:
        return self.plc.states()

    def operate_by_hand(self, switch_id: str, state: SwitchState) -> None:
        """The simulated technician operates a switch at its panel (not a Modbus write)."""
        self.plc.operate_by_hand(switch_id, state, self.clock())

    def _ideal(self, states: Mapping[str, str]) -> dict[str, Phasors]:
        key = tuple(sorted(states.items()))
        hit = self._cache.get(key)
        if hit is None:
            bench_state = (self._readings or ideal_readings)(self.profile, dict(states))
            hit = {
                mid: _phasors(bench_state, mid, r, self.profile.bench.frequency_hz)
                for mid, r in bench_state.meters.items()
            }
            self._cache[key] = hit
            self.loads += 1
        return hit

    def steady(self) -> dict[str, Phasors]:
        """The ideal phasors of every meter for the present switch states (no transient)."""
        return self._ideal(self.plc.states())

    def compute(self, t: float) -> dict[str, dict[str, float]]:
        """Advance PLC, transient and energy counters to ``t``; the values every meter reports.

        Frozen meters keep their last values. Pure of I/O: ``update`` writes the result.
        """
        changed = self.plc.advance(t)
        if self._transient is None:
            self._transient = Transient(self.transient_kind, self.tau, self.steady(), t)
        elif changed:  # the transient starts when the contacts moved, even if asked later
            self._transient.retarget(self.steady(), min(self.plc.changed_at, t))
        now = self._transient.at(t)
        dt_h = 0.0 if self._last_t is None else max(t - self._last_t, 0.0) / 3600.0
        self._last_t = t
        out = {}
        for index, meter in enumerate(self.profile.meters):
            if find(meter.id, self._faults, "frozen") and meter.id in self.values:
                out[meter.id] = self.values[meter.id]
                continue
            e = self._energy[meter.id]
            p = self._last_pt[meter.id]
            if p > 0:
                e[0] += p * dt_h
            else:
                e[1] -= p * dt_h
            vals = values_from_phasors(
                self.profile,
                meter.id,
                now[meter.id],
                self._faults,
                self._noise_rng(index),
                self.noise,
                (e[0], e[1]),
            )
            self._last_pt[meter.id] = (
                to_primary(meter, "p.T", vals["p.T"]) if "p.T" in vals else 0.0
            )
            out[meter.id] = vals
        return out

    def _noise_rng(self, meter_index: int) -> np.random.Generator:
        """The generator of one meter's noise now: per (seed, meter, cycle) on a cycle clock."""
        if isinstance(self.clock, CycleClock):
            return np.random.default_rng([self._entropy, meter_index, self.clock.cycle])
        return self.rng

    def snapshot(self, t: float, seq: int = 0, previous: Snapshot | None = None) -> Snapshot:
        """Advance to ``t`` and return what a poller would decode then, without sockets.

        For testing settle and checks over many snapshots through real transients. Does not
        write registers; do not mix with a running update loop.
        """
        self.values = self.compute(t)
        return snapshot_of(
            self.profile,
            self.values,
            self._faults,
            seq,
            self.plc.states(),
            t_mono=t,
            previous=previous,
        )
