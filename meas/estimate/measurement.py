"""The measurement function of one step, h(x), and its Jacobian, vectorized over meters and slots.

Evaluated on the index arrays of ``meas.estimate.plan``: a meter's current is the signed sum of
element currents seen through its wiring, its readings are the magnitudes, powers and angles of
its voltages and currents times its gains (the formulas of ``meas.estimate.core``'s terms).
"""

from __future__ import annotations

import math

import numpy as np

from .core import (
    CArray,
    FArray,
    StepEval,
    StepModel,
    admittance,
)
from .plan import StepPlan, plan_of

_NEXT = np.array([1, 2, 0])
_NONE = np.zeros(0)


# ---------------------------------------------------------------------------- currents


def currents(
    step: StepModel, pl: StepPlan, v: CArray, tc: CArray, shared: FArray, derivs: bool
) -> tuple[CArray, CArray | None]:
    """Every element current (two-ports end by end, then loads) and its derivative.

    Derivative columns are compact, [the plan's ``par_cols`` | this step's state] (no element
    depends on a meter gain); ``tc`` maps the state to voltages.
    """
    p = pl.p
    ns = len(pl.par_cols)
    nc = ns + tc.shape[1]
    parts: list[CArray] = []
    dparts: list[CArray] = []
    if step.two_ports:
        ys, dys = [], []
        for t in step.two_ports:
            pv = shared[list(t.params)] if t.params else _NONE
            y, dy = admittance(t, pv, derivs)
            ys.append(y)
            dys.append(dy)
        yst = np.array(ys)
        vt = v[pl.tp_nodes]
        parts.append((yst @ vt[..., None]).reshape(-1))
        if derivs:
            d = np.zeros((len(ys), 2 * p, nc), complex)
            d[:, :, ns:] = yst @ tc[pl.tp_nodes]
            if len(pl.tp_dterm):
                dyt = np.array([dys[k][j] for k, j in zip(pl.tp_dterm, pl.tp_dparam, strict=True)])
                d[pl.tp_dterm, :, pl.tp_dcol] = (dyt @ vt[pl.tp_dterm][..., None])[..., 0]
            dparts.append(d.reshape(-1, nc))
    if step.loads:
        vl = v[pl.ld_nodes]
        m = np.abs(vl)
        r = m / pl.ld_vn
        sh1 = np.append(shared, 1.0)
        kp = sh1[pl.ld_kp][:, None]
        kq = sh1[pl.ld_kq][:, None]
        zp, zq = pl.ld_zp, pl.ld_zq
        pr = zp[:, 0] * r * r + zp[:, 1] * r + zp[:, 2]
        qr = zq[:, 0] * r * r + zq[:, 1] * r + zq[:, 2]
        s = kp * pr + 1j * kq * qr
        cv = np.conj(vl)
        parts.append(np.asarray(np.conj(s) / cv, complex).reshape(-1))
        if derivs:
            ds = (kp * (2 * zp[:, 0] * r + zp[:, 1]) + 1j * kq * (2 * zq[:, 0] * r + zq[:, 1])) / (
                pl.ld_vn
            )
            dvl = np.zeros((*vl.shape, nc), complex)
            dvl[..., ns:] = tc[pl.ld_nodes]
            dm = (cv[..., None] * dvl).real / m[..., None]
            d = (np.conj(ds) / cv)[..., None] * dm - (np.conj(s) / cv**2)[..., None] * np.conj(dvl)
            rk = pl.ld_kp >= 0
            if rk.any():
                d[rk, :, pl.ld_kp_col[rk]] += pr[rk] / cv[rk]
            rk = pl.ld_kq >= 0
            if rk.any():
                d[rk, :, pl.ld_kq_col[rk]] += -1j * qr[rk] / cv[rk]
            dparts.append(d.reshape(-1, nc))
    cur = np.concatenate(parts) if parts else np.zeros(0, complex)
    if not derivs:
        return cur, None
    dcur = np.concatenate(dparts) if dparts else np.zeros((0, nc), complex)
    return cur, dcur


