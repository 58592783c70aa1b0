"""The estimator's engine: a node-level measurement model and its weighted-least-squares solve.

Nothing here knows about profiles or meters' register maps: ``meas.estimate.build`` turns a
profile and its readings into these terms, and a test can build a positive-sequence textbook
network (one node per bus) with the same terms. Quantities are complex node voltages (the
state, in units of each node's nominal magnitude), two-port currents ``Y(θ) v``, ZIP element
currents and meter readings with a voltage gain and a current gain.

Two-port admittance derivatives with respect to their parameters are forward differences of
the element builders (``meas.network.elements``), the one owner of those formulas. The solve
is ``meas.estimate.solver``.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

CArray = NDArray[np.complex128]
FArray = NDArray[np.float64]
IArray = NDArray[np.int64]

# reading codes (see ``slot_keys``)
V, VLL, IMAG, P, Q, PT, QT, IANG, VANG = range(9)


@dataclass(frozen=True)
class TwoPortTerm:
    """A line or transformer: currents into it at both ends = ``y_of(params) @ v[nodes]``."""

    name: str
    nodes: IArray  # (2p,) step-local node indices, from end then to end
    y_of: Callable[[FArray], CArray]  # the values of ``params`` -> (2p, 2p) admittance
    params: tuple[int, ...]  # indices into the shared parameter vector


@dataclass(frozen=True)
class LoadTerm:
    """A ZIP element (load or shunt): S = kp·(Pz r² + Pi r + Pp) + j kq·(Qz r² + Qi r + Qp)."""

    name: str
    nodes: IArray  # (p,)
    vn: FArray  # (p,) nominal magnitude, V
    zp: FArray  # (3, p) Z, I and P parts of P at nominal voltage
    zq: FArray  # (3, p) the same for Q
    kp: int = -1  # parameter index of the P multiplier, -1 = fixed at 1
    kq: int = -1


Current = tuple[tuple[str, int, int, float], ...]  # (kind "t"|"l", term index, end, sign)


@dataclass(frozen=True)
class MeterTerm:
    """One meter in one step: which node voltages it sees, which current, which readings."""

    name: str
    v_nodes: IArray  # (p,)
    current: Current  # empty: the meter's branch carries nothing in this step
    gv: int  # shared index of the voltage gain, -1 = none (fixed at 1)
    gi: int
    slots: IArray  # which reading slots are measured (``slot_keys`` order)
    z: FArray  # measured values (angles in radians)
    sigma: FArray
    wiring: FArray | None = None  # (p, p) what the current inputs see: a hypothesis under test


@dataclass(frozen=True)
class KclTerm:
    """Kirchhoff at a bus without a free injection: the currents sum to zero (2p rows)."""

    name: str
    current: Current
    sigma: float


@dataclass(frozen=True)
class StepModel:
    nodes: int
    vn: FArray  # nominal magnitude per node (state scaling)
    v0: CArray  # flat start
    ref: IArray  # nodes whose imaginary part is held at 0 (one per island)
    two_ports: tuple[TwoPortTerm, ...]
    loads: tuple[LoadTerm, ...]
    meters: tuple[MeterTerm, ...]
    kcl: tuple[KclTerm, ...]
    phases: int = 3


@dataclass(frozen=True)
class Prior:
    """A pseudo-measurement on a shared unknown: value ``mean`` with standard uncertainty ``std``."""

    name: str
    mean: float
    std: float


def slot_keys(p: int) -> tuple[tuple[str, int], ...]:
    """(reading key, code) of every slot a meter with ``p`` phases can have, in slot order."""
    if p == 1:
        return (("v_ln.A", V), ("i.A", IMAG), ("p.T", P), ("q.T", Q))
    return (
        ("v_ln.A", V), ("v_ln.B", V), ("v_ln.C", V),
        ("v_ll.AB", VLL), ("v_ll.BC", VLL), ("v_ll.CA", VLL),
        ("i.A", IMAG), ("i.B", IMAG), ("i.C", IMAG),
        ("p.A", P), ("p.B", P), ("p.C", P),
        ("q.A", Q), ("q.B", Q), ("q.C", Q),
        ("p.T", PT), ("q.T", QT),
        ("i_ang.A", IANG), ("i_ang.B", IANG), ("i_ang.C", IANG),
        ("v_ang.B", VANG), ("v_ang.C", VANG),
    )  # fmt: skip


ANGLE_SLOTS = frozenset(k for k, c in slot_keys(3) if c in (IANG, VANG))


class _Quantity:
    """A complex vector with its derivative with respect to the real unknowns of one step."""

    __slots__ = ("val", "d")

    def __init__(self, val: CArray, d: CArray):
        self.val, self.d = val, d


def _state_map(step: StepModel) -> tuple[CArray, int]:
    """Tc with v = Tc @ x_state: real and imaginary part per node (but refs), scaled by vn."""
    n = step.nodes
    refs = set(int(r) for r in step.ref)
    cols = 2 * n - len(refs)
    tc = np.zeros((n, cols), complex)
    k = 0
    for i in range(n):
        tc[i, k] = step.vn[i]
        k += 1
    for i in range(n):
        if i in refs:
            continue
        tc[i, k] = 1j * step.vn[i]
        k += 1
    return tc, cols


@dataclass
class _Layout:
    ns: int  # shared unknowns
    offsets: list[int]  # first column of each step's state
    tcs: list[CArray]
    n: int


def layout(shared: int, steps: Sequence[StepModel]) -> _Layout:
    offs, tcs, at = [], [], shared
    for st in steps:
        tc, cols = _state_map(st)
        offs.append(at)
        tcs.append(tc)
        at += cols
    return _Layout(shared, offs, tcs, at)


def initial(lay: _Layout, steps: Sequence[StepModel], shared0: FArray) -> FArray:
    x = np.zeros(lay.n)
    x[: lay.ns] = shared0
    for st, off, tc in zip(steps, lay.offsets, lay.tcs, strict=True):
        xs, *_ = np.linalg.lstsq(np.vstack([tc.real, tc.imag]), np.r_[st.v0.real, st.v0.imag])
        x[off : off + tc.shape[1]] = xs
    return x


_EMPTY = np.zeros(0)
_YCACHE: dict[int, tuple[bytes, CArray, FArray | None, list[CArray]]] = {}
DY_REFRESH = 1e-3  # recompute dY/dθ once a parameter moved this much (relative)


def reset_admittances() -> None:
    """Forget cached admittances and derivatives (each solve starts from the same state)."""
    _YCACHE.clear()


def _admittance(t: TwoPortTerm, pv: FArray, derivs: bool) -> tuple[CArray, list[CArray]]:
    """Y(θ) and dY/dθ of a two-port; steps share the builder, so one call serves them all.

    dY/dθ is a forward difference, recomputed only when θ moved by ``DY_REFRESH``: Gauss-Newton
    converges to the same point with a slightly stale Jacobian (the residual is always exact);
    the gain matrix at the solution is then off by at most that share in the parameter columns,
    which moves posterior parameter uncertainties by about as much (our trade for speed).
    """
    key = id(t.y_of)
    hit = _YCACHE.get(key)
    raw = pv.tobytes()
    y = hit[1] if hit is not None and hit[0] == raw else t.y_of(pv)
    dpv, dys = (hit[2], hit[3]) if hit is not None else (None, [])
    if derivs and not (
        dpv is not None
        and len(dys) == len(pv)
        and np.all(np.abs(dpv - pv) <= DY_REFRESH * np.maximum(1.0, np.abs(pv)))
    ):
        dys = []
        for j in range(len(pv)):
            h = 1e-7 * max(1.0, abs(pv[j]))
            pj = pv.copy()
            pj[j] += h
            dys.append((t.y_of(pj) - y) / h)
        dpv = pv.copy()
    if len(_YCACHE) > 4096:
        _YCACHE.clear()
    _YCACHE[key] = (raw, y, dpv, dys)
    return y, dys


def _currents(
    step: StepModel, v: CArray, dv: CArray, shared: FArray, ns: int, derivs: bool = True
) -> tuple[list[_Quantity], list[_Quantity]]:
    """Every two-port's and ZIP element's current with its derivative ([shared | state])."""
    tps: list[_Quantity] = []
    for t in step.two_ports:
        pv = shared[list(t.params)] if t.params else _EMPTY
        y, dys = _admittance(t, pv, derivs)
        vt = v[t.nodes]
        cur = y @ vt
        if not derivs:
            tps.append(_Quantity(cur, dv[t.nodes, :0]))
            continue
        d = y @ dv[t.nodes]
        for j, pi in enumerate(t.params):
            d[:, pi] = dys[j] @ vt
        tps.append(_Quantity(cur, d))
    lds: list[_Quantity] = []
    for ld in step.loads:
        vl, dvl = v[ld.nodes], dv[ld.nodes]
        m = np.abs(vl)
        r = m / ld.vn
        kp = shared[ld.kp] if ld.kp >= 0 else 1.0
        kq = shared[ld.kq] if ld.kq >= 0 else 1.0
        pr = ld.zp[0] * r * r + ld.zp[1] * r + ld.zp[2]
        qr = ld.zq[0] * r * r + ld.zq[1] * r + ld.zq[2]
        s = kp * pr + 1j * kq * qr
        ds = (kp * (2 * ld.zp[0] * r + ld.zp[1]) + 1j * kq * (2 * ld.zq[0] * r + ld.zq[1])) / ld.vn
        cv = np.conj(vl)
        if not derivs:
            lds.append(_Quantity(np.conj(s) / cv, dvl[:, :0]))
            continue
        dm = (cv[:, None] * dvl).real / m[:, None]
        d = (np.conj(ds) / cv)[:, None] * dm - (np.conj(s) / cv**2)[:, None] * np.conj(dvl)
        if ld.kp >= 0:
            d[:, ld.kp] += pr / cv
        if ld.kq >= 0:
            d[:, ld.kq] += -1j * qr / cv
        lds.append(_Quantity(np.conj(s) / cv, d))
    return tps, lds


def _sum(cur: Current, tps: list[_Quantity], lds: list[_Quantity], p: int, nc: int) -> _Quantity:
    val = np.zeros(p, complex)
    d = np.zeros((p, nc), complex)
    for kind, idx, end, sign in cur:
        q = tps[idx] if kind == "t" else lds[idx]
        sl = slice(end * p, (end + 1) * p)
        val += sign * q.val[sl]
        d += sign * q.d[sl]
    return _Quantity(val, d)


def _mag(val: CArray, d: CArray) -> tuple[FArray, FArray]:
    m = np.abs(val)
    safe = np.where(m > 0, m, 1.0)
    return m, (val.real[:, None] * d.real + val.imag[:, None] * d.imag) / safe[:, None]


def _ang(val: CArray, d: CArray) -> tuple[FArray, FArray]:
    safe = np.where(np.abs(val) > 0, val, 1.0)
    return np.angle(val), (d / safe[:, None]).imag


def _meter_slots(
    mt: MeterTerm, vq: _Quantity, iq: _Quantity, shared: FArray, p: int
) -> tuple[FArray, FArray]:
    """Every slot's model value and derivative (gains applied)."""
    gv = shared[mt.gv] if mt.gv >= 0 else 1.0
    gi = shared[mt.gi] if mt.gi >= 0 else 1.0
    v, dv, i, di = vq.val, vq.d, iq.val, iq.d
    s = v * np.conj(i)
    ds = np.conj(i)[:, None] * dv + v[:, None] * np.conj(di)
    vm, dvm = _mag(v, dv)
    im, dim = _mag(i, di)
    if p == 1:
        f = np.r_[vm, im, s.real, s.imag]
        df = np.vstack([dvm, dim, ds.real, ds.imag])
        kinds = _KINDS1
    else:
        nc = dv.shape[1]
        f = np.empty(22)
        df = np.empty((22, nc))
        f[0:3], df[0:3] = vm, dvm
        if mt.slots.size and np.any((mt.slots >= 3) & (mt.slots < 6)):
            f[3:6], df[3:6] = _mag(v - v[_NEXT], dv - dv[_NEXT])
        f[6:9], df[6:9] = im, dim
        f[9:12], df[9:12] = s.real, ds.real
        f[12:15], df[12:15] = s.imag, ds.imag
        f[15], df[15] = f[9:12].sum(), df[9:12].sum(0)
        f[16], df[16] = f[12:15].sum(), df[12:15].sum(0)
        if mt.slots[-1] >= 17:
            ia, dia = _ang(i, di)
            va, dva = _ang(v, dv)
            f[17:20], df[17:20] = ia - va[0], dia - dva[0]
            f[20:22], df[20:22] = va[1:] - va[0], dva[1:] - dva[0]
        kinds = _KINDS3
    f, df, kinds = f[mt.slots], df[mt.slots], kinds[mt.slots]
    gain = np.array([gv, gi, gv * gi, 1.0])[kinds]
    out, dout = f * gain, df * gain[:, None]
    if mt.gv >= 0:
        dout[:, mt.gv] += f * np.array([1.0, 0.0, gi, 0.0])[kinds]
    if mt.gi >= 0:
        dout[:, mt.gi] += f * np.array([0.0, 1.0, gv, 0.0])[kinds]
    return out, dout


