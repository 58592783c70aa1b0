"""A simulated staged fault: the record a disturbance recorder would write on the bench.

From the (as-built) model: the pre-fault load flow for the switch state gives the fault bus's
phase voltages and the current of the recorded branch; the Thevenin impedances at the bus
(``meas.shortcircuit.thevenin``: the model's series impedances, loads neglected as IEC 60909
does) give the RL transient of a bolted fault (3ph, 2ph B-C, or 1ph A-earth) switched at a
chosen angle of the phase-A voltage. The recorded current is the pre-fault current continued plus the fault
current (superposition); loads stay only in that pre-fault current. The fault-bus voltages
collapse at inception. Gaussian noise and the file format's quantisation are the recorder's.
This fakes a record only; nothing is ever staged on equipment.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from ..errors import BenchwalkError
from ..model import Profile
from ..network.admittance import build_network
from ..network.loadflow import solve
from ..network.parameters import model_parameters, with_values
from ..shortcircuit.iec60909 import FaultKind
from ..shortcircuit.thevenin import thevenin
from .comtrade_write import DataFormat, Revision, write_comtrade
from .synth import as_record, fault_waves


@dataclass(frozen=True)
class StagedFault:
    path: Path
    bus: str
    branch: str  # whose current is recorded
    z_ohm: complex  # the loop impedance per phase (Z1; (2 Z1 + Z0)/3 for 1ph)
    u_pre_ll_v: float
    alpha_deg: float  # phase-A voltage angle (sine convention) at inception
    ik_a: float  # steady fault component: U_pre/(sqrt3 |Z|), U_pre/(2 |Z1|) for 2ph


def as_built(profile: Profile, values: Mapping[str, float]) -> Profile:
    """The profile with parameters set (``BRANCH.key`` -> value): a bench that is not its nameplate."""
    try:
        return replace(profile, branches=with_values(profile.branches, values))
    except KeyError as exc:
        known = ", ".join(p.name for p in model_parameters(profile.branches))
        raise BenchwalkError(f"{exc.args[0]}; parameters are {known}") from None


def stage_fault(
    profile: Profile,
    bus: str,
    out_stem: Path,
    *,
    switch_states: Mapping[str, str] | None = None,
    alpha_deg: float = 0.0,
    fs_hz: float = 10_000.0,
    duration_s: float = 0.2,
    t_fault_s: float = 0.04,
    noise_pct: float = 0.02,
    seed: int = 0,
    revision: Revision = "2013",
    data_format: DataFormat = "BINARY32",
    cff: bool = False,
    ct: tuple[float, float] | None = None,
    vt: tuple[float, float] | None = None,
    kind: FaultKind = "3ph",
) -> StagedFault:
    """Write the record of a bolted fault at ``bus`` and describe what was staged."""
    states = dict(switch_states or {})
    net = build_network(profile, states)
    if bus not in net.energized or not net.energized[bus]:
        raise BenchwalkError(f"{profile.path}: bus {bus!r} is not live in this switch state")
    sol = solve(net)
    th = thevenin(profile, bus, states)
    finite = [s for s in net.sources if s.y is not None]
    if len(finite) > 1 or len(finite) < len(net.sources):
        raise BenchwalkError(
            f"{profile.path}: the simulated record models one feeding source with a finite sc_va; "
            f"this switch state has {len(net.sources)} live sources"
        )
    src = finite[0] if finite else None
    if src is None:
        raise BenchwalkError(
            f"{profile.path}: no finite source; a fault current needs a source impedance"
        )
    f = profile.bench.frequency_hz
    v_bus = np.asarray(sol.v[bus])
    i_pre = -np.asarray(sol.i_from[src.branch])  # delivered by the source into the network
    # rotate time so that phase A's voltage is at the chosen sine angle at inception
    rot = np.exp(1j * (math.radians(alpha_deg) - math.pi / 2 - np.angle(v_bus[0])))
    samples = int(round(duration_s * fs_hz))
    u_pre = math.sqrt(3) * float(np.mean(np.abs(v_bus)))
    z = (2 * th.z1 + th.z0) / 3 if kind == "1ph" else th.z1
    if not math.isfinite(abs(z)):
        raise BenchwalkError(
            f"{profile.path}: no zero-sequence path to {bus}; a line-to-earth fault there draws no current"
        )
    ik = u_pre / (2 * abs(z)) if kind == "2ph" else u_pre / (math.sqrt(3) * abs(z))
    waves = fault_waves(
        v_bus * rot,
        z,
        f,
        fs_hz,
        samples,
        t_fault_s,
        i_pre=i_pre * rot,
        noise_i_a=noise_pct / 100 * ik * math.sqrt(2),
        noise_v_v=noise_pct / 100 * u_pre * math.sqrt(2 / 3),
        seed=seed,
        kind=kind,
    )
    rec = as_record(waves, f, fs_hz, t_fault_s, ct=ct, vt=vt)
    path = write_comtrade(out_stem, rec, revision, data_format, cff=cff)
    return StagedFault(path, bus, src.branch, th.z1, u_pre, alpha_deg, ik)
