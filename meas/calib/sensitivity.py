"""Derivatives of the meters' readings with respect to model parameters, from one solved load flow.

The load flow solution V(θ) is defined implicitly by the mismatch F(V, θ) = 0, so by the
implicit function theorem dV/dθ = −J_V⁻¹·∂F/∂θ, with J_V the load flow's own Newton Jacobian
at the converged point (factorised once per step and reused for every parameter). ∂F/∂θ at
fixed V needs only how the parameter changes the stamps of its own element (Y entries, load
powers, the slack EMF): those element derivatives are central differences of the nameplate
formulas (``meas.network.elements``; one branch, no load flow, step 1e-6 relative, error far
below the readings' spread; 1e-3 for a line's charging). A reading's derivative then follows from the chain rule on
|V|, |I|, P and Q. Against forward differences of the whole load flow this removes one
load flow per parameter and step, and the truncation error of the step.

The stamps repeat ``meas.network.admittance.assemble``'s rules element by element (two-ports
and finite sources into Y, shunts and the Z part of loads on the diagonal, P and I parts of
loads as injections, EMFs at slack nodes); ``tests/calib/test_sensitivity.py`` holds the two
against each other through the full-load-flow differences.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np
import scipy.linalg

from ..model import Profile
from ..network.admittance import Network, Nodal
from ..network.elements import (
    Element,
    LoadModel,
    ShuntModel,
    SourceModel,
    TwoPort,
    bus_nominal_phase_voltage,
)
from ..network.loadflow import Solution, newton_jacobian

ELEMENT_STEP = 1e-6  # relative step of the element-level central differences
# A line's charging shares the diagonal blocks with its series admittance, some 1e7 times
# larger on a short line, so a 1e-6 step would difference away most digits; the lumped pi is
# linear in B (no truncation error), and the long-line correction changes slowly.
CHARGING_STEP = 1e-3


@dataclass(frozen=True)
class Stamp:
    """What one element (or its derivative) contributes to the nodal equations, on its nodes."""

    nodes: np.ndarray  # (k,) node indices the element touches
    y: np.ndarray  # (k, k) admittance
    sp: np.ndarray  # (k,) constant-power injection (consumed, VA)
    si: np.ndarray  # (k,) constant-current injection at nominal voltage (consumed, VA)
    vs: np.ndarray  # (k,) slack voltages (EMF nodes, ideal-source buses)

    def full(self, n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(Y, sp, si) laid out on all ``n`` nodes."""
        y = np.zeros((n, n), dtype=complex)
        y[np.ix_(self.nodes, self.nodes)] = self.y
        sp = np.zeros(n, dtype=complex)
        si = np.zeros(n, dtype=complex)
        sp[self.nodes] = self.sp
        si[self.nodes] = self.si
        return y, sp, si


def _three(i: int) -> np.ndarray:
    return np.arange(i, i + 3)


def element_nodes(e: Element, nodal: Nodal) -> np.ndarray:
    """The nodes an element stamps, in the order of ``local_stamp``."""
    idx = nodal.idx
    if isinstance(e, TwoPort):
        return np.concatenate([_three(idx[e.from_bus]), _three(idx[e.to_bus])])
    bi = _three(idx[e.bus])
    if isinstance(e, SourceModel) and e.y is not None:
        return np.concatenate([bi, _three(nodal.src_idx[e.branch])])
    return bi


def local_stamp(e: Element, v_nominal: Mapping[str, float]) -> tuple[np.ndarray, ...]:
    """(y, sp, si, vs) of an element on its own nodes, by ``assemble``'s rules."""
    zero3 = np.zeros(3, dtype=complex)
    if isinstance(e, TwoPort):
        z6 = np.zeros(6, dtype=complex)
        return e.y, z6, z6, z6
    if isinstance(e, SourceModel):
        if e.y is None:
            return np.zeros((3, 3), dtype=complex), zero3, zero3, e.emf
        z6 = np.zeros(6, dtype=complex)
        return np.block([[e.y, -e.y], [-e.y, e.y]]), z6, z6, np.r_[zero3, e.emf]
    if isinstance(e, ShuntModel):
        return np.diag(e.y).astype(complex), zero3, zero3, zero3
    y = np.diag(np.conj(e.s_z) / v_nominal[e.bus] ** 2)
    return y, np.asarray(e.s_p, complex), np.asarray(e.s_i, complex), zero3


