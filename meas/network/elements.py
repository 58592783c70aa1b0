"""Element models from nameplate parameters: every branch as bench-side SI phase-frame matrices.

``element_models(profile)`` turns each branch's typed ``model`` (validated by the profile
loader) into one element; ``meas.network.admittance`` then applies a switch state.

Phase-frame conventions (used by ``meas.network.loadflow`` and the simulated meters):

- every bus has three phase nodes A, B, C; node voltages are phase-to-ground phasors (V rms),
  positive sequence = B lags A by 120 degrees; there is no separate neutral conductor
  (wye-grounded loads, shunts and windings return through ground);
- a two-port element is a 6x6 admittance ``y`` (S) with ``[I_from; I_to] = y @ [V_from; V_to]``,
  currents flowing *into* the element at each end;
- a source is a three-phase grounded-wye EMF behind its Thevenin impedance
  (|Z| = v_ll^2 / sc_va, split by X/R, equal in all sequences); ``sc_va = inf`` is an ideal
  source (the bus voltage is held);
- a line is a pi section per sequence (positive = negative sequence); ``r0_ohm``/``x0_ohm``
  (and ``b0_us``) give the zero sequence, so the phase matrix has mutual terms
  Zm = (Z0 - Z1)/3 as in pandapower's three-phase model; per-length data with
  ``long_line = true`` gets the exact hyperbolic correction per sequence;
- a transformer is three single-phase units (ideal ratio at winding 1 including the tap, the
  leakage impedance on winding 2) wired by the vector group; floating star points are
  eliminated exactly (generalized Kron reduction), so the group's phase shift and zero-sequence
  behaviour follow from the wiring rather than from a table;
- loads are wye-grounded per phase with ZIP voltage dependence referred to the bus zone's
  nominal phase voltage; shunts are constant admittances (positive q = absorbing reactor).
"""

from __future__ import annotations

import cmath
import math
from dataclasses import dataclass

import numpy as np

from ..errors import Problem, ProfileError
from ..model import (
    Branch,
    BranchParams,
    LineParams,
    LoadParams,
    PhaseValues,
    Profile,
    ShuntParams,
    SourceParams,
    TransformerParams,
)

_PARAMS: dict[str, type] = {
    "source": SourceParams,
    "line": LineParams,
    "transformer": TransformerParams,
    "load": LoadParams,
    "shunt": ShuntParams,
}
# (z, i, p) shares of a load's power by voltage dependence
_SHARES = {"pq": (0.0, 0.0, 1.0), "z": (1.0, 0.0, 0.0), "i": (0.0, 1.0, 0.0)}
# no-load angle by which winding 2 lags winding 1, degrees (negative = leads)
_SHIFT = {"Yy0": 0.0, "Yyn0": 0.0, "YNyn0": 0.0, "Dyn11": -30.0, "Dyn1": 30.0}


@dataclass(frozen=True)
class SourceModel:
    branch: str
    bus: str
    emf: np.ndarray  # (3,) complex phase-to-ground EMF, V
    y: np.ndarray | None  # (3, 3) Thevenin admittance, S; None = ideal source


@dataclass(frozen=True)
class TwoPort:
    """A line or transformer; ``y`` is 6x6 with currents into the element at both ends."""

    branch: str
    kind: str
    from_bus: str
    to_bus: str
    y: np.ndarray
    shift_deg: float = 0.0  # angle by which the to-side lags the from-side at no load


@dataclass(frozen=True)
class LoadModel:
    """Per-phase complex power consumed at nominal voltage, split into Z, I and P parts."""

    branch: str
    bus: str
    s_z: np.ndarray
    s_i: np.ndarray
    s_p: np.ndarray


@dataclass(frozen=True)
class ShuntModel:
    branch: str
    bus: str
    y: np.ndarray  # (3,) per-phase admittance to ground, S


Element = SourceModel | TwoPort | LoadModel | ShuntModel


# ------------------------------------------------------------------ element builders


def seq_to_phase(z0: complex, z1: complex) -> np.ndarray:
    """Phase-frame 3x3 matrix of a transposed element with sequence values z0 and z1 = z2."""
    zs, zm = (z0 + 2 * z1) / 3, (z0 - z1) / 3
    out = np.full((3, 3), zm, dtype=complex)  # zm·ones + (zs - zm)·eye, bit for bit, faster
    out.flat[::4] = zm + (zs - zm)
    return out


def _pi_seq(z: complex, y: complex, long_line: bool) -> tuple[complex, complex]:
    """Series Z and total shunt Y of one sequence; exact equivalent pi if ``long_line``.

    Z' = Z sinh(gl)/gl, Y'/2 = (Y/2) tanh(gl/2)/(gl/2) with gl = sqrt(Z Y) (Glover, Sarma &
    Overbye, Power System Analysis and Design, ch. 5).
    """
    if not long_line or y == 0:
        return z, y
    gl = cmath.sqrt(z * y)
    if abs(gl) < 1e-12:
        return z, y
    return z * cmath.sinh(gl) / gl, y * cmath.tanh(gl / 2) / (gl / 2)