# ---------------------------------------------------------------------------- meter slots


def _mag(val: CArray, d: CArray | None) -> tuple[FArray, FArray | None]:
    m = np.abs(val)
    if d is None:
        return m, None
    safe = np.where(m > 0, m, 1.0)
    return m, (val.real[..., None] * d.real + val.imag[..., None] * d.imag) / safe[..., None]


def _ang(val: CArray, d: CArray | None) -> tuple[FArray, FArray | None]:
    if d is None:
        return np.angle(val), None
    safe = np.where(np.abs(val) > 0, val, 1.0)
    return np.angle(val), (d / safe[..., None]).imag


def all_slots(
    pl: StepPlan, v: CArray, dv: CArray | None, i: CArray, di: CArray | None
) -> tuple[FArray, FArray | None]:
    """Every slot of every meter, (M, S) and (M, S, nc), before gains (``slot_keys`` order)."""
    mm, p = v.shape
    s = v * np.conj(i)
    vm, dvm = _mag(v, dv)
    im, dim = _mag(i, di)
    ds = None
    if dv is not None and di is not None:
        ds = np.conj(i)[..., None] * dv + v[..., None] * np.conj(di)
    if p == 1:
        f = np.stack([vm[:, 0], im[:, 0], s.real[:, 0], s.imag[:, 0]], axis=1)
        if ds is None:
            return f, None
        assert dvm is not None and dim is not None
        df1 = np.stack([dvm[:, 0], dim[:, 0], ds.real[:, 0], ds.imag[:, 0]], axis=1)
        return f, df1
    f = np.zeros((mm, 22))
    df: FArray | None = None if ds is None else np.zeros((mm, 22, ds.shape[-1]))
    f[:, 0:3] = vm
    f[:, 6:9] = im
    f[:, 9:12] = s.real
    f[:, 12:15] = s.imag
    f[:, 15] = f[:, 9:12].sum(1)
    f[:, 16] = f[:, 12:15].sum(1)
    if pl.need_vll:
        dd = None if dv is None else dv - dv[:, _NEXT]
        f[:, 3:6], dll = _mag(v - v[:, _NEXT], dd)
        if df is not None:
            df[:, 3:6] = dll
    if pl.need_angles:
        ia, dia = _ang(i, di)
        va, dva = _ang(v, dv)
        f[:, 17:20] = ia - va[:, :1]
        f[:, 20:22] = va[:, 1:] - va[:, :1]
        if df is not None and dia is not None and dva is not None:
            df[:, 17:20] = dia - dva[:, :1]
            df[:, 20:22] = dva[:, 1:] - dva[:, :1]
    if df is not None and ds is not None and dvm is not None and dim is not None:
        df[:, 0:3] = dvm
        df[:, 6:9] = dim
        df[:, 9:12] = ds.real
        df[:, 12:15] = ds.imag
        df[:, 15] = df[:, 9:12].sum(1)
        df[:, 16] = df[:, 12:15].sum(1)
    return f, df


def _gains(pl: StepPlan, shared: FArray) -> tuple[FArray, FArray, FArray]:
    sh1 = np.append(shared, 1.0)
    gv, gi = sh1[pl.gv], sh1[pl.gi]
    table = np.stack([gv, gi, gv * gi, np.ones_like(gv)])
    return table[pl.kind, np.arange(len(pl.kind))], gv, gi


def measured_variants(pl: StepPlan, v: CArray, variants: CArray, shared: FArray) -> FArray:
    """The measured rows' model values, gains applied, for the meters' voltages ``v`` (M, p)
    and several variants of their currents at once: ``variants`` (K, M, p) -> (K, R)."""
    k = variants.shape[0]
    vv = np.broadcast_to(v, variants.shape).reshape(-1, pl.p)
    f, _ = all_slots(pl, vv, None, variants.reshape(-1, pl.p), None)
    gain, _, _ = _gains(pl, shared)
    return f.reshape(k, -1)[:, pl.rows] * gain