class ElementDerivative:
    """One parameter's element below and above its value: its stamp and current derivatives.

    Computed once per Jacobian and laid onto each step's nodes (``on``); a per-step EMF
    multiplier ``scale`` multiplies a source's EMF and so its derivative.
    """

    def __init__(self, branch: str, lo: Element, hi: Element, width: float, profile: Profile):
        self.branch, self.lo, self.hi, self.width = branch, lo, hi, width
        vnom = bus_nominal_phase_voltage(profile)
        a, b = local_stamp(lo, vnom), local_stamp(hi, vnom)
        self.parts = tuple((y - x) / width for x, y in zip(a, b, strict=True))

    def on(self, live: Element, nodal: Nodal, scale: float = 1.0) -> Stamp:
        dy, dsp, dsi, dvs = self.parts
        return Stamp(element_nodes(live, nodal), dy, dsp, dsi, dvs * scale)

    def current(
        self, live: Element, bus: str, nodal: Nodal, net: Network, v: np.ndarray, scale: float
    ) -> np.ndarray:
        """The direct term: the current's change through the element's own matrices at fixed V."""
        lo, hi = self.lo, self.hi
        if scale != 1.0 and isinstance(lo, SourceModel) and isinstance(hi, SourceModel):
            lo, hi = replace(lo, emf=lo.emf * scale), replace(hi, emf=hi.emf * scale)
        return (
            branch_current(hi, bus, nodal, net, v) - branch_current(lo, bus, nodal, net, v)
        ) / self.width


def emf_stamp(net: Network, nodal: Nodal, models: Mapping[str, Element]) -> Stamp:
    """The derivative by a step's EMF multiplier: every source's EMF at its slack nodes."""
    nodes, vs = [], []
    for src in net.sources:
        base = models[src.branch]
        assert isinstance(base, SourceModel)
        at = nodal.idx[src.bus] if src.y is None else nodal.src_idx[src.branch]
        nodes.append(_three(at))
        vs.append(base.emf)
    k = 3 * len(nodes)
    zero = np.zeros(k, dtype=complex)
    return Stamp(np.concatenate(nodes), np.zeros((k, k), complex), zero, zero, np.concatenate(vs))


def node_voltages(nodal: Nodal, net: Network, sol: Solution) -> np.ndarray:
    """The solved node voltage vector in ``nodal``'s layout (buses, then source EMF nodes)."""
    v = nodal.v0.copy()
    for bus, i in nodal.idx.items():
        v[i : i + 3] = sol.v[bus]
    return v


class StepSensitivity:
    """dV/dθ for one solved switch state: the Newton Jacobian factorised once, any number of θ."""

    def __init__(self, nodal: Nodal, v: np.ndarray):
        self.nodal, self.v = nodal, v
        self.pq = pq = np.flatnonzero(~nodal.slack)
        jac = newton_jacobian(nodal.y, v, nodal.si, nodal.vn, pq)
        self.lu = scipy.linalg.lu_factor(jac, check_finite=False)

    def dv(self, stamps: Sequence[Stamp]) -> np.ndarray:
        """(n, k) derivatives of every node voltage, one column per stamp derivative."""
        v, nodal, pq = self.v, self.nodal, self.pq
        n, k = len(v), len(stamps)
        out = np.zeros((n, k), dtype=complex)
        if k == 0:
            return out
        vm = np.abs(v)
        df = np.empty((len(pq), k), dtype=complex)
        for c, s in enumerate(stamps):
            nodes = s.nodes
            dcur = np.zeros(n, dtype=complex)
            dcur[nodes] = s.y @ v[nodes]
            dinj = np.zeros(n, dtype=complex)
            dinj[nodes] = s.sp + s.si * vm[nodes] / nodal.vn[nodes]
            if s.vs.any():
                dcur += nodal.y[:, nodes] @ s.vs
                out[nodes, c] = s.vs
            df[:, c] = (v * np.conj(dcur) + dinj)[pq]
        dx = scipy.linalg.lu_solve(self.lu, -np.vstack([df.real, df.imag]), check_finite=False)
        npq = len(pq)
        out[pq, :] = v[pq, None] * (1j * dx[:npq] + dx[npq:] / vm[pq, None])
        return out


