"""The simulated bench's electrical model: validated element parameters as phase-frame matrices.

``element_models(profile)`` reads every branch's raw ``sim`` table once, reports every bad or
missing value as a ``ProfileError`` problem (``branch[i].sim.key``), and turns each element into
bench-side SI phase-frame quantities. ``build_network(profile, switch_states)`` then applies the
switch states and the topology: which buses are energized (reachable from a closed source
through closed lines/transformers) and which are islanded.

Phase-frame conventions (used by ``meas.sim.solver`` and ``meas.sim.readings``):

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
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from ..errors import BenchwalkError, Problem, ProfileError
from ..model import Branch, Profile

VECTOR_GROUPS = ("Yy0", "Yyn0", "YNyn0", "Dyn11", "Dyn1")
LOAD_MODELS = ("pq", "z", "i", "zip")
_A = cmath.exp(2j * math.pi / 3)
# symmetrical-component transform, phase-a reference (Fortescue 1918): V_abc = T @ V_012
T012 = np.array([[1, 1, 1], [1, _A**2, _A], [1, _A, _A**2]], dtype=complex)

_ALLOWED = {
    "source": {"v_ll", "sc_va", "x_r", "angle_deg"},
    "line": {
        "r_ohm",
        "x_ohm",
        "b_us",
        "r0_ohm",
        "x0_ohm",
        "b0_us",
        "r_ohm_per_km",
        "x_ohm_per_km",
        "b_us_per_km",
        "r0_ohm_per_km",
        "x0_ohm_per_km",
        "b0_us_per_km",
        "length_km",
        "long_line",
    },
    "transformer": {"s_va", "v1_ll", "v2_ll", "uk_pct", "ur_pct", "vector_group", "tap_pct"},
    "load": {"p_w", "q_var", "model", "zip"},
    "shunt": {"q_var", "p_w"},
}


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


# ------------------------------------------------------------------ validation helpers


class _Checker:
    def __init__(self, profile: Profile, index: int, branch: Branch):
        self.file = profile.path
        self.prefix = f"branch[{index}].sim"
        self.branch = branch
        self.problems: list[Problem] = []

    def problem(self, key: str, message: str) -> None:
        path = f"{self.prefix}.{key}" if key else self.prefix
        self.problems.append(
            Problem(self.file, None, path, f"{self.branch.kind} '{self.branch.id}': {message}")
        )

    def number(
        self,
        key: str,
        *,
        required: bool = True,
        default: float | None = None,
        minimum: float | None = None,
        positive: bool = False,
        allow_inf: bool = False,
    ) -> float | None:
        sim = self.branch.sim
        if key not in sim:
            if required:
                self.problem(key, "missing; add it to the branch's sim table")
            return default
        value = sim[key]
        if isinstance(value, bool) or not isinstance(value, int | float):
            self.problem(key, f"must be a number, got {value!r}")
            return default
        value = float(value)
        if math.isnan(value) or (math.isinf(value) and not (allow_inf and value > 0)):
            self.problem(key, f"must be a finite number, got {value!r}")
            return default
        if positive and value <= 0:
            self.problem(key, f"must be greater than 0, got {value:g}")
            return default
        if minimum is not None and value < minimum:
            self.problem(key, f"must be at least {minimum:g}, got {value:g}")
            return default
        return value

    def per_phase(self, key: str, *, required: bool = True) -> np.ndarray | None:
        """A scalar total (split equally over the phases) or a list of three per-phase values."""
        sim = self.branch.sim
        if key not in sim:
            if required:
                self.problem(key, "missing; give a total or a list of 3 per-phase values")
            return None if required else np.zeros(3)
        value = sim[key]
        if isinstance(value, list | tuple):
            ok = len(value) == 3 and all(
                isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)
                for v in value
            )
            if not ok:
                self.problem(
                    key, f"must be a number or a list of 3 finite numbers (A, B, C), got {value!r}"
                )
                return None
            return np.array(value, dtype=float)
        total = self.number(key)
        return None if total is None else np.full(3, total / 3.0)

    def unknown_keys(self) -> None:
        allowed = _ALLOWED[self.branch.kind]
        for k in self.branch.sim:
            if k not in allowed:
                self.problem(k, f"unknown parameter; expected one of {', '.join(sorted(allowed))}")


# ------------------------------------------------------------------ element builders


def seq_to_phase(z0: complex, z1: complex) -> np.ndarray:
    """Phase-frame 3x3 matrix of a transposed element with sequence values z0 and z1 = z2."""
    zs, zm = (z0 + 2 * z1) / 3, (z0 - z1) / 3
    return zm * np.ones((3, 3), dtype=complex) + (zs - zm) * np.eye(3)


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


def _line(c: _Checker) -> tuple[np.ndarray, float] | None:
    sim = c.branch.sim
    per_km = any(k.endswith("_per_km") or k == "length_km" for k in sim)
    lumped = any(k in sim for k in ("r_ohm", "x_ohm", "b_us", "r0_ohm", "x0_ohm", "b0_us"))
    if per_km and lumped:
        c.problem(
            "",
            "mixes lumped (r_ohm, x_ohm, b_us) and per-length (*_per_km, length_km) values; use one form",
        )
        return None
    long_line = sim.get("long_line", False)
    if not isinstance(long_line, bool):
        c.problem("long_line", f"must be true or false, got {long_line!r}")
        long_line = False
    if per_km:
        length = c.number("length_km", positive=True)
        sfx = "_per_km"
    else:
        if long_line:
            c.problem(
                "long_line",
                "needs per-length data (r_ohm_per_km, x_ohm_per_km, b_us_per_km, length_km)",
            )
        length, sfx = 1.0, ""
    r = c.number("r_ohm" + sfx, minimum=0.0)
    x = c.number("x_ohm" + sfx)
    b = c.number("b_us" + sfx, required=False, default=0.0, minimum=0.0)
    r0 = c.number("r0_ohm" + sfx, required=False, minimum=0.0)
    x0 = c.number("x0_ohm" + sfx, required=False)
    b0 = c.number("b0_us" + sfx, required=False, minimum=0.0)
    if ("r0_ohm" + sfx in sim) != ("x0_ohm" + sfx in sim):
        missing = "x0_ohm" if "r0_ohm" + sfx in sim else "r0_ohm"
        c.problem(missing + sfx, "missing; zero-sequence data needs both r0 and x0")
        return None
    if None in (length, r, x, b):
        return None
    z1 = complex(r, x)
    if abs(z1) == 0:
        c.problem("x_ohm" + sfx, "series impedance is zero; a line needs r_ohm or x_ohm above 0")
        return None
    z0 = complex(r0, x0) if r0 is not None and x0 is not None else z1
    if abs(z0) == 0:
        c.problem("x0_ohm" + sfx, "zero-sequence impedance is zero")
        return None
    y1 = 1j * b * 1e-6
    y0 = 1j * (b if b0 is None else b0) * 1e-6
    z1l, y1l = _pi_seq(z1 * length, y1 * length, long_line)
    z0l, y0l = _pi_seq(z0 * length, y0 * length, long_line)
    ys = np.linalg.inv(seq_to_phase(z0l, z1l))
    ysh = seq_to_phase(y0l, y1l) / 2
    y = np.block([[ys + ysh, -ys], [-ys, ys + ysh]])
    return y, 0.0


def _winding_ends(
    group: str,
) -> tuple[list[tuple[int, int | None]], list[tuple[int, int | None]], bool, bool]:
    """Node pairs (+, -) per core for winding 1 and 2; node 0-2 = phases, None = ground, 3 = star point.

    Dyn11: core a's delta winding is A-B, so V_a(LV) is in phase with V_AB and leads V_A by 30
    degrees (IEC 60076-1 clock number 11: LV lags by 330 degrees). Dyn1: core a is A-C (lags 30).
    """
    hv_star_floating = group in ("Yy0", "Yyn0")
    lv_star_floating = group == "Yy0"
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


_SHIFT = {"Yy0": 0.0, "Yyn0": 0.0, "YNyn0": 0.0, "Dyn11": -30.0, "Dyn1": 30.0}


def _transformer(c: _Checker) -> tuple[np.ndarray, float] | None:
    s = c.number("s_va", positive=True)
    v1 = c.number("v1_ll", positive=True)
    v2 = c.number("v2_ll", positive=True)
    uk = c.number("uk_pct", positive=True)
    ur = c.number("ur_pct", required=False, default=0.0, minimum=0.0)
    tap = c.number("tap_pct", required=False, default=0.0, minimum=-50.0)
    group = c.branch.sim.get("vector_group")
    if group not in VECTOR_GROUPS:
        c.problem("vector_group", f"must be one of {', '.join(VECTOR_GROUPS)}, got {group!r}")
        return None
    if None in (s, v1, v2, uk, ur, tap):
        return None
    if ur >= uk:
        c.problem("ur_pct", f"must be below uk_pct ({uk:g}), got {ur:g}")
        return None
    return transformer_admittance(s, v1, v2, uk, ur, group, tap), _SHIFT[group]


def _source(c: _Checker) -> tuple[np.ndarray, np.ndarray | None] | None:
    v_ll = c.number("v_ll", positive=True)
    sc = c.number("sc_va", positive=True, allow_inf=True)
    ideal = sc is not None and math.isinf(sc)
    x_r = c.number("x_r", required=not ideal, default=1.0, minimum=0.0)
    ang = c.number("angle_deg", required=False, default=0.0)
    if None in (v_ll, sc, x_r, ang):
        return None
    e = v_ll / math.sqrt(3) * np.exp(1j * (math.radians(ang) - 2 * math.pi / 3 * np.arange(3)))
    if ideal:
        return e, None
    z = v_ll**2 / sc
    zs = complex(z / math.sqrt(1 + x_r**2), z * x_r / math.sqrt(1 + x_r**2))
    return e, np.eye(3, dtype=complex) / zs


def _load(c: _Checker) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    p = c.per_phase("p_w")
    q = c.per_phase("q_var", required=False)
    model = c.branch.sim.get("model", "pq")
    if model not in LOAD_MODELS:
        c.problem("model", f"must be one of {', '.join(LOAD_MODELS)}, got {model!r}")
        return None
    fz, fi, fp = {"pq": (0.0, 0.0, 1.0), "z": (1.0, 0.0, 0.0), "i": (0.0, 1.0, 0.0)}.get(
        model, (0, 0, 0)
    )
    if model == "zip":
        zip_ = c.branch.sim.get("zip")
        good = (
            isinstance(zip_, list | tuple)
            and len(zip_) == 3
            and all(isinstance(v, int | float) and not isinstance(v, bool) and v >= 0 for v in zip_)
        )
        if not good or abs(sum(zip_) - 1.0) > 1e-6:
            c.problem("zip", f"must be 3 fractions [z, i, p] >= 0 that sum to 1, got {zip_!r}")
            return None
        fz, fi, fp = (float(v) for v in zip_)
    elif "zip" in c.branch.sim:
        c.problem("zip", f'only used with model = "zip" (model is {model!r})')
    if p is None or q is None:
        return None
    s = p + 1j * q
    return fz * s, fi * s, fp * s


def _shunt(c: _Checker, v_nom: float) -> np.ndarray | None:
    q = c.per_phase("q_var")
    p = c.per_phase("p_w", required=False)
    if q is None or p is None:
        return None
    return np.conj(p + 1j * q) / v_nom**2  # S = |V|^2 y*, so y = conj(S) / |V|^2


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


def element_models(profile: Profile) -> dict[str, Element]:
    """Validate every branch's sim parameters and build its model; all problems at once."""
    v_nom = bus_nominal_phase_voltage(profile)
    problems: list[Problem] = []
    out: dict[str, Element] = {}
    bus_ids = set(v_nom)
    for i, br in enumerate(profile.branches):
        c = _Checker(profile, i, br)
        if br.kind not in _ALLOWED:
            c.problem("", f"unknown kind {br.kind!r}")
            problems += c.problems
            continue
        c.unknown_keys()
        missing = [b for b in br.buses if b not in bus_ids]
        two_ended = br.kind in ("line", "transformer")
        if missing:
            c.problems.append(
                Problem(
                    profile.path, None, f"branch[{i}]", f"'{br.id}': unknown bus {missing[0]!r}"
                )
            )
        elif two_ended != (br.to_bus is not None):
            c.problems.append(
                Problem(
                    profile.path,
                    None,
                    f"branch[{i}].to_bus",
                    f"'{br.id}': a {br.kind} {'needs' if two_ended else 'takes no'} to_bus",
                )
            )
        else:
            vn = v_nom[br.from_bus]
            if br.kind == "source":
                r = _source(c)
                if r is not None:
                    out[br.id] = SourceModel(br.id, br.from_bus, r[0], r[1])
            elif br.kind in ("line", "transformer"):
                r2 = _line(c) if br.kind == "line" else _transformer(c)
                if r2 is not None:
                    out[br.id] = TwoPort(br.id, br.kind, br.from_bus, br.to_bus, r2[0], r2[1])
            elif br.kind == "load":
                r3 = _load(c)
                if r3 is not None:
                    out[br.id] = LoadModel(br.id, br.from_bus, *r3)
            else:
                r4 = _shunt(c, vn)
                if r4 is not None:
                    out[br.id] = ShuntModel(br.id, br.from_bus, r4)
        problems += c.problems
    ideal_buses: dict[str, str] = {}
    index = {b.id: i for i, b in enumerate(profile.branches)}
    for m in out.values():
        if isinstance(m, SourceModel) and m.y is None:
            if m.bus in ideal_buses:
                problems.append(
                    Problem(
                        profile.path,
                        None,
                        f"branch[{index[m.branch]}].sim.sc_va",
                        f"bus {m.bus!r} already has the ideal source '{ideal_buses[m.bus]}'; "
                        "give one of them a finite sc_va",
                    )
                )
            ideal_buses[m.bus] = m.branch
    if problems:
        raise ProfileError(problems)
    return out