_NEXT = np.array([1, 2, 0])
_KINDS1 = np.array([0, 1, 2, 2])
_KINDS3 = np.r_[[0] * 6, [1] * 3, [2] * 8, [3] * 5]


def angle_rows(mt: MeterTerm, p: int) -> NDArray[np.bool_]:
    if p == 1:
        return np.zeros(len(mt.slots), bool)
    return np.asarray(mt.slots) >= 17


@dataclass
class StepEval:
    r: FArray  # weighted residual (z - h) / sigma
    j: FArray  # weighted Jacobian, columns [shared | this step's state]
    h: FArray  # model values (unweighted)
    meter_rows: list[slice]  # rows of each meter
    kcl_rows: slice


def evaluate(step: StepModel, tc: CArray, xs: FArray, shared: FArray) -> StepEval:
    ns, p = len(shared), step.phases
    nc = ns + tc.shape[1]
    v = tc @ xs
    dv = np.zeros((step.nodes, nc), complex)
    dv[:, ns:] = tc
    tps, lds = _currents(step, v, dv, shared, ns)
    rs, js, hs, rows = [], [], [], []
    at = 0
    zero = _Quantity(np.zeros(p, complex), np.zeros((p, nc), complex))
    for mt in step.meters:
        vq = _Quantity(v[mt.v_nodes], dv[mt.v_nodes])
        iq = _sum(mt.current, tps, lds, p, nc) if mt.current else zero
        if mt.wiring is not None:
            iq = _Quantity(mt.wiring @ iq.val, mt.wiring @ iq.d)
        h, dh = _meter_slots(mt, vq, iq, shared, p)
        res = mt.z - h
        ang = angle_rows(mt, p)
        res[ang] = np.mod(res[ang] + math.pi, 2 * math.pi) - math.pi
        rs.append(res / mt.sigma)
        js.append(dh / mt.sigma[:, None])
        hs.append(h)
        rows.append(slice(at, at + len(h)))
        at += len(h)
    k0 = at
    for kc in step.kcl:
        q = _sum(kc.current, tps, lds, p, nc)
        rs.append(np.r_[-q.val.real, -q.val.imag] / kc.sigma)
        js.append(np.vstack([q.d.real, q.d.imag]) / kc.sigma)
        hs.append(np.r_[q.val.real, q.val.imag])
        at += 2 * p
    if not rs:
        return StepEval(np.zeros(0), np.zeros((0, nc)), np.zeros(0), rows, slice(k0, at))
    return StepEval(np.concatenate(rs), np.vstack(js), np.concatenate(hs), rows, slice(k0, at))
