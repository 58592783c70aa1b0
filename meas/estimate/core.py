"""The estimator's engine: a node-level measurement model and its weighted-least-squares solve.

Nothing here knows about profiles or meters' register maps: ``meas.estimate.build`` turns a
profile and its readings into these terms, and a test can build a positive-sequence textbook
network (one node per bus) with the same terms. Quantities are complex node voltages (the
state, in units of each node's nominal magnitude), two-port currents ``Y(θ) v``, ZIP element
currents and meter readings with a voltage gain and a current gain.

Two-port admittance derivatives with respect to their parameters are forward differences of
the element builders (``meas.network.elements``), the one owner of those formulas. A step's
readings and Jacobian are evaluated as arrays by ``meas.estimate.measurement`` on the index
arrays of ``meas.estimate.plan``; the solve is
``meas.estimate.solver``.
"""

from __future__ import annotations

import functools
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


def structure_key(step: StepModel) -> tuple[object, ...]:
    """What two steps must share for one's index arrays and solution to serve the other: the
    topology (the builder caches one per switch state, so its two-ports tuple is one object;
    a holder of this key keeps that tuple so its id stays unique) and the meters with their
    measured slots, currents and wiring. Readings and their uncertainties may differ."""
    return (
        id(step.two_ports),
        step.nodes,
        tuple(
            (
                mt.name,
                mt.slots.tobytes(),
                mt.current,
                mt.gv,
                mt.gi,
                None if mt.wiring is None else mt.wiring.tobytes(),
            )
            for mt in step.meters
        ),
    )


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


_Y_MEMO: dict[tuple[Callable[[FArray], CArray], bytes], CArray] = {}
_DY_MEMO: dict[tuple[Callable[[FArray], CArray], bytes], list[CArray]] = {}
_DY_AT: dict[Callable[[FArray], CArray], tuple[FArray, list[CArray]]] = {}
DY_REFRESH = 1e-5  # recompute dY/dθ once a parameter moved this much (relative)
_MEMO_MAX = 1024


def reset_admittances() -> None:
    """Forget where dY/dθ was last taken (each solve starts from the same state).

    Y(θ) and dY/dθ at given θ are pure functions of θ and stay memoized across solves (every
    solve starts at the same prior means); which θ the derivative was last taken at is what a
    solve must not inherit.
    """
    _DY_AT.clear()


def admittance(t: TwoPortTerm, pv: FArray, derivs: bool) -> tuple[CArray, list[CArray]]:
    """Y(θ) and dY/dθ of a two-port; steps share the builder, so one call serves them all.

    dY/dθ is a forward difference, recomputed only when θ moved by ``DY_REFRESH``: the residual
    is always exact, and a Jacobian that stale moves the Gauss-Newton fixed point and the gain
    matrix by about that share in the parameter columns. At 1e-3 that made results depend on
    where the solve started (a few 1e-4 of a figure); at 1e-5 they agree with an exact-Jacobian
    solve to about 1e-6 (tests/estimate/test_solver_starts.py), for one refresh or two a solve.
    """
    for memo_table in (_Y_MEMO, _DY_MEMO):  # oldest first: memory stays flat over a long day
        while len(memo_table) >= _MEMO_MAX:
            memo_table.pop(next(iter(memo_table)))
    key = (t.y_of, pv.tobytes())
    y = _Y_MEMO.get(key)
    if y is None:
        y = _Y_MEMO[key] = t.y_of(pv)
    hit = _DY_AT.get(t.y_of)
    dys: list[CArray] = hit[1] if hit is not None else []
    if derivs and not (
        hit is not None
        and len(dys) == len(pv)
        and np.all(np.abs(hit[0] - pv) <= DY_REFRESH * np.maximum(1.0, np.abs(pv)))
    ):
        memo = _DY_MEMO.get(key)
        if memo is None:
            memo = []
            for j in range(len(pv)):
                h = 1e-7 * max(1.0, abs(pv[j]))
                pj = pv.copy()
                pj[j] += h
                memo.append((t.y_of(pj) - y) / h)
            _DY_MEMO[key] = memo
        dys = memo
        _DY_AT[t.y_of] = (pv.copy(), dys)
    return y, dys


@dataclass
class StepEval:
    """One step's weighted residuals and Jacobian at a point.

    The Jacobian is held in two parts: ``jc``, dense over the columns an element or a
    reading's phasors depend on (model parameters and this step's state: ``cc``), and the
    meter gains: each meter's rows depend on its own voltage and current gain only
    (``gains``, ``gval``). At 32 meters the gains are two thirds of the columns; the dense
    form ``j`` is built only when a statistic asks for it.
    """

    r: FArray  # weighted residual (z - h) / sigma
    h: FArray  # model values (unweighted)
    meter_rows: list[slice]  # rows of each meter (consecutive from row 0, none empty)
    kcl_rows: slice
    jc: FArray  # (rows, len(cc)) weighted Jacobian over the columns ``cc``
    cc: IArray  # columns of ``jc`` in [shared | this step's state]
    gains: IArray  # (meters, 2) shared column of each meter's voltage and current gain, -1 none
    gval: FArray  # (rows, 2) each row's weighted derivative by its meter's two gains
    ncols: int  # shared unknowns + this step's state

    @property
    def starts(self) -> IArray:
        """First row of each meter."""
        return np.array([sl.start for sl in self.meter_rows], np.int64)

    def row_gains(self) -> IArray:
        """(rows, 2): the gain columns of each row's meter (-1 none, and for Kirchhoff rows)."""
        out = np.full((len(self.r), 2), -1, np.int64)
        if self.meter_rows:
            n = self.meter_rows[-1].stop
            out[:n] = np.repeat(self.gains, np.diff(np.r_[self.starts, n]), axis=0)
        return out

    @functools.cached_property
    def j(self) -> FArray:
        """The weighted Jacobian, dense, columns [shared | this step's state]."""
        out = np.zeros((len(self.r), self.ncols))
        out[:, self.cc] = self.jc
        rg = self.row_gains()
        for s in range(2):
            sel = rg[:, s] >= 0
            out[np.nonzero(sel)[0], rg[sel, s]] += self.gval[sel, s]
        return out