def _per_phase(value: PhaseValues) -> np.ndarray:
    """A three-phase total split equally, or the three phase values as given."""
    if isinstance(value, tuple):
        return np.array(value, dtype=float)
    return np.full(3, value / 3.0)


def line_admittance(p: LineParams) -> np.ndarray:
    """6x6 phase-frame admittance of a line's pi section (lumped or per length)."""
    length = 1.0 if p.length_km is None else p.length_km
    z1 = complex(p.r_ohm, p.x_ohm)
    z0 = complex(p.r0_ohm, p.x0_ohm) if p.r0_ohm is not None and p.x0_ohm is not None else z1
    y1 = 1j * p.b_us * 1e-6
    y0 = 1j * (p.b_us if p.b0_us is None else p.b0_us) * 1e-6
    z1l, y1l = _pi_seq(z1 * length, y1 * length, p.long_line)
    z0l, y0l = _pi_seq(z0 * length, y0 * length, p.long_line)
    if z0l == 0 or z1l == 0:
        np.linalg.inv(seq_to_phase(z0l, z1l))  # singular: raises as it always did
    # [[ys + ysh, -ys], [-ys, ys + ysh]] with ys = seq_to_phase(1/z0, 1/z1) (the inverse of
    # seq_to_phase(z0, z1), in closed form) and ysh = seq_to_phase(y0, y1) / 2, entry by entry
    # in scalars: the same arithmetic as the matrices, bit for bit, at a fraction of the cost
    # (the estimator rebuilds a line at every step of every fit)
    a0, a1 = 1 / z0l, 1 / z1l
    sm = (a0 - a1) / 3
    sd = sm + ((a0 + 2 * a1) / 3 - sm)
    hm = (y0l - y1l) / 3
    hd = (hm + ((y0l + 2 * y1l) / 3 - hm)) / 2
    hm = hm / 2
    d, m, nd, nm = sd + hd, sm + hm, -sd, -sm
    return np.array(
        [
            [d, m, m, nd, nm, nm],
            [m, d, m, nm, nd, nm],
            [m, m, d, nm, nm, nd],
            [nd, nm, nm, d, m, m],
            [nm, nd, nm, m, d, m],
            [nm, nm, nd, m, m, d],
        ],
        dtype=complex,
    )


def _winding_ends(
    group: str,
) -> tuple[list[tuple[int, int | None]], list[tuple[int, int | None]], bool, bool]:
    """Node pairs (+, -) per core for winding 1 and 2; node 0-2 = phases, None = ground, 3 = star point.

    Dyn11: core a's delta winding is A-B, so V_a(LV) is in phase with V_AB and leads V_A by 30
    degrees (IEC 60076-1 clock number 11: LV lags by 330 degrees). Dyn1: core a is A-C (lags 30).
    """
    hv_star_floating = group in ("Yy0", "Yyn0")
    lv_star_floating = group == "Yy0"
    w1: list[tuple[int, int | None]]
    if group.startswith("D"):
        step = 1 if group == "Dyn11" else 2
        w1 = [(k, (k + step) % 3) for k in range(3)]
    else:
        w1 = [(k, 3 if hv_star_floating else None) for k in range(3)]
    w2 = [(k, 3 if lv_star_floating else None) for k in range(3)]
    return w1, w2, hv_star_floating, lv_star_floating


def transformer_admittance(
    s_va: float,
    v1_ll: float,
    v2_ll: float,
    uk_pct: float,
    ur_pct: float,
    vector_group: str,
    tap_pct: float = 0.0,
) -> np.ndarray:
    """6x6 phase-frame admittance of a two-winding transformer (no magnetizing branch)."""
    delta1 = vector_group.startswith("D")
    v1w = v1_ll if delta1 else v1_ll / math.sqrt(3)
    v2w = v2_ll / math.sqrt(3)
    t = v1w / v2w * (1 + tap_pct / 100.0)
    z_base = v2w**2 / (s_va / 3)
    zr = ur_pct / 100 * z_base
    zx = math.sqrt(max((uk_pct / 100) ** 2 - (ur_pct / 100) ** 2, 0.0)) * z_base
    y_leak = 1 / complex(zr, zx)
    w1, w2, n1, n2 = _winding_ends(vector_group)
    # local nodes: 0-2 side-1 phases, 3-5 side-2 phases, 6 side-1 star, 7 side-2 star
    inc = np.zeros((6, 8))
    for k in range(3):
        for row, (plus, minus), off, star in ((2 * k, w1[k], 0, 6), (2 * k + 1, w2[k], 3, 7)):
            inc[row, plus + off] += 1
            if minus is not None:
                inc[row, star if minus == 3 else minus + off] -= 1
    u = np.array([1 / t, -1.0])
    prim = np.kron(np.eye(3), np.outer(u, u))  # per core: y [[1/t^2, -1/t], [-1/t, 1]]
    m = inc.T @ prim @ inc
    keep = list(range(6))
    floating = [i for i, f in ((6, n1), (7, n2)) if f]
    if floating:
        # generalized Schur complement; exact here because m is real positive semidefinite
        m = (
            m[np.ix_(keep, keep)]
            - m[np.ix_(keep, floating)]
            @ np.linalg.pinv(m[np.ix_(floating, floating)])
            @ m[np.ix_(floating, keep)]
        )
    else:
        m = m[np.ix_(keep, keep)]
    return y_leak * m


