"""Thevenin impedances at a bus from the phase-frame admittance of the network model.

IEC 60909-0's equivalent voltage source method (§5.3.1): every source is replaced by its
internal impedance, non-rotating loads, shunts and line capacitances are neglected (§6.1, as
pandapower does), and the only driving voltage is c Un / sqrt(3) at the fault. So the model is
rebuilt from the profile with line charging set to zero, the transformer impedances multiplied
by K_T where it applies, and (for kappa method C) every reactance scaled to the equivalent
frequency; ``meas.network`` then builds the phase-frame Y of the live network for the switch
state. Source EMF nodes are shorted (the finite sources become impedances to ground), the
nodes of an ideal source's bus are eliminated, and Z = Y^-1 gives the 3x3 phase matrix at the
fault; Fortescue's transform gives the sequence impedances (the model's lines are transposed,
so Z012 is diagonal to rounding).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace

import numpy as np

from ..errors import BenchwalkError
from ..model import Branch, BranchParams, LineParams, Profile, SourceParams, TransformerParams
from ..network.admittance import Network, assemble, build_network
from ..phasors import from_sequence, sequence
from .factors import kt_network_transformer


@dataclass(frozen=True)
class Thevenin:
    """The short-circuit impedances seen at one bus, bench-side ohms."""

    bus: str
    z_abc: np.ndarray  # (3, 3) phase matrix (pseudo-inverse when the zero sequence is blocked)
    z0: complex  # inf + inf j when no zero-sequence path reaches the bus
    z1: complex
    z2: complex
    meshed: bool  # more than one path from the bus to a source
    all_branches_below_0_3: bool  # every series element has R/X < 0.3
    kt: dict[str, float]  # K_T applied per transformer (max case only)


def _scaled_params(params: BranchParams, xk: float, kt: float) -> BranchParams:
    """The series parameters with reactances times ``xk`` and transformer impedance times kt."""
    if isinstance(params, LineParams):
        x0 = None if params.x0_ohm is None else params.x0_ohm * xk
        return replace(
            params,
            x_ohm=params.x_ohm * xk,
            x0_ohm=x0,
            b_us=0.0,
            b0_us=None,  # follows b_us: zero
            long_line=False,
        )
    if isinstance(params, TransformerParams):
        ur = params.ur_pct * kt
        ux = math.sqrt(max(params.uk_pct**2 - params.ur_pct**2, 0.0)) * kt * xk
        return replace(params, uk_pct=math.hypot(ur, ux), ur_pct=ur)
    if isinstance(params, SourceParams) and not math.isinf(params.sc_va):
        z = params.v_ll**2 / params.sc_va
        r = z / math.sqrt(1 + params.x_r**2)
        x = r * params.x_r * xk
        return replace(params, sc_va=params.v_ll**2 / math.hypot(r, x), x_r=x / r)
    return params


def sc_branches(
    profile: Profile,
    *,
    x_scale: float,
    kt_cmax: float | None,
    kt_exempt: frozenset[str] = frozenset(),
) -> tuple[tuple[Branch, ...], dict[str, float]]:
    """The branches as the short-circuit calculation sees them, and K_T per transformer.

    ``kt_cmax`` None leaves K_T out (the min case); ``kt_exempt`` names transformers that are
    no network transformers (e.g. a power-station unit) or whose K_T is already applied.
    """
    out: list[Branch] = []
    kts: dict[str, float] = {}
    for br in profile.branches:
        p = br.model
        if p is None:
            out.append(br)
            continue
        kt = 1.0
        if isinstance(p, TransformerParams) and kt_cmax is not None and br.id not in kt_exempt:
            kt = kt_network_transformer(kt_cmax, p.uk_pct, p.ur_pct)
            kts[br.id] = kt
        out.append(replace(br, model=_scaled_params(p, x_scale, kt)))
    return tuple(out), kts


def to_sequence_matrix(z_abc: np.ndarray) -> np.ndarray:
    """Z012 = F Z_abc F^-1 with ``meas.phasors``' Fortescue transform (phase-a reference)."""
    eye = np.eye(3, dtype=complex)
    f, f_inv = sequence(eye).T, from_sequence(eye).T
    return np.asarray(f @ z_abc @ f_inv)


