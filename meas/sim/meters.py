"""What each simulated meter reports: ideal phasors -> wiring faults -> noise -> derived values.

Pure functions, no I/O. A real meter measures per-phase voltage and current phasors and
computes everything else from them, so this module does the same: it rebuilds the phasors
from the ideal readings, applies the wiring faults to the meter's inputs, adds noise to the
measured magnitudes and to the V-I angle, and only then derives P, Q, S, PF, the neutral
current, line-to-line voltages and angles. Meter-internal sums (``p.T = p.A + p.B + p.C``)
therefore stay exact up to register resolution, even with noise and faults. The derivation
itself is ``meas.network.readings.meter_values``, shared with the ideal load-flow readings.

Noise model (relied on by the checks; see ``docs/faults.md``): per phase, the voltage and
current magnitudes get Gaussian relative errors with sigma = 0.1 x the class limit of ``v``
and ``i`` (``Meter.classes``), and the current angle gets a Gaussian error with sigma = 0.1 x
``delta``, where ``delta = (class p limit) / sqrt(3)`` rad is the angle error that alone would
use up the active-power class limit at PF 0.5 (dP/P = tan(phi) d phi, tan 60 deg = sqrt(3)).
Every error is clipped at 0.5 x its limit: an assumption that a healthy meter sits well inside
its class (common practice for in-service meters; from memory). ``noisy:M:k`` multiplies sigma
and clip by k. ``offset:M:KEY:AMOUNT`` adds AMOUNT (primary unit) to that one reported value,
after noise and derivation. Frequency: nominal + Gaussian, sigma 0.002 Hz, clipped at 0.01 Hz (x k with ``noisy``).
"""

from __future__ import annotations

import math
import re
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from functools import lru_cache

import numpy as np

from ..modbus.codec import decode, encode
from ..model import Meter, Profile, RegisterMap
from ..quantities import PHASES
from ..scaling import to_primary, to_secondary
from ..snapshot import CommState, MeterBlock, Quality, Snapshot
from .faults import PHASE_INDEX, PLC_KINDS, WIRING, Fault, faults_for, find, offset_of
from .readings import IdealReadings, ideal_readings
from .readings import meter_values as derive_values  # the one derivation from phasors

SIGMA_OF_LIMIT = 0.1
CLIP_OF_LIMIT = 0.5
F_SIGMA_HZ = 0.002
F_CLIP_HZ = F_SIGMA_HZ / SIGMA_OF_LIMIT * CLIP_OF_LIMIT  # 0.01 Hz: the same 0.5/0.1 ratio
_DEG = math.pi / 180.0


@dataclass(frozen=True)
class Phasors:
    """Per-phase V and I phasors (primary V and A) as the meter's inputs see them."""

    v: np.ndarray  # complex, shape (3,), phases A, B, C
    i: np.ndarray  # complex, shape (3,)
    f: float


@lru_cache(maxsize=64)
def class_limit(designation: str) -> float:
    """Class designation ("0.5S", "1", "2") -> limit as a fraction of reading (0.005, ...)."""
    m = re.fullmatch(r"\s*(\d+(?:\.\d+)?)\s*S?\s*", designation, flags=re.IGNORECASE)
    if not m:
        raise ValueError(f"accuracy class {designation!r} is not a number with optional S")
    return float(m.group(1)) / 100.0


@lru_cache(maxsize=64)
def _limits(v: str, i: str, p: str) -> np.ndarray:
    """Class limits of the ten noisy inputs; frequency's 'limit' is set so sigma = F_SIGMA_HZ."""
    ang = class_limit(p) / math.sqrt(3.0)
    out = np.array(
        [class_limit(v)] * 3 + [class_limit(i)] * 3 + [ang] * 3 + [F_SIGMA_HZ / SIGMA_OF_LIMIT]
    )
    out.flags.writeable = False
    return out


def phasors_from_ideal(ideal: Mapping[str, float], frequency_hz: float) -> Phasors:
    """Rebuild the phasors from magnitudes and angles (angles referred to the meter's V_A).

    Missing angles fall back to a positive-sequence voltage set and the current angle
    implied by P and Q, so a solver that leaves them out still yields consistent phasors.
    """
    v = np.zeros(3, dtype=complex)
    cur = np.zeros(3, dtype=complex)
    for n, ph in enumerate(PHASES):
        va = ideal.get(f"v_ang.{ph}", -120.0 * n)
        vm = ideal.get(f"v_ln.{ph}", 0.0)
        v[n] = vm * np.exp(1j * va * _DEG)
        im = ideal.get(f"i.{ph}", 0.0)
        if f"i_ang.{ph}" in ideal:
            ia = ideal[f"i_ang.{ph}"]
        else:
            ia = va - math.degrees(math.atan2(ideal.get(f"q.{ph}", 0.0), ideal.get(f"p.{ph}", 0.0)))
        cur[n] = im * np.exp(1j * ia * _DEG)
    return Phasors(v, cur, float(ideal.get("f.T", frequency_hz)))


