"""A profile and its captures as the estimator's terms (``meas.estimate.core``).

Per step, the switch states select the live buses (``meas.network.topology``, the one rule);
dead parts drop out. Three phase nodes per live bus. Lines and transformers with model data
become two-port terms whose admittance is rebuilt from their parameters
(``meas.network.elements``); loads and shunts become ZIP terms with P and Q multipliers;
sources, and any branch without model data, are *free* injections: the bus they sit on has no
Kirchhoff equation, and a meter on a free element is verified through Kirchhoff only when it is
the bus's one free element. One angle reference per island per step: meters share no time
base, so nothing else fixes the angles.

Shared unknowns, in this order: every model parameter with its prior from
``meas.network.parameters`` (relative ones as multipliers of the nameplate value, ``tap_pct``
in points), then per meter a voltage gain and a current gain with priors from the class.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from ..model import Branch, LineParams, LoadParams, Meter, Profile, ShuntParams, TransformerParams
from ..network.elements import (
    bus_nominal_phase_voltage,
    line_admittance,
    load_parts,
    shunt_admittance,
    transformer_admittance,
)
from ..network.parameters import ModelParameter, model_parameters
from ..network.topology import branch_conducts, energization
from ..snapshot import Snapshot
from .core import (
    Current,
    KclTerm,
    LoadTerm,
    Prior,
    StepModel,
    TwoPortTerm,
)
from .meter_terms import MeterTerms, Wiring
from .weights import CaptureMeans, capture_means, gain_std, rated

KCL_SHARE = 1e-4  # Kirchhoff rows: sigma = this share of the bench's base current (our rule)


@dataclass(frozen=True)
class Unverified:
    """A reading (or a meter's group of readings) no equation could check, and why."""

    meter: str
    quantity: str
    reason: str
    step: int = -1


@dataclass
class Problem:
    """Everything the estimator needs, plus the names to report back in."""

    steps: list[StepModel]
    priors: list[Prior]
    params: list[ModelParameter]
    gains: dict[tuple[str, str], int]  # (meter, "v"|"i") -> shared index
    keys: list[list[list[str]]]  # step -> meter term -> reading keys (row order)
    meter_ids: list[list[str]]  # step -> meter term -> meter id
    unverified: list[Unverified] = field(default_factory=list)
    captures: list[int] = field(default_factory=list)  # step -> index of its capture


@dataclass(frozen=True)
class _Topology:
    """What a switch state decides: live nodes, element terms, Kirchhoff buses, flat start."""

    model: StepModel  # without meters
    node: dict[str, int]  # live bus -> first node
    on: dict[str, bool]  # branch conducts and is live
    where: dict[str, tuple[str, int]]  # modelled branch -> ("t"|"l", term index)
    free: dict[str, list[str]]  # bus -> free injections on it
    at_bus: dict[str, list[tuple[str, int, int]]]


def _rel_key(key: str) -> str:
    return key.removesuffix("_per_km")


def _two_port_builder(br: Branch, prm: list[tuple[int, ModelParameter]]) -> TwoPortTerm:
    params = br.model
    assert br.to_bus is not None and params is not None

    fields = [(_rel_key(mp.key), mp.scale == "absolute") for _, mp in prm]
    bases = [getattr(params, f) for f, _ in fields]

    def with_values(pv: np.ndarray) -> object:
        # a copy with the fields set (the values ``dataclasses.replace`` would give; this runs
        # at every iteration of every fit, and replace's checks cost as much as the builder)
        out = object.__new__(type(params))
        out.__dict__.update(params.__dict__)
        for j, ((field_, absolute), base) in enumerate(zip(fields, bases, strict=True)):
            object.__setattr__(out, field_, float(pv[j]) if absolute else base * float(pv[j]))
        return out

    if isinstance(params, LineParams):

        def y_of(pv: np.ndarray) -> np.ndarray:
            return line_admittance(with_values(pv))  # type: ignore[arg-type]
    else:
        assert isinstance(params, TransformerParams)

        def y_of(pv: np.ndarray) -> np.ndarray:
            t: TransformerParams = with_values(pv)  # type: ignore[assignment]
            return transformer_admittance(
                t.s_va, t.v1_ll, t.v2_ll, t.uk_pct, t.ur_pct, t.vector_group, t.tap_pct
            )

    return TwoPortTerm(br.id, np.zeros(0, np.int64), y_of, tuple(i for i, _ in prm))


def _zip_parts(br: Branch, v_nom: float) -> tuple[np.ndarray, np.ndarray]:
    params = br.model
    if isinstance(params, LoadParams):
        sz, si, sp = load_parts(params)
        parts = np.vstack([sz, si, sp])
    else:
        assert isinstance(params, ShuntParams)
        s = np.conj(shunt_admittance(params, v_nom)) * v_nom**2
        parts = np.vstack([s, np.zeros(3), np.zeros(3)])
    return parts.real.copy(), parts.imag.copy()


def _modelled(br: Branch) -> bool:
    return br.model is not None and br.kind != "source"


class Builder:
    """Per-profile structures, built once; ``problem`` turns captures into a Problem."""

    def __init__(self, profile: Profile):
        self.profile = profile
        self.v_nom = bus_nominal_phase_voltage(profile)
        self.params: list[ModelParameter] = []
        self.priors: list[Prior] = []
        by_branch: dict[str, list[tuple[int, ModelParameter]]] = {}
        for mp in model_parameters(b for b in profile.branches if _modelled(b)):
            if mp.scale == "relative" and (mp.nominal == 0 or mp.tolerance <= 0):
                continue
            if mp.scale == "absolute" and mp.tolerance <= 0:
                continue
            k = len(self.params)
            self.params.append(mp)
            mean = mp.nominal if mp.scale == "absolute" else 1.0
            std = mp.std if mp.scale == "absolute" else mp.tolerance / 100 / math.sqrt(3)
            self.priors.append(Prior(mp.name, mean, std))
            by_branch.setdefault(mp.branch, []).append((k, mp))
        self.two_port: dict[str, TwoPortTerm] = {}
        self.zip: dict[str, tuple[np.ndarray, np.ndarray, int, int]] = {}
        for br in profile.branches:
            if not _modelled(br):
                continue
            prm = by_branch.get(br.id, [])
            if br.kind in ("line", "transformer"):
                self.two_port[br.id] = _two_port_builder(br, prm)
            else:
                zp, zq = _zip_parts(br, self.v_nom[br.from_bus])
                idx = {mp.key: k for k, mp in prm}
                self.zip[br.id] = (zp, zq, idx.get("p_w", -1), idx.get("q_var", -1))
        self._rated_of: dict[str, tuple[float, float]] = {}
        self.terms = MeterTerms(profile, self._rated)
        self._topo: dict[tuple[tuple[str, str], ...], _Topology | None] = {}
        self.gains: dict[tuple[str, str], int] = {}
        for m in profile.meters:
            sv, si = gain_std(m)
            self.gains[(m.id, "v")] = len(self.priors)
            self.priors.append(Prior(f"{m.id}.v_gain", 1.0, sv))
            if m.branch is not None:
                self.gains[(m.id, "i")] = len(self.priors)
                self.priors.append(Prior(f"{m.id}.i_gain", 1.0, si))

    # ------------------------------------------------------------------ one step

    def _topology(self, known: Mapping[str, str]) -> _Topology | None:
        """The switch-state part of a step (cached: a session repeats a few states)."""
        ck = tuple(sorted(known.items()))
        if ck in self._topo:
            return self._topo[ck]
        out = self._build_topology(dict(known))
        self._topo[ck] = out
        return out

    def _build_topology(self, full: dict[str, str]) -> _Topology | None:
        prof = self.profile
        conducts = branch_conducts(prof, full)
        fed = energization(prof, conducts, unknown_conducts=False)
        live = list(fed)
        if not live:
            return None
        node = {b: 3 * i for i, b in enumerate(live)}
        n = 3 * len(live)
        vn = np.repeat([self.v_nom[b] for b in live], 3)
        on = {br.id: bool(conducts[br.id]) and br.from_bus in node for br in prof.branches}
        tps: list[TwoPortTerm] = []
        loads: list[LoadTerm] = []
        at_bus: dict[str, list[tuple[str, int, int]]] = {b: [] for b in live}
        free: dict[str, list[str]] = {b: [] for b in live}
        where: dict[str, tuple[str, int]] = {}
        for br in prof.branches:
            if not on[br.id]:
                continue
            if br.id in self.two_port:
                assert br.to_bus is not None
                t = self.two_port[br.id]
                nodes = np.r_[node[br.from_bus] + np.arange(3), node[br.to_bus] + np.arange(3)]
                where[br.id] = ("t", len(tps))
                at_bus[br.from_bus].append(("t", len(tps), 0))
                at_bus[br.to_bus].append(("t", len(tps), 1))
                tps.append(replace(t, nodes=nodes.astype(np.int64)))
            elif br.id in self.zip:
                zp, zq, kp, kq = self.zip[br.id]
                nodes = (node[br.from_bus] + np.arange(3)).astype(np.int64)
                where[br.id] = ("l", len(loads))
                at_bus[br.from_bus].append(("l", len(loads), 0))
                loads.append(
                    LoadTerm(br.id, nodes, np.full(3, self.v_nom[br.from_bus]), zp, zq, kp, kq)
                )
            else:
                for b in br.buses:
                    if b in free:
                        free[b].append(br.id)
        # islands over modelled two-ports; reference = first bus reached; flat start by no-load transfer
        v0 = np.zeros(n, complex)
        refs: list[int] = []
        seen: set[str] = set()
        rot = np.exp(-2j * np.pi / 3 * np.arange(3))
        for b in live:
            if b in seen:
                continue
            refs.append(node[b])
            v0[node[b] : node[b] + 3] = self.v_nom[b] * rot
            seen.add(b)
            stack = [b]
            while stack:
                a = stack.pop()
                for kind, idx, end in at_bus[a]:
                    if kind != "t":
                        continue
                    t = tps[idx]
                    other = int(t.nodes[3 * (1 - end)])
                    ob = live[other // 3]
                    if ob in seen:
                        continue
                    y = t.y_of(np.array([self.priors[i].mean for i in t.params]))
                    s_this = slice(3 * end, 3 * end + 3)
                    s_oth = slice(3 * (1 - end), 3 * (1 - end) + 3)
                    va = v0[node[a] : node[a] + 3]
                    vo = -np.linalg.pinv(y[s_oth, s_oth]) @ y[s_oth, s_this] @ va
                    if not np.all(np.isfinite(vo)) or np.max(np.abs(vo)) == 0:
                        vo = self.v_nom[ob] * rot
                    v0[other : other + 3] = vo
                    seen.add(ob)
                    stack.append(ob)
        kcl: list[KclTerm] = []
        for b in live:
            if free[b] or not at_bus[b]:
                continue
            i_base = prof.bench.s_base_va / (3 * self.v_nom[b])
            cur: Current = tuple((kd, idx, end, 1.0) for kd, idx, end in at_bus[b])
            kcl.append(KclTerm(b, cur, KCL_SHARE * i_base))
        model = StepModel(
            n, vn, v0, np.array(refs, np.int64), tuple(tps), tuple(loads), (), tuple(kcl)
        )
        return _Topology(model, node, on, where, free, at_bus)

    def _rated(self, m: Meter) -> tuple[float, float]:
        hit = self._rated_of.get(m.id)
        if hit is None:
            hit = self._rated_of[m.id] = rated(self.profile, m)
        return hit

    def _wiring(self, topo: _Topology, m: Meter) -> Wiring | None:
        """How meter ``m``'s current enters the fit in this topology (None: not live)."""
        if m.bus not in topo.node:
            return None
        node, on, where, free, at_bus = topo.node, topo.on, topo.where, topo.free, topo.at_bus
        current: Current = ()
        drop = ""
        if m.branch is not None:
            br = self.profile.branch(m.branch)
            if on[br.id] and br.id in where:
                kd, idx = where[br.id]
                end = 0 if kd == "l" or br.from_bus == m.bus else 1
                current = ((kd, idx, end, 1.0),)
            elif on[br.id]:
                # a free injection: checked through Kirchhoff only as its bus's only one
                others = [f for f in free[m.bus] if f != br.id]
                if others:
                    drop = (
                        f"{m.bus} has another free injection ({', '.join(others)}) besides "
                        f"{br.id}: no equation checks {m.id}'s current"
                    )
                elif not at_bus[m.bus]:
                    drop = (
                        f"nothing else at {m.bus} is modelled: no equation checks {m.id}'s current"
                    )
                else:
                    current = tuple((kd, idx, end, -1.0) for kd, idx, end in at_bus[m.bus])
        v_nodes = (node[m.bus] + np.arange(3)).astype(np.int64)
        v_nodes.flags.writeable = False
        return Wiring(current, drop, v_nodes)

    def step(
        self,
        states: Mapping[str, str],
        means: CaptureMeans,
        k: int,
        out_unverified: list[Unverified],
    ) -> tuple[StepModel | None, list[list[str]], list[str]]:
        """One capture's terms: the topology of its switch state and a term per meter with
        readings (``meas.estimate.meter_terms``)."""
        prof = self.profile
        # a switch without a reading is unknown, as for every other check (meas.network.topology)
        known = {s.id: states.get(s.id, "unknown") for s in prof.switches}
        for s, st in known.items():
            if st not in ("open", "closed"):
                out_unverified.append(
                    Unverified(
                        "*", "*", f"switch {s} reads {st!r}: this step's topology is unknown", k
                    )
                )
                return None, [], []
        topo = self._topology(known)
        if topo is None:
            return None, [], []
        t = self.terms.template(
            tuple(sorted(known.items())),
            means,
            lambda m: self._wiring(topo, m),
            lambda m: (self.gains.get((m.id, "v"), -1), self.gains.get((m.id, "i"), -1)),
        )
        out_unverified.extend(Unverified(mid, "i, p, q", why, k) for mid, why in t.dropped)
        model = replace(topo.model, meters=self.terms.terms(t, means))
        return model, [list(kk) for kk in t.keys], [m.id for m in t.meters]

    def problem(self, captures: Sequence[Sequence[Snapshot]]) -> Problem:
        """One step per capture (its snapshots share one switch state, the first one's)."""
        pr = Problem([], list(self.priors), list(self.params), dict(self.gains), [], [])
        for k, snaps in enumerate(captures):
            if not snaps:
                continue
            means = capture_means([m.id for m in self.profile.meters], snaps)
            st, keys, ids = self.step(dict(snaps[0].switches), means, k, pr.unverified)
            if st is None or not st.meters:
                continue
            pr.steps.append(st)
            pr.keys.append(keys)
            pr.meter_ids.append(ids)
            pr.captures.append(k)
        return pr