def branch_current(
    e: Element | None, bus: str, nodal: Nodal, net: Network, v: np.ndarray
) -> np.ndarray:
    """Current into the element at ``bus`` for node voltages ``v`` (as ``loadflow._results``)."""
    if e is None:
        return np.zeros(3, dtype=complex)
    idx = nodal.idx
    if isinstance(e, TwoPort):
        side = e.y[:3] if bus == e.from_bus else e.y[3:]
        f, t = idx[e.from_bus], idx[e.to_bus]
        return side[:, :3] @ v[f : f + 3] + side[:, 3:] @ v[t : t + 3]
    i = idx[e.bus]
    vb = v[i : i + 3]
    if isinstance(e, ShuntModel):
        return e.y * vb
    if isinstance(e, LoadModel):
        r = np.abs(vb) / net.v_nominal[e.bus]
        return np.conj((e.s_z * r**2 + e.s_i * r + e.s_p) / vb)
    if e.y is not None:
        j = nodal.src_idx[e.branch]
        return e.y @ (vb - v[j : j + 3])
    vn = nodal.vn[i : i + 3]
    rest = nodal.y[i : i + 3] @ v + np.conj(
        (nodal.sp[i : i + 3] + nodal.si[i : i + 3] * np.abs(vb) / vn) / vb
    )
    return -rest


def current_derivative(
    e: Element | None,
    bus: str,
    nodal: Nodal,
    net: Network,
    v: np.ndarray,
    dv: np.ndarray,
    stamps: Sequence[Stamp],
) -> np.ndarray:
    """(3, k) derivative of the current into ``e`` at ``bus`` through the node voltages only.

    The element's own parameter adds its direct term separately (``branch_current`` of the
    perturbed element at fixed V); for an ideal source the stamps of every element at its bus
    enter here, because its current is the rest of the bus's KCL.
    """
    k = dv.shape[1]
    if e is None or k == 0:
        return np.zeros((3, k), dtype=complex)
    idx = nodal.idx
    if isinstance(e, TwoPort):
        side = e.y[:3] if bus == e.from_bus else e.y[3:]
        f, t = idx[e.from_bus], idx[e.to_bus]
        return side[:, :3] @ dv[f : f + 3] + side[:, 3:] @ dv[t : t + 3]
    i = idx[e.bus]
    vb, dvb = v[i : i + 3], dv[i : i + 3]
    if isinstance(e, ShuntModel):
        return e.y[:, None] * dvb
    vm = np.abs(vb)
    dvm = (np.conj(vb)[:, None] * dvb).real / vm[:, None]
    if isinstance(e, LoadModel):
        vnom = net.v_nominal[e.bus]
        r = vm / vnom
        s = e.s_z * r**2 + e.s_i * r + e.s_p
        ds = (2 * e.s_z * r + e.s_i)[:, None] * (dvm / vnom)
        return np.conj(ds / vb[:, None] - (s / vb**2)[:, None] * dvb)
    if e.y is not None:
        j = nodal.src_idx[e.branch]
        return e.y @ (dvb - dv[j : j + 3])
    vn = nodal.vn[i : i + 3]
    sp, si = nodal.sp[i : i + 3], nodal.si[i : i + 3]
    inj = sp + si * vm / vn
    out = nodal.y[i : i + 3] @ dv
    n = len(v)
    for c, s in enumerate(stamps):
        if not np.isin(s.nodes, (i, i + 1, i + 2)).any():
            continue
        y, dsp, dsi = s.full(n)
        dinj = dsp[i : i + 3] + dsi[i : i + 3] * vm / vn
        out[:, c] += y[i : i + 3] @ v + np.conj(dinj / vb)
    out += np.conj((si / vn)[:, None] * dvm / vb[:, None] - (inj / vb**2)[:, None] * dvb)
    return -out


def reading_derivatives(
    v: np.ndarray, i: np.ndarray, dv: np.ndarray, di: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(3, k) derivatives of |V|, |I|, P and Q per phase (S = V I*), as ``phase_values`` orders.

    |I| has no derivative at zero current; a reading there is left at 0 (a branch carrying no
    current is not fitted: its rows are left out by the selection).
    """
    vm, im = np.abs(v), np.abs(i)
    d_vm = (np.conj(v)[:, None] * dv).real / np.where(vm > 0, vm, 1.0)[:, None]
    d_im = np.where(
        im[:, None] > 0, (np.conj(i)[:, None] * di).real / np.where(im > 0, im, 1.0)[:, None], 0.0
    )
    ds = dv * np.conj(i)[:, None] + v[:, None] * np.conj(di)
    return d_vm, d_im, ds.real, ds.imag