# Below this fraction of the old voltage a meter losing its supply stops reading frequency
# (meters need a minimum voltage to track frequency; common practice, the figure is ours).
F_CUTOFF_REMAINING = 0.05


def blend(old: Phasors, new: Phasors, remaining: float) -> Phasors:
    """``new + (old - new) * remaining``: the state part-way through a transient.

    Frequency is not blended: a meter reads the system frequency while it has voltage and
    0 once its supply has decayed, never a value in between.
    """
    f = new.f if new.f > 0 else (old.f if remaining > F_CUTOFF_REMAINING else 0.0)
    return Phasors(
        new.v + (old.v - new.v) * remaining,
        new.i + (old.i - new.i) * remaining,
        f,
    )


def apply_wiring(ph: Phasors, faults: Sequence[Fault]) -> Phasors:
    """What the meter's inputs see with the wiring faults (in command-line order)."""
    v, cur = ph.v.copy(), ph.i.copy()
    for f in faults:
        if f.kind == "ct-reversed":
            cur[PHASE_INDEX[str(f.arg)]] *= -1.0
        elif f.kind == "phases-swapped":
            a, b = (PHASE_INDEX[p] for p in str(f.arg).split("-"))
            cur[a], cur[b] = cur[b], cur[a]
        elif f.kind == "vt-ratio":
            v *= float(f.arg)  # type: ignore[arg-type]
        elif f.kind == "ct-ratio":
            cur *= float(f.arg)  # type: ignore[arg-type]
    return Phasors(v, cur, ph.f)


def add_noise(ph: Phasors, meter: Meter, rng: np.random.Generator, factor: float = 1.0) -> Phasors:
    """Class-consistent measurement noise on |V|, |I| and the V-I angle (see module docstring)."""
    lim = _limits(meter.classes.v, meter.classes.i, meter.classes.p) * factor
    # one draw for all ten errors: |V| x3, |I| x3, V-I angle x3, frequency
    e = np.clip(
        rng.standard_normal(10) * lim * SIGMA_OF_LIMIT, -lim * CLIP_OF_LIMIT, lim * CLIP_OF_LIMIT
    )
    ev, ei, ea = e[0:3], e[3:6], e[6:9]
    f = ph.f + float(e[9]) if ph.f > 0 else 0.0
    return Phasors(ph.v * (1.0 + ev), ph.i * (1.0 + ei) * np.exp(1j * ea), f)


def values_from_phasors(
    profile: Profile,
    meter_id: str,
    ideal: Phasors,
    faults: Sequence[Fault],
    rng: np.random.Generator,
    noise: bool = True,
    energy_wh: tuple[float, float] = (0.0, 0.0),
) -> dict[str, float]:
    """Reported values (engineering units, the meter's own side) for the map's keys.

    ``energy_wh`` = (imported, exported) primary Wh counters, kept by the caller.
    """
    meter = profile.meter(meter_id)
    rmap = profile.maps[meter.map_id]
    mine = faults_for(meter_id, faults)
    ph = apply_wiring(ideal, [f for f in mine if f.kind in WIRING])
    if noise:
        loud = find(meter_id, mine, "noisy")
        ph = add_noise(ph, meter, rng, float(loud.arg) if loud else 1.0)  # type: ignore[arg-type]
    primary = derive_values(ph.v, ph.i, apparent_power=rmap.apparent_power, frequency_hz=ph.f)
    primary["e_imp.T"], primary["e_exp.T"] = energy_wh
    for f in mine:
        if f.kind == "offset":
            # after the derivation: one register is off (a zero error or a bad transducer
            # output), the meter's other values and its own sums are not
            key, amount = offset_of(f)
            if key in primary:
                primary[key] += amount
    if meter.reports == "primary":
        return {r.key: primary[r.key] for r in rmap.registers}
    return {r.key: to_secondary(meter, r.key, primary[r.key]) for r in rmap.registers}


def meter_values(
    profile: Profile,
    meter_id: str,
    ideal: Mapping[str, float],
    faults: Sequence[Fault],
    rng: np.random.Generator,
    noise: bool = True,
) -> dict[str, float]:
    """What the meter would report for these ideal primary readings (its own side, its keys).

    Energy counters are passed through from ``ideal`` ("e_imp.T", "e_exp.T", primary Wh).
    """
    ph = phasors_from_ideal(ideal, profile.bench.frequency_hz)
    energy = (float(ideal.get("e_imp.T", 0.0)), float(ideal.get("e_exp.T", 0.0)))
    return values_from_phasors(profile, meter_id, ph, faults, rng, noise, energy)


def register_roundtrip(rmap: RegisterMap, values: Mapping[str, float]) -> dict[str, float]:
    """The values as a poller decodes them after ``encode`` (resolution, integer clipping)."""
    return {r.key: decode(r, encode(r, values[r.key])) for r in rmap.registers if r.key in values}


