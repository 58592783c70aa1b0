"""Waveforms of a bolted fault behind a Thevenin impedance, as a recorder would sample them.

Pure functions used by the simulated staged fault (``meas.fault.staged``) and the tests.
For a three-phase fault, per phase k, with the pre-fault phase voltage V_k (rms phasor, cosine convention, referred to
the inception time t0) and the positive-sequence impedance Z = R + jX (a symmetrical fault in a
symmetrical network, so each phase is its own RL circuit):
i_k(t) = i_pre,k(t) + sqrt(2) |V_k|/|Z| [sin(w(t - t0) + a_k - phi) - sin(a_k - phi) e^(-(t - t0)/tau)]
for t >= t0, a_k = angle(V_k) + 90 degrees (the sine-convention inception angle), phi = atan(X/R),
tau = X/(w R); the fault-bus voltages collapse to zero at t0. Optional Gaussian recorder noise.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np

from ..shortcircuit.rl import rl_current
from .comtrade_write import AnalogSignal, RecordData, StatusSignal

START = dt.datetime(2026, 1, 1, 12, 0, 0)  # an arbitrary first-sample time for written records


@dataclass(frozen=True)
class FaultWaves:
    t: np.ndarray
    currents: np.ndarray  # (3, n) A
    voltages: np.ndarray  # (3, n) V phase to ground
    fault: np.ndarray  # (n,) 0/1


def phase_voltages(u_ll: float, alpha_a_deg: float) -> np.ndarray:
    """Balanced rms phasors (cosine convention) whose phase A is at sine angle ``alpha_a_deg``."""
    a = math.radians(alpha_a_deg) - math.pi / 2
    return u_ll / math.sqrt(3) * np.exp(1j * (a - 2 * math.pi / 3 * np.arange(3)))


def fault_waves(
    v_pre: Sequence[complex],
    z: complex,
    f_hz: float,
    fs_hz: float,
    samples: int,
    t0_s: float,
    i_pre: Sequence[complex] = (0j, 0j, 0j),
    noise_i_a: float = 0.0,
    noise_v_v: float = 0.0,
    seed: int = 0,
    kind: Literal["3ph", "2ph", "1ph"] = "3ph",
) -> FaultWaves:
    """Sampled currents and voltages of a bolted fault at ``t0_s``.

    ``z`` is the loop impedance per phase: Z1 for 3ph; (2 Z1 + Z0)/3 for 1ph (phase A to
    earth, driven by V_A); for 2ph (B to C) the loop is Z1 + Z2 = 2 Z1 driven by V_B - V_C, so
    pass Z1 and the loop is formed here. Healthy phases keep their pre-fault voltage (exact when
    Z0 = Z1, as at the demo's source and lines); the faulted ones collapse (to their mean, 2ph).
    """
    t = np.arange(samples) / fs_hz
    w = 2 * math.pi * f_hz
    tr = t - t0_s
    r_x = z.real / z.imag
    v = np.asarray(v_pre, dtype=complex)
    drive = {
        "3ph": [(k, v[k], z, 1.0) for k in range(3)],
        "1ph": [(0, v[0], z, 1.0)],
        "2ph": [(1, v[1] - v[2], 2 * z, 1.0), (2, v[1] - v[2], 2 * z, -1.0)],
    }[kind]
    i_f = [np.zeros_like(t) for _ in range(3)]
    for k, vk, zk, sign in drive:
        alpha = math.atan2(vk.imag, vk.real) + math.pi / 2
        i_f[k] = sign * rl_current(tr, abs(vk) / abs(zk), r_x, f_hz, alpha)
    after = {
        "3ph": np.zeros(3, complex),
        "1ph": np.array([0, v[1], v[2]]),
        "2ph": np.array([v[0], (v[1] + v[2]) / 2, (v[1] + v[2]) / 2]),
    }[kind]
    cur, vol = [], []
    for k, (vk, ik) in enumerate(zip(v, i_pre, strict=True)):
        i_load = np.real(math.sqrt(2) * ik * np.exp(1j * w * tr))
        cur.append(i_load + i_f[k])
        v_before = np.real(math.sqrt(2) * vk * np.exp(1j * w * tr))
        vol.append(
            np.where(tr < 0, v_before, np.real(math.sqrt(2) * after[k] * np.exp(1j * w * tr)))
        )
    rng = np.random.default_rng(seed)
    currents = np.array(cur) + (rng.normal(0.0, noise_i_a, (3, samples)) if noise_i_a else 0.0)
    voltages = np.array(vol) + (rng.normal(0.0, noise_v_v, (3, samples)) if noise_v_v else 0.0)
    return FaultWaves(t, currents, voltages, (tr >= 0).astype(np.int64))


def as_record(
    waves: FaultWaves,
    f_hz: float,
    fs_hz: float,
    t0_s: float,
    *,
    station: str = "benchwalk simulated bench",
    device: str = "simulated recorder",
    ct: tuple[float, float] | None = None,
    vt: tuple[float, float] | None = None,
) -> RecordData:
    """The waves as a recorder's channels IA, IB, IC (A), VA, VB, VC (V) and FAULT.

    With ``ct``/``vt`` (primary, secondary) the file holds secondary values flagged ``S``;
    otherwise primary values flagged ``P`` with a 1/1 ratio.
    """
    analogs = []
    for names, x, unit, ratio in (
        (("IA", "IB", "IC"), waves.currents, "A", ct),
        (("VA", "VB", "VC"), waves.voltages, "V", vt),
    ):
        for name, ph, row in zip(names, "ABC", x, strict=True):
            if ratio is None:
                analogs.append(AnalogSignal(name, ph, unit, row))
            else:
                analogs.append(
                    AnalogSignal(name, ph, unit, row * ratio[1] / ratio[0], ratio[0], ratio[1], "S")
                )
    return RecordData(
        station=station,
        device=device,
        frequency_hz=f_hz,
        fs_hz=fs_hz,
        start=START,
        trigger_offset_s=t0_s,
        analogs=tuple(analogs),
        statuses=(StatusSignal("FAULT", waves.fault),),
    )