def _series_only(net: Network) -> Network:
    return replace(net, loads=(), shunts=())


def _meshed(net: Network, bus: str) -> bool:
    """True when the bus's part of the network (with earth as one node) has a cycle."""
    edges = [(tp.from_bus, tp.to_bus) for tp in net.two_ports]
    edges += [(s.bus, "<earth>") for s in net.sources]
    adj: dict[str, set[str]] = {}
    for a, b in edges:
        adj.setdefault(a, set()).add(b)
        adj.setdefault(b, set()).add(a)
    seen, stack = {bus}, [bus]
    while stack:
        for o in adj.get(stack.pop(), ()):
            if o not in seen:
                seen.add(o)
                stack.append(o)
    n_edges = sum(1 for a, b in edges if a in seen)
    return n_edges >= len(seen)


def thevenin(
    profile: Profile,
    bus: str,
    switch_states: Mapping[str, str] | None = None,
    *,
    x_scale: float = 1.0,
    kt_cmax: float | None = None,
    kt_exempt: frozenset[str] = frozenset(),
) -> Thevenin:
    """The Thevenin impedances at ``bus`` for a switch state (normal states by default)."""
    branches, kts = sc_branches(profile, x_scale=x_scale, kt_cmax=kt_cmax, kt_exempt=kt_exempt)
    prof = replace(profile, branches=branches)
    net = _series_only(build_network(prof, switch_states or {}))
    if bus not in net.energized:
        raise BenchwalkError(
            f"{profile.path}: bus {bus!r} is not in the profile; buses are {', '.join(net.buses)}"
        )
    if not net.energized[bus]:
        raise BenchwalkError(
            f"{profile.path}: bus {bus!r} is dead in this switch state; no source feeds a fault there"
        )
    nod = assemble(net)
    n_bus = 3 * sum(1 for b in net.buses if net.energized[b])
    keep = np.flatnonzero(~nod.slack[:n_bus])
    i = nod.idx[bus]
    if nod.slack[i]:
        raise BenchwalkError(
            f"{profile.path}: bus {bus!r} is held by an ideal source (sc_va = inf); its short-circuit current is unbounded"
        )
    # Kron-reduce every other node (pinv: a zero-sequence island behind a delta or a floating
    # star is singular in Y; its null space is the blocked zero sequence, which pinv leaves out)
    b_rows = [i, i + 1, i + 2]
    others = [int(n) for n in keep if n not in b_rows]
    y = nod.y
    y_th = y[np.ix_(b_rows, b_rows)]
    if others:
        y_th = (
            y_th
            - y[np.ix_(b_rows, others)]
            @ np.linalg.pinv(y[np.ix_(others, others)])
            @ y[np.ix_(others, b_rows)]
        )
    y012 = to_sequence_matrix(y_th)
    ys = [complex(y012[k, k]) for k in range(3)]
    scale = max(abs(v) for v in ys)
    z0, z1, z2 = (1 / v if abs(v) > 1e-9 * scale else complex(math.inf, math.inf) for v in ys)
    z_abc = np.linalg.pinv(y_th)
    r_x_small = all(
        _branch_rx(br.model) < 0.3
        for br in branches
        if br.model is not None and br.kind in ("line", "transformer", "source")
    )
    return Thevenin(
        bus=bus,
        z_abc=z_abc,
        z0=z0,
        z1=z1,
        z2=z2,
        meshed=_meshed(net, bus),
        all_branches_below_0_3=r_x_small,
        kt=kts,
    )


def _branch_rx(p: BranchParams | None) -> float:
    if isinstance(p, LineParams):
        return p.r_ohm / p.x_ohm if p.x_ohm else math.inf
    if isinstance(p, TransformerParams):
        ux = math.sqrt(max(p.uk_pct**2 - p.ur_pct**2, 0.0))
        return p.ur_pct / ux if ux else math.inf
    if isinstance(p, SourceParams):
        return 1.0 / p.x_r if p.x_r else math.inf
    return 0.0