def comm_outcome(meter: Meter, faults: Sequence[Fault]) -> tuple[Quality, int | None, float, str]:
    """(quality, exception code, latency s, error line) of one read under communication faults."""
    if find(meter.id, faults, "offline"):
        return Quality.TIMEOUT, None, math.nan, f"no answer within {meter.timeout_s:g} s"
    exc = find(meter.id, faults, "exception")
    if exc:
        code = int(exc.arg)  # type: ignore[arg-type]
        return Quality.EXCEPTION, code, 0.0, f"Modbus exception code {code}"
    slow = find(meter.id, faults, "slow")
    if slow:
        delay = float(slow.arg)  # type: ignore[arg-type]
        if delay >= meter.timeout_s:
            return Quality.TIMEOUT, None, math.nan, f"no answer within {meter.timeout_s:g} s"
        return Quality.OK, None, delay, ""
    return Quality.OK, None, 0.0, ""


def snapshot_of(
    profile: Profile,
    reported: Mapping[str, Mapping[str, float] | None],
    faults: Sequence[Fault],
    seq: int,
    switch_states: Mapping[str, str],
    *,
    t_mono: float | None = None,
    previous: Snapshot | None = None,
    time_utc: datetime | None = None,
) -> Snapshot:
    """The Snapshot a poller would decode from these reported (meter-side) values.

    Values go through the registers (resolution, clipping) and back to primary; comm faults
    give the matching qualities. ``None`` for a meter repeats its block from ``previous``.
    """
    now = time_utc or datetime.now(UTC)
    blocks: dict[str, MeterBlock] = {}
    for meter in profile.meters:
        rmap = profile.maps[meter.map_id]
        keys = [r.key for r in rmap.registers]
        prev = previous.meters.get(meter.id) if previous is not None else None
        quality, code, latency, error = comm_outcome(meter, faults)
        if quality is not Quality.OK:
            blocks[meter.id] = MeterBlock(
                meter.id,
                dict.fromkeys(keys, math.nan),
                dict.fromkeys(keys, quality),
                CommState.FAILING,
                exception_code=code,
                error=f"{meter.id}: {error}",
                last_good_utc=prev.last_good_utc if prev else None,
                error_count=(prev.error_count + 1) if prev else 1,
                latency_s=latency,
            )
            continue
        mine = reported.get(meter.id)
        if mine is None and prev is not None:
            values = dict(prev.values)
        else:
            decoded = register_roundtrip(rmap, mine or {})
            values = {k: to_primary(meter, k, v) for k, v in decoded.items()}
        blocks[meter.id] = MeterBlock(
            meter.id,
            values,
            dict.fromkeys(values, Quality.OK),
            CommState.OK,
            last_good_utc=now,
            latency_s=latency,
        )
    return Snapshot(
        seq=seq,
        time_utc=now,
        t_mono=time.monotonic() if t_mono is None else t_mono,
        meters=blocks,
        switches=_reported_switches(profile, switch_states, faults),
    )


def _reported_switches(
    profile: Profile, switch_states: Mapping[str, str], faults: Sequence[Fault]
) -> dict[str, str]:
    """Switch states as read: ``unknown`` for every switch of a PLC with a comm fault."""
    silent = {f.meter for f in faults if f.kind in PLC_KINDS}
    plc_of = {sw.id: sw.plc for sw in profile.switches}
    return {
        sid: "unknown" if plc_of.get(sid) in silent else st for sid, st in switch_states.items()
    }


def snapshot_from_sim(
    profile: Profile,
    switch_states: Mapping[str, str],
    faults: Sequence[Fault],
    rng: np.random.Generator,
    seq: int,
    noise: bool = True,
    t_mono: float | None = None,
    *,
    ideal: IdealReadings | None = None,
    previous: Snapshot | None = None,
    time_utc: datetime | None = None,
) -> Snapshot:
    """A steady-state Snapshot as the poller would build it from the simulated bench, no sockets.

    ``ideal`` may carry a precomputed ``BenchState`` for these switch states (saves the load
    flow when making thousands of snapshots). ``previous`` lets ``frozen`` meters repeat
    their earlier values and lets failing meters count consecutive errors. For snapshots
    through a transient, use ``SimulatedBench.snapshot(t)``.
    """
    if ideal is None:
        ideal = ideal_readings(profile, dict(switch_states))
    reported: dict[str, Mapping[str, float] | None] = {}
    for meter in profile.meters:
        prev = previous.meters.get(meter.id) if previous is not None else None
        if (
            find(meter.id, faults, "frozen")
            and prev is not None
            and prev.state is not CommState.FAILING
        ):
            reported[meter.id] = None
        else:
            reported[meter.id] = meter_values(
                profile, meter.id, ideal.meters[meter.id], faults, rng, noise
            )
    return snapshot_of(
        profile,
        reported,
        faults,
        seq,
        switch_states,
        t_mono=t_mono,
        previous=previous,
        time_utc=time_utc,
    )
