"""What a meter shows for a solved network: the load flow seen through one meter.

Pure functions of the load-flow solution, shared by the simulated bench (``meas.sim.readings``,
which adds caching and noise on top) and model-side users such as calibration
(``meas.calib``), so both read the model through exactly the same derivation.

Conventions: per-phase S = V I* (V phase-to-ground, I into the branch at the meter's bus);
``s.T`` follows the map's ``apparent_power`` ("vector" = |sum S_k|, "arithmetic" = sum |S_k|,
IEEE Std 1459-2010); pf carries the sign of P; angles in degrees referred to the meter's V_A.
"""

from __future__ import annotations

import numpy as np

from ..errors import BenchwalkError
from ..model import Meter, Profile
from ..quantities import LL_PAIRS, PHASES
from .loadflow import Solution


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
    s = v * np.conj(i)
    p, q, sa = s.real, s.imag, np.abs(s)
    out: dict[str, float] = {}
    for k, ph in enumerate(PHASES):
        out[f"v_ln.{ph}"] = float(abs(v[k]))
    for pair in LL_PAIRS:
        a, b = PHASES.index(pair[0]), PHASES.index(pair[1])
        out[f"v_ll.{pair}"] = float(abs(v[a] - v[b]))
    for k, ph in enumerate(PHASES):
        out[f"i.{ph}"] = float(abs(i[k]))
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
