"""The network for one switch state and its phase-node admittance matrix.

``build_network`` keeps the in-service elements on live buses (liveness is
``meas.network.topology``'s rule) and gives every live bus a flat-start angle that follows the
transformer phase shifts along the path that feeds it. ``assemble`` lays the network out as
nodes: three phase nodes per live bus, three internal EMF nodes per finite source; lines,
transformers, source impedances, shunts and the constant-impedance part of loads go into Y,
the constant-current and constant-power parts of loads stay voltage-dependent injections.
"""

from __future__ import annotations

import cmath
import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from ..model import Profile
from .elements import (
    Element,
    LoadModel,
    ShuntModel,
    SourceModel,
    TwoPort,
    bus_nominal_phase_voltage,
    element_models,
)
from .topology import branch_conducts, energization, settled_states


@dataclass(frozen=True)
class Network:
    """The model for one switch state: only in-service elements on energized buses."""

    path: str
    frequency_hz: float
    s_base_va: float
    buses: tuple[str, ...]
    v_nominal: dict[str, float]  # bus -> nominal phase-to-neutral voltage, V
    energized: dict[str, bool]
    sources: tuple[SourceModel, ...]
    two_ports: tuple[TwoPort, ...]
    loads: tuple[LoadModel, ...]
    shunts: tuple[ShuntModel, ...]
    open_branches: frozenset[str]  # branches switched out (or dead: all their buses dead)
    angle0_deg: dict[str, float]  # flat-start angle of phase A per energized bus
    branch_buses: dict[str, tuple[str, ...]]  # every branch of the profile -> its bus(es)


def build_network(
    profile: Profile, switch_states: Mapping[str, str], models: Mapping[str, Element] | None = None
) -> Network:
    """The model for one switch state; switches not in the mapping are in their normal state."""
    models = element_models(profile) if models is None else models
    v_nom = bus_nominal_phase_voltage(profile)
    conducts = branch_conducts(profile, settled_states(profile, switch_states))
    opened = {b for b, on in conducts.items() if on is False}
    angle: dict[str, float] = {}
    for bus, (branch, feeder) in energization(profile, conducts, unknown_conducts=False).items():
        m = models[branch]
        if isinstance(m, SourceModel):
            angle[bus] = math.degrees(cmath.phase(m.emf[0]))
        elif isinstance(m, TwoPort) and feeder is not None:
            shift = m.shift_deg if feeder == m.from_bus else -m.shift_deg
            angle[bus] = angle[feeder] - shift
    energized = {b: b in angle for b in v_nom}

    def alive(m: Element) -> bool:
        if m.branch in opened:
            return False
        return energized[m.from_bus] if isinstance(m, TwoPort) else energized[m.bus]

    live = [m for m in models.values() if alive(m)]
    dead = frozenset(opened | {m.branch for m in models.values() if not alive(m)})
    return Network(
        path=profile.path,
        frequency_hz=profile.bench.frequency_hz,
        s_base_va=profile.bench.s_base_va,
        buses=tuple(v_nom),
        v_nominal=v_nom,
        energized=energized,
        sources=tuple(m for m in live if isinstance(m, SourceModel)),
        two_ports=tuple(m for m in live if isinstance(m, TwoPort)),
        loads=tuple(m for m in live if isinstance(m, LoadModel)),
        shunts=tuple(m for m in live if isinstance(m, ShuntModel)),
        open_branches=dead,
        angle0_deg=angle,
        branch_buses={b.id: b.buses for b in profile.branches},
    )


@dataclass(frozen=True)
class Nodal:
    """The network as phase nodes: admittance matrix, flat start, slack and load injections.

    ``idx``/``src_idx`` give the first of the three nodes of a live bus / finite source; ``vn``
    is each node's nominal voltage magnitude; ``sp``/``si`` are the constant-power and
    constant-current load powers at nominal voltage (consumed, VA).
    """

    y: np.ndarray
    v0: np.ndarray
    vn: np.ndarray
    slack: np.ndarray
    sp: np.ndarray
    si: np.ndarray
    idx: dict[str, int]
    src_idx: dict[str, int]


def assemble(net: Network) -> Nodal:
    """Lay out the nodes of ``net`` and stamp every in-service element into Y."""
    live = [b for b in net.buses if net.energized[b]]
    idx = {b: 3 * k for k, b in enumerate(live)}
    n = 3 * len(live)
    finite = [s for s in net.sources if s.y is not None]
    src_idx = {s.branch: n + 3 * k for k, s in enumerate(finite)}
    n += 3 * len(finite)

    y = np.zeros((n, n), dtype=complex)
    v0 = np.zeros(n, dtype=complex)
    vn = np.ones(n)
    slack = np.zeros(n, dtype=bool)
    sp = np.zeros(n, dtype=complex)
    si = np.zeros(n, dtype=complex)
    shifts = np.exp(-2j * np.pi / 3 * np.arange(3))
    for b in live:
        i = idx[b]
        vn[i : i + 3] = net.v_nominal[b]
        v0[i : i + 3] = net.v_nominal[b] * np.exp(1j * np.radians(net.angle0_deg[b])) * shifts
    for tp in net.two_ports:
        ii = np.r_[idx[tp.from_bus] : idx[tp.from_bus] + 3, idx[tp.to_bus] : idx[tp.to_bus] + 3]
        y[np.ix_(ii, ii)] += tp.y
    for s in net.sources:
        bi = np.arange(idx[s.bus], idx[s.bus] + 3)
        if s.y is None:
            slack[bi] = True
            v0[bi] = s.emf
        else:
            ei = np.arange(src_idx[s.branch], src_idx[s.branch] + 3)
            ii = np.r_[bi, ei]
            y[np.ix_(ii, ii)] += np.block([[s.y, -s.y], [-s.y, s.y]])
            slack[ei] = True
            v0[ei] = s.emf
            vn[ei] = np.abs(s.emf)
    for sh in net.shunts:
        i = idx[sh.bus]
        y[range(i, i + 3), range(i, i + 3)] += sh.y
    for ld in net.loads:
        i = idx[ld.bus]
        y[range(i, i + 3), range(i, i + 3)] += np.conj(ld.s_z) / net.v_nominal[ld.bus] ** 2
        sp[i : i + 3] += ld.s_p
        si[i : i + 3] += ld.s_i
    return Nodal(y, v0, vn, slack, sp, si, idx, src_idx)
