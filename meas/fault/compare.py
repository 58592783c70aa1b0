"""Measured against predicted: the figures of a staged fault and the pass rule.

Prediction (``meas.shortcircuit``) at the faulted bus of the (calibrated) profile:
- like for like: I"k with c = U_pre/Un from the record's pre-fault voltage (the faulted
  phase's for 1ph, the faulted pair's for 2ph) and the physical
  impedance (no K_T), its R/X and |Zk|, and the exact RL peak at each phase's measured
  inception angle;
- the IEC figures: I"k at cmin and cmax (the band) and ip by kappa at c = U_pre/Un and cmax.
Uncertainties: u_pred by the delta method from the calibration's covariance (or the profile's
nameplate tolerances when none is given) combined with the recorder's voltage class (the
prediction scales with the measured U_pre); u_rec from the recorder/CT class (a limit a gives
u = a/sqrt(3), JCGM 100:2008 §4.3.7) and the fit's own standard error; the sampled peak is
raised by half the sampling bound and carries bound/(2 sqrt(3)).
A figure passes when |measured - predicted| <= 2 sqrt(u_pred^2 + u_rec^2).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Literal

import numpy as np

from ..errors import BenchwalkError
from ..model import Profile
from ..shortcircuit.iec60909 import (
    FaultKind,
    KappaMethod,
    ShortCircuit,
    short_circuit,
    to_network_scale,
)
from ..shortcircuit.rl import peak_factor
from ..shortcircuit.uncertainty import (
    Covariance,
    calibrated_profile,
    nameplate_covariance,
    propagate,
)
from .waveform import Analysis

COVERAGE_K = 2.0  # expansion factor, ~95 % (JCGM 100:2008 §6.2.1)


@dataclass(frozen=True)
class Figure:
    key: str
    label: str
    unit: str
    measured: float
    u_measured: float
    predicted: float
    u_predicted: float
    note: str = ""

    @property
    def deviation(self) -> float:
        return self.measured - self.predicted

    @property
    def deviation_pct(self) -> float:
        return 100.0 * self.deviation / self.predicted if self.predicted else math.nan

    @property
    def limit(self) -> float:
        return COVERAGE_K * math.hypot(self.u_predicted, self.u_measured)

    @property
    def verdict(self) -> Literal["pass", "fail", "unverified"]:
        if not all(math.isfinite(x) for x in (self.measured, self.predicted, self.limit)):
            return "unverified"
        return "pass" if abs(self.deviation) <= self.limit else "fail"


@dataclass(frozen=True)
class Comparison:
    bus: str
    fault: FaultKind
    scale: Literal["bench", "network"]
    u_pre_ll_v: float
    un_v: float
    c_like: float
    like: ShortCircuit
    iec_max: ShortCircuit
    iec_min: ShortCircuit
    figures: tuple[Figure, ...]
    in_iec_band: bool
    uncertainty_source: str
    predicted_peak_by_phase: dict[str, float]

    @property
    def verdict(self) -> Literal["pass", "fail", "unverified"]:
        v = {f.verdict for f in self.figures}
        return "fail" if "fail" in v else ("unverified" if "unverified" in v else "pass")


def _driving_voltage(analysis: Analysis, fault: FaultKind) -> float:
    """The pre-fault voltage that drives the fault, line to line: the mean of the three phases
    (3ph), sqrt3 times the faulted phase's (1ph), the faulted pair's difference (2ph)."""
    assert analysis.u_pre_ll_v is not None
    idx = [analysis.current_names.index(p.name) for p in analysis.faulted]
    v = analysis.v_pre_phasors
    if len(v) != len(analysis.phases) or fault == "3ph":
        return analysis.u_pre_ll_v
    if fault == "1ph" and len(idx) == 1:
        return math.sqrt(3) * abs(v[idx[0]])
    if fault == "2ph" and len(idx) == 2:
        return abs(v[idx[0]] - v[idx[1]])
    return analysis.u_pre_ll_v


def _zk_measured(u_pre: float, ik: float, fault: FaultKind) -> float:
    return u_pre / (2.0 * ik) if fault == "2ph" else u_pre / (math.sqrt(3) * ik)


def compare(
    analysis: Analysis,
    profile: Profile,
    bus: str,
    *,
    fault: FaultKind = "3ph",
    scale: Literal["bench", "network"] = "bench",
    switch_states: Mapping[str, str] | None = None,
    covariance: Covariance | None = None,
    rec_class_pct: float = 1.0,
    kappa_method: KappaMethod = "C",
    lv_tol_pct: float = 10.0,
) -> Comparison:
    """Compare a record's analysis with the model's prediction at ``bus``."""
    phases = analysis.faulted
    if abs(analysis.frequency_hz - profile.bench.frequency_hz) > 1.0:
        raise BenchwalkError(
            f"the record is at {analysis.frequency_hz:g} Hz but the profile {profile.path} at "
            f"{profile.bench.frequency_hz:g} Hz; is it the right record?"
        )
    if analysis.u_pre_ll_v is None:
        raise BenchwalkError(
            "the record has no voltage channels; U_pre (and so c = U_pre/Un) needs them (--voltages)"
        )
    u_pre = _driving_voltage(analysis, fault)
    cov = covariance if covariance is not None else nameplate_covariance(profile)
    source = (
        "calibration covariance"
        if covariance is not None
        else "nameplate tolerances of the profile (no calibration given)"
    )
    model = calibrated_profile(profile, covariance) if covariance is not None else profile
    kw = dict(
        switch_states=switch_states, kappa_method=kappa_method, lv_tol_pct=lv_tol_pct, scale=scale
    )
    probe = short_circuit(model, bus, fault, "max", **kw)  # type: ignore[arg-type]
    un = probe.un_v
    c_like = u_pre / un
    pk_ph = max(phases, key=lambda p: p.peak_a)
    # like for like per phase (3ph): the phase's own pre-fault voltage drives its fault current
    u_ph = analysis.u_pre_phase_v
    per_phase = fault == "3ph" and len(u_ph) == len(analysis.phases)
    mean_u = sum(u_ph) / len(u_ph) if u_ph else 1.0
    shares = {
        p.name: u_ph[analysis.current_names.index(p.name)] / mean_u if per_phase else 1.0
        for p in phases
    }
    v_share = shares[pk_ph.name]

    def peak_of(sc: ShortCircuit, alpha_deg: float, share: float) -> float:
        rx = sc.zk_ohm.real / sc.zk_ohm.imag
        return math.sqrt(2) * sc.ikss_a * share * peak_factor(rx, math.radians(alpha_deg))

    def evaluate(pr: Profile) -> dict[str, float]:
        sc = short_circuit(pr, bus, fault, "max", c=c_like, apply_kt=False, **kw)  # type: ignore[arg-type]
        rx = sc.zk_ohm.real / sc.zk_ohm.imag
        pk = peak_of(sc, pk_ph.alpha_deg, v_share)
        return {"ikss": sc.ikss_a, "rx": rx, "zk": abs(sc.zk_ohm), "peak": pk, "ip": sc.ip_a}

    like = short_circuit(model, bus, fault, "max", c=c_like, apply_kt=False, **kw)  # type: ignore[arg-type]
    iec_max = short_circuit(model, bus, fault, "max", **kw)  # type: ignore[arg-type]
    iec_min = short_circuit(model, bus, fault, "min", **kw)  # type: ignore[arg-type]
    pred = evaluate(model)
    u_p = propagate(profile, cov, evaluate) if cov.names else dict.fromkeys(pred, 0.0)
    u_rel = rec_class_pct / 100.0 / math.sqrt(3)
    for key in ("ikss", "peak", "ip"):  # the prediction scales with the measured U_pre
        u_p[key] = math.hypot(u_p[key], pred[key] * u_rel)
    by_phase = {p.name: peak_of(like, p.alpha_deg, shares[p.name]) for p in phases}

    ik_fit = float(np.mean([p.ik_fit_a for p in phases]))
    fit_u = float(np.mean([p.ik_fit_u_a for p in phases]))
    ik_fit_u = math.hypot(ik_fit * u_rel, fit_u)
    ik_dft = float(np.mean([p.ik_dft_a for p in phases]))
    rx_m = float(np.mean([p.r_x for p in phases]))
    rx_u = float(np.mean([p.r_x_u for p in phases]))
    zk_m = _zk_measured(u_pre, ik_dft, fault)
    pk_m = pk_ph.peak_a + pk_ph.peak_sampling_bound_a / 2
    pk_u = math.hypot(pk_m * u_rel, pk_ph.peak_sampling_bound_a / (2 * math.sqrt(3)))
    late = (
        ""
        if all(p.dft_after_5tau for p in phases)
        else "; the last cycle starts before 5 tau: DC not fully decayed"
    )
    figures = (
        Figure(
            "ikss",
            'I"k',
            "A",
            ik_fit,
            ik_fit_u,
            pred["ikss"],
            u_p["ikss"],
            "AC amplitude of the fit / sqrt 2; predicted with c = U_pre/Un",
        ),
        Figure(
            "ik",
            "Ik",
            "A",
            ik_dft,
            math.hypot(ik_dft * u_rel, fit_u),
            pred["ikss"],
            u_p["ikss"],
            'one-cycle DFT of the last fault cycle; far from generators Ik = I"k' + late,
        ),
        Figure(
            "peak",
            "peak (exact at the measured angle)",
            "A",
            pk_m,
            pk_u,
            pred["peak"],
            u_p["peak"],
            f"sampled peak {pk_ph.peak_a:.4g} A + half its sampling bound {pk_ph.peak_sampling_bound_a:.3g} A; predicted: RL peak of phase {pk_ph.name} at its measured inception angle and pre-fault voltage",
        ),
        Figure(
            "ip",
            "peak against IEC ip",
            "A",
            pk_m,
            pk_u,
            pred["ip"],
            u_p["ip"],
            f'ip = kappa sqrt2 I"k at c = U_pre/Un (kappa {like.kappa:.4f}, {like.kappa_method}); cmax gives {iec_max.ip_a:.4g} A',
        ),
        Figure(
            "r_x",
            "R/X",
            "",
            rx_m,
            rx_u,
            pred["rx"],
            u_p["rx"],
            "from tau of the fit: R/X = 1/(w tau)",
        ),
        Figure(
            "zk",
            "|Zk|",
            "ohm",
            zk_m,
            zk_m * math.sqrt(2) * u_rel,
            pred["zk"],
            u_p["zk"],
            "U_pre / (sqrt3 Ik)" if fault != "2ph" else "U_pre / (2 Ik)",
        ),
    )
    return Comparison(
        bus=bus,
        fault=fault,
        scale=scale,
        u_pre_ll_v=u_pre,
        un_v=un,
        c_like=c_like,
        like=like,
        iec_max=iec_max,
        iec_min=iec_min,
        figures=figures,
        in_iec_band=iec_min.ikss_a <= ik_fit <= iec_max.ikss_a,
        uncertainty_source=source,
        predicted_peak_by_phase=by_phase,
    )


__all__ = ["COVERAGE_K", "Comparison", "Figure", "compare", "to_network_scale"]
