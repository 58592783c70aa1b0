"""IEC 60909-0 short-circuit currents at a bus of the network model, far from generators.

Every source of a benchwalk profile is a network feeder (no synchronous machines, no motors),
so the short circuit is "far from generator" throughout: Ib = Ik = I"k (IEC 60909-0 §4.3,
§9.1.1; pandapower gives only I"k for the same reason, CALIBRATION_NOTES §2.2).

- 3ph: I"k3 = c Un / (sqrt(3) |Z1|);
- 2ph (line to line, clear of earth): I"k2 = c Un / |Z1 + Z2|;
- 1ph (line to earth): I"k1 = sqrt(3) c Un / |Z1 + Z2 + Z0|, with Z0 from the model: line
  r0/x0 (default: equal to the positive sequence), sources grounded wye with Z0 = Z1, and each
  transformer's zero-sequence path as its vector group wires it (a delta or a floating star
  blocks it); a network with no zero-sequence path to the fault gives I"k1 = 0.
- ip = kappa sqrt(2) I"k with kappa from the 3ph R/X (radial: R/X at the fault; meshed: method
  B or C); the same kappa for 2ph and 1ph, as IEC 60909-0 §8.2/§8.3 allows.
- K_T multiplies every network transformer's impedance in the max case (all sequences).
- c by the network voltage level of the fault bus's zone, never the bench's (§7 item 8 of the
  research notes): a 400 V bench standing for 33 kV uses the MV factors.

Bench and network scale: computed in bench SI units; network values multiply currents by the
zone's current factor and impedances by voltage_scale^2 / power_scale (``meas.bases``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Literal

from ..bases import bases_of, network_factor
from ..errors import BenchwalkError
from ..model import Profile
from .factors import FC_HZ, LV_LIMIT_V, kappa, kappa_b, thermal_current, voltage_factors
from .thevenin import Thevenin, thevenin

FaultKind = Literal["3ph", "2ph", "1ph"]
Case = Literal["max", "min"]
KappaMethod = Literal["B", "C"]
FAULTS: tuple[FaultKind, ...] = ("3ph", "2ph", "1ph")


@dataclass(frozen=True)
class ShortCircuit:
    """One fault at one bus. Currents in A, impedances in ohm, at ``scale``."""

    bus: str
    fault: FaultKind
    case: Case
    scale: Literal["bench", "network"]
    un_v: float  # nominal line-to-line voltage of the fault bus at this scale
    c: float
    ikss_a: float  # I"k
    ip_a: float
    ib_a: float  # = I"k far from generators
    ik_a: float  # = I"k far from generators
    ith_a: float  # for tk_s
    tk_s: float
    kappa: float
    kappa_method: str  # "radial", "B" or "C"
    r_x: float  # of the positive-sequence impedance at the fault (R/X that kappa uses)
    zk_ohm: (
        complex  # the impedance the fault current sees: Z1 (3ph), (Z1+Z2)/2 (2ph), (2Z1+Z0)/3 (1ph)
    )
    z1_ohm: complex
    z2_ohm: complex
    z0_ohm: complex
    meshed: bool
    kt: dict[str, float]

    @property
    def zk_abs_ohm(self) -> float:
        return abs(self.zk_ohm)


def _kappa(
    th: Thevenin, rx: float, method: KappaMethod, lv: bool, rx_c: float | None
) -> tuple[float, str]:
    if not th.meshed:
        return kappa(rx), "radial"
    if method == "B":
        return kappa_b(rx, True, lv, th.all_branches_below_0_3), "B"
    assert rx_c is not None
    return kappa(rx_c), "C"


def short_circuit(
    profile: Profile,
    bus: str,
    fault: FaultKind = "3ph",
    case: Case = "max",
    *,
    switch_states: Mapping[str, str] | None = None,
    kappa_method: KappaMethod = "C",
    lv_tol_pct: float = 10.0,
    c: float | None = None,
    tk_s: float = 1.0,
    scale: Literal["bench", "network"] = "bench",
    kt_exempt: frozenset[str] = frozenset(),
    apply_kt: bool | None = None,
) -> ShortCircuit:
    """I"k, ip, Ib, Ik, Ith, R/X and Zk for one fault.

    ``c`` overrides the table's factor (c = U_pre/Un compares like for like with a record);
    ``apply_kt`` overrides whether K_T applies (by default: in the max case only); a
    like-for-like comparison uses the physical impedance, so it passes False.
    """
    if fault not in FAULTS:
        raise BenchwalkError(f"fault must be one of {', '.join(FAULTS)}, got {fault!r}")
    try:
        zone = profile.zone_of_bus(bus)
    except KeyError:
        raise BenchwalkError(
            f"{profile.path}: no bus {bus!r}; buses are {', '.join(b.id for b in profile.buses)}"
        ) from None
    cmax, cmin = voltage_factors(zone.network_v_ll, lv_tol_pct)
    c_used = c if c is not None else (cmax if case == "max" else cmin)
    use_kt = case == "max" if apply_kt is None else apply_kt
    kt_cmax = cmax if use_kt else None
    th = thevenin(profile, bus, switch_states, kt_cmax=kt_cmax, kt_exempt=kt_exempt)
    f = profile.bench.frequency_hz
    rx = th.z1.real / th.z1.imag
    rx_c = None
    if th.meshed and kappa_method == "C":
        fc = FC_HZ.get(f)
        if fc is None:
            raise BenchwalkError(
                f"kappa method C needs 50 or 60 Hz (IEC 60909-0 §8.1.3), not {f} Hz"
            )
        thc = thevenin(
            profile, bus, switch_states, x_scale=fc / f, kt_cmax=kt_cmax, kt_exempt=kt_exempt
        )
        rx_c = thc.z1.real / thc.z1.imag * fc / f
    k, how = _kappa(th, rx, kappa_method, zone.network_v_ll <= LV_LIMIT_V, rx_c)
    un = zone.bench_v_ll
    if fault == "3ph":
        zk = th.z1
        ikss = c_used * un / (math.sqrt(3) * abs(zk))
    elif fault == "2ph":
        zk = (th.z1 + th.z2) / 2
        ikss = c_used * un / abs(th.z1 + th.z2)
    else:
        zk = (th.z1 + th.z2 + th.z0) / 3
        total = abs(th.z1 + th.z2 + th.z0)
        ikss = math.sqrt(3) * c_used * un / total if math.isfinite(total) else 0.0
    out = ShortCircuit(
        bus=bus,
        fault=fault,
        case=case,
        scale="bench",
        un_v=un,
        c=c_used,
        ikss_a=ikss,
        ip_a=k * math.sqrt(2) * ikss,
        ib_a=ikss,
        ik_a=ikss,
        ith_a=thermal_current(ikss, k, f, tk_s),
        tk_s=tk_s,
        kappa=k,
        kappa_method=how,
        r_x=rx,
        zk_ohm=zk,
        z1_ohm=th.z1,
        z2_ohm=th.z2,
        z0_ohm=th.z0,
        meshed=th.meshed,
        kt=th.kt,
    )
    return to_network_scale(profile, out) if scale == "network" else out


def to_network_scale(profile: Profile, sc: ShortCircuit) -> ShortCircuit:
    """The same result at network scale: currents by the current factor, Z by vs^2/ps."""
    if sc.scale == "network":
        return sc
    b = bases_of(profile, sc.bus)
    fi = network_factor(b, "i.A")
    fz = b.voltage_scale**2 / b.power_scale
    return replace(
        sc,
        scale="network",
        un_v=sc.un_v * b.voltage_scale,
        ikss_a=sc.ikss_a * fi,
        ip_a=sc.ip_a * fi,
        ib_a=sc.ib_a * fi,
        ik_a=sc.ik_a * fi,
        ith_a=sc.ith_a * fi,
        zk_ohm=sc.zk_ohm * fz,
        z1_ohm=sc.z1_ohm * fz,
        z2_ohm=sc.z2_ohm * fz,
        z0_ohm=sc.z0_ohm * fz,
    )


def every_bus(
    profile: Profile, fault: FaultKind = "3ph", case: Case = "max", **kw: object
) -> list[ShortCircuit]:
    """The fault at every live bus of the profile (normal switch states unless given)."""
    out = []
    for b in profile.buses:
        try:
            out.append(short_circuit(profile, b.id, fault, case, **kw))  # type: ignore[arg-type]
        except BenchwalkError:
            continue
    return out
