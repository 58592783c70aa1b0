"""Waveform analysis of a recorded bolted fault, per phase.

The analysed signal is the fault component: the recorded current minus the pre-fault current
continued (its fundamental, fitted on the first cycle of the record). By superposition that is
the current the Thevenin impedance drives from the pre-fault voltage, the quantity IEC 60909
predicts; with no load before the fault it is the recorded current itself.

- inception: the first sample where the fault component leaves the pre-fault noise band
  (6 sigma, and at least 1 % of its peak), refined to the zero crossing of the fitted fault
  current just before it; the trigger time of the file is not trusted;
- U_pre: rms of the last full cycle before inception (line to line = sqrt(3) times the mean
  phase value);
- peak per phase: the largest sampled |i| of the fault component (the recorded one too), with the bound of the sampling rate: the worst
  loss over every sampling phase, evaluated on the fitted waveform;
- steady Ik: a one-cycle DFT of the last whole cycle of the fault, checked to start >= 5 tau
  after inception;
- fit (``scipy.optimize.least_squares``): i(t) = A sin(w (t - t0) + theta) + B e^(-(t - t0)/tau)
  giving Ik = A / sqrt(2), tau, R/X = 1 / (w tau) and the inception angle alpha of the phase
  voltage (from the pre-fault voltage when recorded, otherwise from the fit: theta + phi).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from ..errors import BenchwalkError
from ..shortcircuit.rl import peak_factor
from .record import Record


@dataclass(frozen=True)
class PhaseAnalysis:
    name: str
    faulted: bool
    inception_s: float
    ik_fit_a: float  # AC amplitude of the fit / sqrt(2)
    ik_fit_u_a: float  # its standard uncertainty from the fit
    ik_dft_a: float  # one-cycle DFT of the last whole cycle
    dft_after_5tau: bool
    tau_s: float
    tau_u_s: float
    r_x: float
    r_x_u: float
    alpha_deg: float  # voltage angle (sine convention) at inception
    alpha_source: str  # "voltage" or "fit"
    peak_a: float  # largest sampled |i| of the fault component
    peak_recorded_a: float  # largest sampled |i| of the recorded current (with any load current)
    peak_fit_a: float  # continuous peak of the fitted fault current
    peak_sampling_bound_a: float  # worst loss of the sampled peak for this sampling rate
    fit_rms_a: float  # rms residual of the fit


@dataclass(frozen=True)
class Analysis:
    phases: tuple[PhaseAnalysis, ...]
    inception_s: float
    u_pre_ll_v: float | None  # None when the record has no voltages
    u_pre_phase_v: tuple[float, ...]  # rms of each voltage channel over the same cycle
    v_pre_phasors: tuple[complex, ...]  # their fundamental rms phasors (cosine, record time 0)
    fault_end_s: float
    fs_hz: float
    frequency_hz: float
    t: np.ndarray
    fault_component: np.ndarray  # (phases, samples)

    @property
    def current_names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.phases)

    @property
    def faulted(self) -> tuple[PhaseAnalysis, ...]:
        return tuple(p for p in self.phases if p.faulted)


def _fundamental(t: np.ndarray, x: np.ndarray, f: float) -> complex:
    """Least-squares fundamental over a window (the DFT bin when it spans whole cycles):
    x ~ Re(sqrt(2) X e^(j w t)); returns the rms phasor X."""
    w = 2 * math.pi * f
    m = np.column_stack([np.cos(w * t), -np.sin(w * t), np.ones_like(t)])
    (a, b, _), *_ = np.linalg.lstsq(m, x, rcond=None)
    return complex(a, b) / math.sqrt(2)


def _continue(t: np.ndarray, ph: complex, f: float) -> np.ndarray:
    return np.real(math.sqrt(2) * ph * np.exp(2j * math.pi * f * t))


def _model(p: np.ndarray, t: np.ndarray, w: float, t0: float) -> np.ndarray:
    a, th, b, tau = p
    return a * np.sin(w * (t - t0) + th) + b * np.exp(-(t - t0) / tau)


def _fit(
    t: np.ndarray, y: np.ndarray, w: float, t0: float, ik0: float, th0: float
) -> tuple[np.ndarray, np.ndarray, float]:
    b0 = float(y[0] - math.sqrt(2) * ik0 * math.sin(w * (t[0] - t0) + th0))
    p0 = np.array([math.sqrt(2) * ik0, th0, b0, 0.01])
    res = least_squares(
        lambda p: _model(p, t, w, t0) - y,
        p0,
        bounds=([0, -10 * math.pi, -np.inf, 1e-5], [np.inf, 10 * math.pi, np.inf, 10.0]),
        x_scale="jac",
        xtol=1e-14,
        ftol=1e-14,
        gtol=1e-14,
        max_nfev=2000,
    )
    dof = max(len(y) - 4, 1)
    s2 = float(res.fun @ res.fun) / dof
    try:
        cov = np.linalg.inv(res.jac.T @ res.jac) * s2
        u = np.sqrt(np.clip(np.diag(cov), 0, None))
    except np.linalg.LinAlgError:
        u = np.full(4, np.nan)
    return res.x, u, math.sqrt(s2)


def _sampling_loss(
    p: np.ndarray, w: float, t0: float, fs: float, t_end: float
) -> tuple[float, float]:
    """(continuous peak of the fitted waveform, worst loss of its sampled maximum)."""
    tt = np.arange(t0, min(t_end, t0 + 0.1), 1.0 / (fs * 50))
    y = np.abs(_model(p, tt, w, t0))
    cont = float(y.max())
    k = np.arange(50)
    sampled = [float(y[j::50].max()) for j in k]
    return cont, cont - min(sampled)


def _inception(p: np.ndarray, w: float, t_det: float, f: float) -> float:
    """Where the fitted fault current, continued backwards from detection, starts: its last
    zero crossing or touching zero (a switch at the voltage zero starts with zero slope)."""
    grid = np.linspace(t_det - 0.5 / f, t_det, 2001)
    g = _model(p, grid, w, t_det)
    scale = float(np.abs(g).max()) or 1.0
    for j in range(len(g) - 2, 0, -1):
        if np.sign(g[j]) != np.sign(g[j + 1]):
            return float(grid[j] - g[j] * (grid[j + 1] - grid[j]) / (g[j + 1] - g[j]))
        if abs(g[j]) <= abs(g[j - 1]) and abs(g[j]) <= abs(g[j + 1]) and abs(g[j]) < 1e-3 * scale:
            return float(grid[j])
    return float(grid[0])


def analyse(rec: Record, min_fault_fraction: float = 0.1, voltage_angle: bool = True) -> Analysis:
    """Analyse every current channel of a record of a bolted fault.

    ``voltage_angle`` takes each phase's inception angle from its own pre-fault voltage (3ph,
    1ph); a line-to-line fault is driven by the loop voltage, so pass False to take it from
    the fit instead.
    """
    f, fs, t = rec.frequency_hz, rec.fs_hz, rec.t
    w = 2 * math.pi * f
    n_cyc = int(round(fs / f))
    if n_cyc < 8:
        raise BenchwalkError(
            f"{rec.path}: {fs:g} samples/s is too slow for {f:g} Hz (fewer than 8 samples per cycle)"
        )
    if len(t) < 4 * n_cyc:
        raise BenchwalkError(f"{rec.path}: the record is shorter than four cycles")
    pre = slice(0, n_cyc)
    comps, sigmas = [], []
    for x in rec.currents:
        ph = _fundamental(t[pre], x[pre], f)
        comp = x - _continue(t, ph, f)
        comps.append(comp)
        sigmas.append(float(np.std(comp[pre])))
    fc = np.vstack(comps)
    peaks = np.abs(fc).max(axis=1)
    big = peaks.max()
    faulted = peaks >= min_fault_fraction * big
    starts = []
    for j in np.flatnonzero(faulted):
        thr = max(6 * sigmas[j], 0.01 * peaks[j])
        idx = np.flatnonzero(np.abs(fc[j, n_cyc:]) > thr)
        if len(idx):
            starts.append(int(idx[0]) + n_cyc)
    first_rms = [float(np.sqrt(np.mean(x[pre] ** 2))) for x in rec.currents]
    # a fault inside the first cycle spoils the pre-fault fit: a large residual there, and a
    # record that reaches far above it (pure noise without a fault does not)
    unsteady = any(
        sigmas[j] > 0.05 * first_rms[j] and np.abs(rec.currents[j]).max() > 10 * sigmas[j]
        for j in range(len(sigmas))
    )
    if (not starts and unsteady) or any(
        sigmas[j] > 0.05 * peaks[j] for j in np.flatnonzero(faulted)
    ):
        raise BenchwalkError(
            f"{rec.path}: the first cycle is not a steady pre-fault cycle; the analysis needs one "
            "full cycle recorded before the fault"
        )
    if not starts or big <= 0:
        raise BenchwalkError(f"{rec.path}: no fault current found after the first cycle")
    i_det = min(starts)
    # fault end: the last sample before the fault component's half-cycle rms falls below 10 %
    half = max(n_cyc // 2, 1)
    rms = np.sqrt(np.convolve((fc[faulted] ** 2).mean(axis=0), np.ones(half) / half, mode="same"))
    level = rms[i_det + n_cyc : i_det + 2 * n_cyc].max() if len(rms) > i_det + n_cyc else rms.max()
    low = np.flatnonzero(rms[i_det + n_cyc :] < 0.1 * level)
    i_end = (int(low[0]) + i_det + n_cyc - half) if len(low) else len(t)
    if i_end - i_det < 3 * n_cyc:
        raise BenchwalkError(
            f"{rec.path}: the fault lasts under three cycles; too short for a steady current"
        )
    t_det = float(t[i_det])
    fits: dict[int, tuple[np.ndarray, np.ndarray, float, float, float]] = {}
    for kf in np.flatnonzero(faulted):
        k = int(kf)
        y = fc[k]
        last = slice(i_end - n_cyc, i_end)
        dft = _fundamental(t[last], y[last], f)
        # the DFT's cosine phasor as the sine phase at t_det: sin(w (t - t_det) + th0)
        th0 = math.remainder(w * t_det + math.atan2(dft.imag, dft.real) + math.pi / 2, 2 * math.pi)
        p, u, rms_fit = _fit(t[i_det:i_end], y[i_det:i_end], w, t_det, abs(dft), th0)
        fits[k] = (p, u, rms_fit, _inception(p, w, t_det, f), abs(dft))
    t0_min = min(v[3] for v in fits.values())
    u_pre = None
    u_phase: tuple[float, ...] = ()
    v_phasors: list[complex] = []
    i_pre_end = int(np.searchsorted(t, t0_min - 0.5 / fs))  # samples strictly before inception
    if rec.voltages is not None and i_pre_end - n_cyc >= 0:
        win = slice(i_pre_end - n_cyc, i_pre_end)
        v_phasors = [_fundamental(t[win], v[win], f) for v in rec.voltages]
        u_phase = tuple(math.sqrt(float(np.mean(v[win] ** 2))) for v in rec.voltages)
        u_pre = math.sqrt(3) * float(np.mean(u_phase))
    out: list[PhaseAnalysis] = []
    for k, name in enumerate(rec.current_names):
        if k not in fits:
            nan = math.nan
            out.append(
                PhaseAnalysis(
                    name,
                    False,
                    nan,
                    nan,
                    nan,
                    nan,
                    False,
                    nan,
                    nan,
                    nan,
                    nan,
                    nan,
                    "none",
                    nan,
                    nan,
                    nan,
                    nan,
                    nan,
                )
            )
            continue
        p, u, rms_fit, t0, ik_dft = fits[k]
        a, th, _, tau = p
        r_x = 1.0 / (w * tau)
        phi = math.atan2(1.0, r_x)
        if v_phasors and voltage_angle:
            vph = v_phasors[k] if k < len(v_phasors) else v_phasors[0]
            alpha = math.degrees(w * t0 + math.atan2(vph.imag, vph.real) + math.pi / 2)
            src = "voltage"
        else:
            alpha = math.degrees(th - w * (t_det - t0) + phi)
            src = "fit"
        cont, loss = _sampling_loss(p, w, t_det, fs, float(t[i_end - 1]))
        out.append(
            PhaseAnalysis(
                name=name,
                faulted=True,
                inception_s=t0,
                ik_fit_a=a / math.sqrt(2),
                ik_fit_u_a=float(u[0]) / math.sqrt(2),
                ik_dft_a=ik_dft,
                dft_after_5tau=float(t[i_end - n_cyc]) - t0 >= 5 * tau,
                tau_s=tau,
                tau_u_s=float(u[3]),
                r_x=r_x,
                r_x_u=r_x * float(u[3]) / tau,
                alpha_deg=(alpha + 180.0) % 360.0 - 180.0,
                alpha_source=src,
                peak_a=float(np.abs(fc[k, i_det:i_end]).max()),
                peak_recorded_a=float(np.abs(rec.currents[k, i_det:i_end]).max()),
                peak_fit_a=cont,
                peak_sampling_bound_a=loss,
                fit_rms_a=rms_fit,
            )
        )
    return Analysis(
        phases=tuple(out),
        inception_s=t0_min,
        u_pre_ll_v=u_pre,
        u_pre_phase_v=u_phase,
        v_pre_phasors=tuple(v_phasors),
        fault_end_s=float(t[i_end - 1]),
        fs_hz=fs,
        frequency_hz=f,
        t=t,
        fault_component=fc,
    )


def exact_peak(ik_a: float, r_x: float, alpha_deg: float) -> float:
    """The peak an RL circuit gives when switched at ``alpha_deg`` (sine convention)."""
    return math.sqrt(2) * ik_a * peak_factor(r_x, math.radians(alpha_deg))
