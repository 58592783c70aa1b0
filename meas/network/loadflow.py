"""Three-phase load flow in the phase frame: Newton-Raphson on the phase-node admittance matrix.

Method: ``meas.network.admittance.assemble`` gives three phase nodes (phase-to-ground
voltages) per energized bus and three internal EMF nodes per finite source, which (like the
nodes of an ideal source's bus) are the slack, with the nodal admittance matrix Y and the
voltage-dependent constant-current and constant-power load injections. Unknowns are the angle
and magnitude of every non-slack node; the Jacobian is the polar form of MATPOWER's
``dSbus_dV`` (Zimmerman, Murillo-Sanchez & Thomas, MATPOWER, IEEE Trans. Power Systems 26(1),
2011) plus the derivative of the constant-current loads. Because the network is solved node by
node in the phase frame, unbalanced loads, mutual line coupling and transformer vector groups
need no special handling, and a balanced network reduces exactly to a positive-sequence load
flow.

Convergence: max over non-slack nodes of |S_calc - S_spec| (complex, per phase, VA) below
``tol_pu * s_base_va`` (``DEFAULT_TOL_PU`` = 1e-10 pu, i.e. 3 uVA on the 30 kVA demo bench).
Non-convergence raises ``SolverError`` naming iterations and mismatch.
Dense linear algebra is used: the bench has tens of nodes and a 100-bus feeder solves in
milliseconds (``benchmarks/bench_solver.py``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import BenchwalkError
from .admittance import Network, Nodal, assemble
from .elements import LoadModel, SourceModel

DEFAULT_TOL_PU = 1e-10
DEFAULT_MAX_ITER = 30


class SolverError(BenchwalkError):
    """The load flow did not converge (loads beyond what the sources can carry, or bad data)."""


@dataclass(frozen=True)
class Solution:
    """Phasors of one solved switch state (rms, bench-side SI, phase A-B-C order).

    ``v``: bus -> (3,) phase-to-ground voltages (zero on de-energized buses).
    ``i_from``/``s_from``: branch -> (3,) current / complex power flowing *into* the branch at
    its ``from_bus``; ``i_to``/``s_to`` the same at ``to_bus`` (lines and transformers only).
    Per-phase S = V I*. Switched-out and dead branches carry zeros.
    """

    v: dict[str, np.ndarray]
    i_from: dict[str, np.ndarray]
    i_to: dict[str, np.ndarray]
    s_from: dict[str, np.ndarray]
    s_to: dict[str, np.ndarray]
    energized: dict[str, bool]
    iterations: int
    max_mismatch_va: float
    tol_va: float
    converged: bool

    def current_into(self, branch: str, bus: str, from_bus: str) -> np.ndarray:
        """Current into ``branch`` at ``bus`` (``from_bus`` names the branch's from end)."""
        return self.i_from[branch] if bus == from_bus else self.i_to[branch]

    def power_into(self, branch: str, bus: str, from_bus: str) -> np.ndarray:
        return self.s_from[branch] if bus == from_bus else self.s_to[branch]


def _frozen(a: np.ndarray) -> np.ndarray:
    a.setflags(write=False)
    return a


def _load_power(ld: LoadModel, vm: np.ndarray, vn: float) -> np.ndarray:
    r = vm / vn
    return ld.s_z * r**2 + ld.s_i * r + ld.s_p


def newton_jacobian(
    y: np.ndarray, v: np.ndarray, si: np.ndarray, vn: np.ndarray, pq: np.ndarray
) -> np.ndarray:
    """d(injection mismatch)/d(angle, magnitude) at the PQ nodes: the Newton step's matrix.

    Rows: real then imaginary mismatch; columns: angles then magnitudes. ``si`` is the constant-
    current part of the load, scaled by |V| / ``vn``. The calibration's sensitivities factorise
    the same matrix at the converged point (implicit function theorem).
    """
    n = len(v)
    vu = v / np.abs(v)
    cur = y @ v
    ds_dvm = v[:, None] * np.conj(y * vu[None, :])
    ds_dvm[np.diag_indices(n)] += np.conj(cur) * vu + si / vn
    ds_dva = -1j * v[:, None] * np.conj(y * v[None, :])
    ds_dva[np.diag_indices(n)] += 1j * v * np.conj(cur)
    a = ds_dva[np.ix_(pq, pq)]
    m = ds_dvm[np.ix_(pq, pq)]
    return np.block([[a.real, m.real], [a.imag, m.imag]])


def solve(
    net: Network,
    *,
    tol_pu: float = DEFAULT_TOL_PU,
    max_iter: int = DEFAULT_MAX_ITER,
    raise_on_failure: bool = True,
    start: Solution | None = None,
) -> Solution:
    """Solve the load flow of ``net``; raises ``SolverError`` unless it converges.

    ``start``: a solution of a nearby model of the same switch state, whose bus voltages are
    the first guess (a parameter fit re-solves slightly changed models: one or two iterations
    instead of four or five). Slack nodes keep their own values.
    """
    tol_va = tol_pu * net.s_base_va
    nodal = assemble(net)
    y, slack, sp, si, vn = nodal.y, nodal.slack, nodal.sp, nodal.si, nodal.vn
    pq = np.flatnonzero(~slack)
    npq = len(pq)
    v = nodal.v0.copy()
    if start is not None:
        for bus, i in nodal.idx.items():
            guess = start.v.get(bus)
            if guess is not None and np.all(np.abs(guess) > 0) and not slack[i]:
                v[i : i + 3] = guess
    iterations, max_mis, converged = 0, 0.0, True
    if npq:
        converged = False
        for it in range(max_iter + 1):
            vm = np.abs(v)
            cur = y @ v
            mis = v * np.conj(cur) + sp + si * vm / vn  # computed minus specified injection
            max_mis = float(np.max(np.abs(mis[pq])))
            iterations = it
            if not np.isfinite(max_mis):
                break
            if max_mis <= tol_va:
                converged = True
                break
            if it == max_iter:
                break
            jac = newton_jacobian(y, v, si, vn, pq)
            try:
                dx = np.linalg.solve(jac, -np.r_[mis[pq].real, mis[pq].imag])
            except np.linalg.LinAlgError:
                raise SolverError(
                    f"load flow of {net.path}: singular Jacobian at iteration {it} (a part of the "
                    "network with no path to ground or no load, e.g. an unloaded Yy0 transformer); "
                    "check the transformer vector groups"
                ) from None
            ang = np.angle(v[pq]) + dx[:npq]
            mag = vm[pq] + dx[npq:]
            v[pq] = mag * np.exp(1j * ang)
    if not converged and raise_on_failure:
        raise SolverError(
            f"load flow of {net.path} did not converge after {iterations} iterations "
            f"(max mismatch {max_mis:.3g} VA, needed {tol_va:.3g} VA): the loads may exceed what the "
            "source can supply; check load, source and line parameters"
        )
    return _results(net, nodal, v, iterations, max_mis, tol_va, converged)


def _results(
    net: Network,
    nodal: Nodal,
    v: np.ndarray,
    iterations: int,
    max_mis: float,
    tol_va: float,
    converged: bool,
) -> Solution:
    y, idx, src_idx, sp, si, vn = nodal.y, nodal.idx, nodal.src_idx, nodal.sp, nodal.si, nodal.vn
    zero = np.zeros(3, dtype=complex)
    vb = {b: v[idx[b] : idx[b] + 3].copy() if b in idx else zero.copy() for b in net.buses}
    i_from = {br: zero.copy() for br in net.branch_buses}
    i_to = {br: zero.copy() for br, buses in net.branch_buses.items() if len(buses) == 2}
    for tp in net.two_ports:
        cur = tp.y @ np.r_[vb[tp.from_bus], vb[tp.to_bus]]
        i_from[tp.branch], i_to[tp.branch] = cur[:3], cur[3:]
    for sh in net.shunts:
        i_from[sh.branch] = sh.y * vb[sh.bus]
    for ld in net.loads:
        vv = vb[ld.bus]
        i_from[ld.branch] = np.conj(_load_power(ld, np.abs(vv), net.v_nominal[ld.bus]) / vv)
    ideal: list[SourceModel] = []
    for s in net.sources:
        if s.y is None:
            ideal.append(s)
        else:
            e = v[src_idx[s.branch] : src_idx[s.branch] + 3]
            i_from[s.branch] = s.y @ (vb[s.bus] - e)
    for s in ideal:
        # KCL at the held bus: the ideal source takes whatever the rest of the bus does not
        i = idx[s.bus]
        vv = v[i : i + 3]
        rest = y[i : i + 3] @ v + np.conj(
            (sp[i : i + 3] + si[i : i + 3] * np.abs(vv) / vn[i : i + 3]) / vv
        )
        i_from[s.branch] = -rest  # one ideal source per bus (element_models enforces it)
    s_from = {br: vb[net.branch_buses[br][0]] * np.conj(c) for br, c in i_from.items()}
    s_to = {br: vb[net.branch_buses[br][1]] * np.conj(c) for br, c in i_to.items()}
    frz = {
        k: {b: _frozen(a) for b, a in d.items()}
        for k, d in (
            ("v", vb),
            ("i_from", i_from),
            ("i_to", i_to),
            ("s_from", s_from),
            ("s_to", s_to),
        )
    }
    return Solution(
        energized=dict(net.energized),
        iterations=iterations,
        max_mismatch_va=max_mis,
        tol_va=tol_va,
        converged=converged,
        **frz,
    )