def phasors(
    step: StepModel, pl: StepPlan, tc: CArray, xs: FArray, shared: FArray
) -> tuple[CArray, CArray]:
    """Each meter's (V, I) at the state ``xs`` (M, p), gains and wiring not applied."""
    v = tc @ xs
    cur, _ = currents(step, pl, v, tc, shared, derivs=False)
    i = (pl.c_raw @ cur).reshape(-1, pl.p) if cur.size else np.zeros((len(pl.v_idx), pl.p))
    return v[pl.v_idx], i.astype(complex)


def reading_residuals(pl: StepPlan, h: FArray) -> FArray:
    """(z - h) / σ of the measured rows, angles wrapped to ±π."""
    res = pl.z - h
    a = pl.angle
    res[a] = np.mod(res[a] + math.pi, 2 * math.pi) - math.pi
    return res / pl.sigma


def evaluate(step: StepModel, tc: CArray, xs: FArray, shared: FArray) -> StepEval:
    """Weighted residuals and Jacobian of one step (columns [shared | this step's state]),
    the Jacobian as its compact part and its gain part (see ``StepEval``)."""
    pl = plan_of(step)
    ns, p = len(shared), pl.p
    nc = ns + tc.shape[1]
    npar = len(pl.par_cols)
    ncc = npar + tc.shape[1]  # compact columns while the chain rule runs
    v = tc @ xs
    cur, dcur = currents(step, pl, v, tc, shared, derivs=True)
    assert dcur is not None
    mm = len(step.meters)
    k0 = len(pl.rows)
    nk = len(step.kcl)
    at = k0 + 2 * p * nk
    r = np.empty(at)
    h = np.empty(at)
    jc = np.empty((at, ncc))
    gval = np.zeros((at, 2))
    if mm:
        vm = v[pl.v_idx]
        dvm = np.zeros((mm, p, ncc), complex)
        dvm[..., npar:] = tc[pl.v_idx]
        if cur.size:
            im = (pl.c_wired @ cur).reshape(mm, p)
            dim = (pl.c_wired @ dcur).reshape(mm, p, ncc)
        else:
            im, dim = np.zeros((mm, p), complex), np.zeros((mm, p, ncc), complex)
        f, df = all_slots(pl, vm, dvm, im, dim)
        assert df is not None
        fr = f.reshape(-1)[pl.rows]
        gain, gv, gi = _gains(pl, shared)
        hm = fr * gain
        np.multiply(df.reshape(-1, ncc)[pl.rows], (gain / pl.sigma)[:, None], out=jc[:k0])
        cv = np.where(pl.kind == 0, 1.0, np.where(pl.kind == 2, gi, 0.0))
        ci = np.where(pl.kind == 1, 1.0, np.where(pl.kind == 2, gv, 0.0))
        gval[:k0, 0] = np.where(pl.gv >= 0, fr * cv / pl.sigma, 0.0)
        gval[:k0, 1] = np.where(pl.gi >= 0, fr * ci / pl.sigma, 0.0)
        r[:k0] = reading_residuals(pl, hm)
        h[:k0] = hm
    if nk:
        q = (pl.k_mat @ cur).reshape(nk, 1, p)
        dq = (pl.k_mat @ dcur).reshape(nk, 1, p, ncc)
        val = np.concatenate([q.real, q.imag], axis=1).reshape(-1)
        dval = np.concatenate([dq.real, dq.imag], axis=1).reshape(-1, ncc)
        np.divide(dval, pl.k_sigma[:, None], out=jc[k0:])
        r[k0:] = -val / pl.k_sigma
        h[k0:] = val
    cc = np.r_[pl.par_cols, ns + np.arange(tc.shape[1])]
    return StepEval(r, h, list(pl.meter_rows), slice(k0, at), jc, cc, pl.meter_gains, gval, nc)