def open_branches(profile: Profile, switch_states: Mapping[str, str]) -> frozenset[str]:
    """Branches opened by a switch; switches not in the mapping stay in their normal state."""
    known = {s.id for s in profile.switches}
    for sid, state in switch_states.items():
        if sid not in known:
            raise BenchwalkError(
                f"switch state given for unknown switch {sid!r}; "
                f"the profile has {', '.join(sorted(known)) or 'no switches'}"
            )
        if state not in ("open", "closed"):
            raise BenchwalkError(f"switch {sid!r}: state must be 'open' or 'closed', got {state!r}")
    return frozenset(
        s.branch for s in profile.switches if switch_states.get(s.id, s.normal) == "open"
    )


def build_network(
    profile: Profile, switch_states: Mapping[str, str], models: Mapping[str, Element] | None = None
) -> Network:
    """The model for one switch state, with energized buses found by a graph walk from sources."""
    models = element_models(profile) if models is None else models
    v_nom = bus_nominal_phase_voltage(profile)
    opened = set(open_branches(profile, switch_states))
    adj: dict[str, list[tuple[str, float]]] = {b: [] for b in v_nom}
    for m in models.values():
        if isinstance(m, TwoPort) and m.branch not in opened:
            adj[m.from_bus].append((m.to_bus, m.shift_deg))
            adj[m.to_bus].append((m.from_bus, -m.shift_deg))
    angle: dict[str, float] = {}
    stack = []
    for m in models.values():
        if isinstance(m, SourceModel) and m.branch not in opened and m.bus not in angle:
            angle[m.bus] = math.degrees(cmath.phase(m.emf[0]))
            stack.append(m.bus)
    while stack:
        b = stack.pop()
        for nb, shift in adj[b]:
            if nb not in angle:
                angle[nb] = angle[b] - shift
                stack.append(nb)
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