def source_emf(p: SourceParams) -> tuple[np.ndarray, np.ndarray | None]:
    """The phase EMFs and the Thevenin admittance (None for an ideal source)."""
    e = (
        p.v_ll
        / math.sqrt(3)
        * np.exp(1j * (math.radians(p.angle_deg) - 2 * math.pi / 3 * np.arange(3)))
    )
    if math.isinf(p.sc_va):
        return e, None
    z = p.v_ll**2 / p.sc_va
    zs = complex(z / math.sqrt(1 + p.x_r**2), z * p.x_r / math.sqrt(1 + p.x_r**2))
    return e, np.eye(3, dtype=complex) / zs


def load_parts(p: LoadParams) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-phase power at nominal voltage split into constant Z, I and P parts."""
    fz, fi, fp = p.zip if p.behaviour == "zip" and p.zip is not None else _SHARES[p.behaviour]
    s = _per_phase(p.p_w) + 1j * _per_phase(p.q_var)
    return fz * s, fi * s, fp * s


def shunt_admittance(p: ShuntParams, v_nom: float) -> np.ndarray:
    """Per-phase admittance to ground from the power at nominal voltage: S = |V|^2 y*."""
    return np.conj(_per_phase(p.p_w) + 1j * _per_phase(p.q_var)) / v_nom**2


# ------------------------------------------------------------------ public API


def bus_nominal_phase_voltage(profile: Profile) -> dict[str, float]:
    """Nominal phase-to-neutral voltage (V) of every bus, from its zone's bench_v_ll."""
    out: dict[str, float] = {}
    for b in profile.buses:
        try:
            out[b.id] = profile.bench.zone(b.zone).bench_v_ll / math.sqrt(3)
        except KeyError:
            raise ProfileError(
                [
                    Problem(
                        profile.path,
                        None,
                        f"bus '{b.id}'.zone",
                        f"unknown zone {b.zone!r}; define it in a [[zone]] table",
                    )
                ]
            ) from None
    return out


def _element(br: Branch, params: BranchParams, v_nom: float) -> Element:
    if isinstance(params, SourceParams):
        return SourceModel(br.id, br.from_bus, *source_emf(params))
    if isinstance(params, LineParams):
        assert br.to_bus is not None
        return TwoPort(br.id, br.kind, br.from_bus, br.to_bus, line_admittance(params))
    if isinstance(params, TransformerParams):
        assert br.to_bus is not None
        y = transformer_admittance(
            params.s_va,
            params.v1_ll,
            params.v2_ll,
            params.uk_pct,
            params.ur_pct,
            params.vector_group,
            params.tap_pct,
        )
        return TwoPort(br.id, br.kind, br.from_bus, br.to_bus, y, _SHIFT[params.vector_group])
    if isinstance(params, LoadParams):
        return LoadModel(br.id, br.from_bus, *load_parts(params))
    return ShuntModel(br.id, br.from_bus, shunt_admittance(params, v_nom))


def _fault(br: Branch, params: BranchParams | None, known: set[str]) -> str | None:
    """Why ``br`` cannot be modelled (hand-built profiles only; the loader checks the rest)."""
    if params is None:
        return (
            f"{br.kind} '{br.id}': no model table; give its nameplate parameters in the branch's "
            "model table to simulate it"
        )
    if not isinstance(params, _PARAMS[br.kind]):
        return f"{br.kind} '{br.id}': model holds {type(params).__name__}"
    missing = [b for b in br.buses if b not in known]
    if missing:
        return f"'{br.id}': unknown bus {missing[0]!r}"
    if (br.kind in ("line", "transformer")) != (br.to_bus is not None):
        return f"'{br.id}': a {br.kind} needs to_bus and only a line or transformer has one"
    return None


def element_models(profile: Profile) -> dict[str, Element]:
    """Every branch's element, in profile order; ``ProfileError`` lists every branch without one."""
    v_nom = bus_nominal_phase_voltage(profile)
    problems: list[Problem] = []
    out: dict[str, Element] = {}
    ideal: dict[str, str] = {}
    for i, br in enumerate(profile.branches):
        params = br.model
        why = _fault(br, params, set(v_nom))
        if why is not None or params is None:
            problems.append(Problem(profile.path, None, f"branch[{i}].model", str(why)))
            continue
        m = _element(br, params, v_nom[br.from_bus])
        if isinstance(m, SourceModel) and m.y is None:
            if m.bus in ideal:
                problems.append(
                    Problem(
                        profile.path,
                        None,
                        f"branch[{i}].model.sc_va",
                        f"bus {m.bus!r} already has the ideal source '{ideal[m.bus]}'; "
                        "give one of them a finite sc_va",
                    )
                )
            ideal[m.bus] = m.branch
        out[br.id] = m
    if problems:
        raise ProfileError(problems)
    return out
