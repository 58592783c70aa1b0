"""A step's index arrays: which node voltages each meter sees, which element currents sum
into its current, which slot each measured row is.

``meas.estimate.core`` holds the terms (one object per two-port, load, meter and Kirchhoff
bus); evaluating them one by one in Python cost far more than the algebra (a capture of 32
meters took most of a second). A ``StepPlan`` turns a step's terms into index arrays once;
``meas.estimate.measurement`` evaluates every meter's readings and their derivatives on them
with a few array operations.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import NDArray

from .core import (
    IANG,
    IMAG,
    VANG,
    VLL,
    Current,
    FArray,
    IArray,
    StepModel,
    slot_keys,
    structure_key,
)

_KINDS = {1: np.array([0, 1, 2, 2]), 3: np.r_[[0] * 6, [1] * 3, [2] * 8, [3] * 5]}
_CODES = {p: np.array([c for _, c in slot_keys(p)]) for p in (1, 3)}
# slots of a first pass from a flat start (no current magnitudes, no angles): see solver._smooth
SMOOTH_OK = {1: np.array([True, False, True, True]), 3: ~np.isin(_CODES[3], (IMAG, IANG))}


@dataclass(frozen=True)
class StepPlan:
    """Index arrays of one step (built once per step object, see ``plan_of``)."""

    p: int
    n_slots: int  # slots per meter (22 for three phases, 4 for one)
    v_idx: IArray  # (M, p) node of each meter's voltage inputs
    tp_nodes: IArray  # (T, 2p)
    ld_nodes: IArray  # (L, p)
    ld_vn: FArray  # (L, p)
    ld_zp: FArray  # (L, 3, p)
    ld_zq: FArray
    ld_kp: IArray  # (L,) parameter index or -1
    ld_kq: IArray
    c_wired: FArray  # (M p, n_currents): meter currents from element currents, wiring applied
    c_raw: FArray  # the same without the wiring (the phasors the diagnosis flips)
    k_mat: FArray  # (K p, n_currents): Kirchhoff sums
    k_sigma: FArray  # (K 2p,)
    rows: IArray  # (R,) flat index meter * n_slots + slot of every measured row
    meter_of_row: IArray  # (R,)
    kind: IArray  # (R,) 0 voltage gain, 1 current gain, 2 both, 3 none
    gv: IArray  # (R,) shared index of the row's voltage gain, -1 none
    gi: IArray
    z: FArray
    sigma: FArray
    angle: NDArray[np.bool_]  # (R,) rows that are angles (wrapped residuals)
    meter_rows: tuple[slice, ...]
    need_vll: bool
    need_angles: bool
    par_cols: IArray  # shared columns the elements depend on (model parameters), sorted
    par_pos: dict[int, int]  # shared column -> its place among ``par_cols``
    ld_kp_col: IArray  # (L,) compact column of the P multiplier (any value where none)
    ld_kq_col: IArray
    tp_dterm: IArray  # per two-port parameter: the term, its place in the term, its column
    tp_dparam: IArray
    tp_dcol: IArray
    meter_gains: IArray  # (M, 2) each meter's voltage and current gain column, -1 none


def _current_matrix(terms: list[tuple[Current, FArray | None]], p: int, base: list[int]) -> FArray:
    out = np.zeros((len(terms) * p, base[-1]))
    eye = np.eye(p)
    for m, (cur, wiring) in enumerate(terms):
        blk = np.zeros((p, base[-1]))
        for kind, idx, end, sign in cur:
            at = base[0] + idx * 2 * p + end * p if kind == "t" else base[1] + idx * p
            blk[:, at : at + p] += sign * eye
        out[m * p : (m + 1) * p] = blk if wiring is None else wiring @ blk
    return out


def build_plan(step: StepModel) -> StepPlan:
    p = step.phases
    t_, l_ = len(step.two_ports), len(step.loads)
    base = [0, t_ * 2 * p, t_ * 2 * p + l_ * p]
    ms = step.meters
    n_slots = len(slot_keys(p))
    rows, meter_of, kinds, gv, gi, z, sig, slices = [], [], [], [], [], [], [], []
    at = 0
    for m, mt in enumerate(ms):
        s = np.asarray(mt.slots, np.int64)
        rows.append(m * n_slots + s)
        meter_of.append(np.full(len(s), m, np.int64))
        kinds.append(_KINDS[p][s])
        gv.append(np.full(len(s), mt.gv, np.int64))
        gi.append(np.full(len(s), mt.gi, np.int64))
        z.append(np.asarray(mt.z, float))
        sig.append(np.asarray(mt.sigma, float))
        slices.append(slice(at, at + len(s)))
        at += len(s)

    def cat(xs: list[NDArray], dtype: type) -> NDArray:
        return np.concatenate(xs).astype(dtype) if xs else np.zeros(0, dtype)

    r = cat(rows, np.int64)
    codes = _CODES[p][r % n_slots] if len(r) else np.zeros(0, np.int64)
    ld = step.loads
    used = {c for t in step.two_ports for c in t.params}
    used |= {c for x in ld for c in (x.kp, x.kq) if c >= 0}
    par = sorted(used)
    return StepPlan(
        p=p,
        n_slots=n_slots,
        v_idx=np.array([mt.v_nodes for mt in ms], np.int64).reshape(len(ms), p),
        tp_nodes=np.array([t.nodes for t in step.two_ports], np.int64).reshape(t_, 2 * p),
        ld_nodes=np.array([x.nodes for x in ld], np.int64).reshape(l_, p),
        ld_vn=np.array([x.vn for x in ld], float).reshape(l_, p),
        ld_zp=np.array([x.zp for x in ld], float).reshape(l_, 3, p),
        ld_zq=np.array([x.zq for x in ld], float).reshape(l_, 3, p),
        ld_kp=np.array([x.kp for x in ld], np.int64),
        ld_kq=np.array([x.kq for x in ld], np.int64),
        c_wired=_current_matrix([(mt.current, mt.wiring) for mt in ms], p, base),
        c_raw=_current_matrix([(mt.current, None) for mt in ms], p, base),
        k_mat=_current_matrix([(kc.current, None) for kc in step.kcl], p, base),
        k_sigma=np.repeat([kc.sigma for kc in step.kcl], 2 * p).astype(float),
        rows=r,
        meter_of_row=cat(meter_of, np.int64),
        kind=cat(kinds, np.int64),
        gv=cat(gv, np.int64),
        gi=cat(gi, np.int64),
        z=cat(z, float),
        sigma=cat(sig, float),
        angle=np.isin(codes, (IANG, VANG)) if p == 3 else np.zeros(len(r), bool),
        meter_rows=tuple(slices),
        need_vll=bool(p == 3 and np.any(codes == VLL)),
        need_angles=bool(p == 3 and np.any(np.isin(codes, (IANG, VANG)))),
        par_cols=np.array(par, np.int64),
        par_pos={c: k for k, c in enumerate(par)},
        ld_kp_col=np.array([par.index(x.kp) if x.kp >= 0 else 0 for x in ld], np.int64),
        ld_kq_col=np.array([par.index(x.kq) if x.kq >= 0 else 0 for x in ld], np.int64),
        tp_dterm=np.array([k for k, t in enumerate(step.two_ports) for _ in t.params], np.int64),
        tp_dparam=np.array([j for t in step.two_ports for j in range(len(t.params))], np.int64),
        tp_dcol=np.array([par.index(c) for t in step.two_ports for c in t.params], np.int64),
        meter_gains=np.array([(mt.gv, mt.gi) for mt in ms], np.int64).reshape(len(ms), 2),
    )


_PLANS: dict[int, tuple[StepModel, StepPlan]] = {}
_PLANS_MAX = 64  # a joint session has a few dozen steps; a capture window builds its own


_SHAPES: dict[tuple[object, ...], tuple[tuple[object, ...], StepPlan]] = {}


def plan_of(step: StepModel) -> StepPlan:
    """The step's plan, cached by identity (steps are immutable; the cache holds a reference).

    A new step with the structure of an earlier one (the next capture of the same switch
    state: ``core.structure_key``) reuses that plan's index arrays with its own readings.
    """
    hit = _PLANS.get(id(step))
    if hit is not None and hit[0] is step:
        return hit[1]
    while len(_PLANS) >= _PLANS_MAX:  # oldest first: memory stays flat over a long day
        _PLANS.pop(next(iter(_PLANS)))
    while len(_SHAPES) >= _PLANS_MAX:
        _SHAPES.pop(next(iter(_SHAPES)))
    key = structure_key(step)
    shape = _SHAPES.get(key)
    if shape is not None and shape[0][0] is step.two_ports:
        ms = step.meters
        pl = replace(
            shape[1],
            z=np.concatenate([mt.z for mt in ms]).astype(float) if ms else np.zeros(0),
            sigma=np.concatenate([mt.sigma for mt in ms]).astype(float) if ms else np.zeros(0),
        )
    else:
        pl = build_plan(step)
        _SHAPES[key] = ((step.two_ports,), pl)
    _PLANS[id(step)] = (step, pl)
    return pl
