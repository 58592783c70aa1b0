"""The model side of the fit: what the meters would read if the model were the bench.

For given parameter values the profile's own three-phase load flow (``meas.network``) is solved
for each step's switch state and read through each meter exactly as the simulated bench reads
it (``meas.network.readings``). A parameter of a branch that is switched out in a step cannot
change that step's readings, so a finite-difference column only re-solves the steps where the
branch is in service: on the demo bench that saves about a third of the load flows.

``NetworkPredictor.sensitivities`` gives the readings with their derivatives from one load
flow per step (``meas.calib.sensitivity``), so the fit needs no finite differences at all; the
column-by-column re-solve above is the fallback for a predictor without them.

``Predictor`` is the seam: the fit takes any object with this shape, which is how a test puts
a reference library's load flow in the loop instead.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import replace
from typing import Protocol, runtime_checkable

import numpy as np

from ..model import Profile
from ..network.admittance import Network, assemble, build_network
from ..network.elements import Element, SourceModel, element_models
from ..network.loadflow import Solution, solve
from ..network.parameters import model_parameters, with_values
from ..network.readings import meter_phasors, phase_values
from .observations import Observations
from .sensitivity import (
    CHARGING_STEP,
    ELEMENT_STEP,
    ElementDerivative,
    Stamp,
    StepSensitivity,
    current_derivative,
    emf_stamp,
    node_voltages,
    reading_derivatives,
)


class Predictor(Protocol):
    """Model readings for the rows of an ``Observations`` layout."""

    solves: int  # load flows run so far

    def predict(
        self,
        values: Mapping[str, float],
        emf: np.ndarray | None = None,
        steps: Sequence[int] | None = None,
        base: np.ndarray | None = None,
    ) -> np.ndarray:
        """Readings for parameter ``values`` (``BRANCH.key`` -> value; others at the profile's).

        ``emf`` multiplies the source EMF per step. With ``steps``, only those steps' rows are
        computed and the rest are copied from ``base``.
        """
        ...

    def affected(self, name: str) -> tuple[int, ...]:
        """The steps whose readings parameter ``name`` can change."""
        ...


@runtime_checkable
class SensitivityPredictor(Predictor, Protocol):
    """A ``Predictor`` that also gives the readings' derivatives without extra load flows."""

    def sensitivities(
        self, values: Mapping[str, float], names: Sequence[str], emf: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """(readings, d readings / d θ): a column per name (per unit of its value), then with
        ``emf`` one per step (per unit of the step's EMF multiplier)."""
        ...


class NetworkPredictor:
    """``Predictor`` on benchwalk's own load flow (``meas.network``), with sensitivities."""

    def __init__(self, profile: Profile, obs: Observations):
        self.profile = profile
        self.obs = obs
        self.solves = 0
        # per step: meter -> (rows, quantity index, phase index), for vectorised read-out
        grouped: list[dict[str, list[tuple[int, int, int]]]] = [{} for _ in obs.steps]
        for i in range(len(obs)):
            q = _QUANTITY_INDEX[obs.quantity[i]]
            grouped[int(obs.step[i])].setdefault(obs.meter[i], []).append(
                (i, q, "ABC".index(obs.phase[i]))
            )
        self._rows: list[dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]]] = [
            {m: tuple(np.array(c) for c in zip(*r, strict=True)) for m, r in g.items()}  # type: ignore[misc]
            for g in grouped
        ]
        self._start: list[Solution | None] = [None] * len(obs.steps)
        # the load flows of the last full prediction, reused by ``sensitivities`` at that point
        self._last: tuple[object, list[tuple[Network, Solution] | None]] | None = None
        models = element_models(profile)
        self._in_service: list[frozenset[str]] = []
        for st in obs.steps:
            net = build_network(profile, st.switches, models)
            self._in_service.append(frozenset(net.branch_buses) - net.open_branches)

    def affected(self, name: str) -> tuple[int, ...]:
        branch = name.partition(".")[0]
        return tuple(k for k, on in enumerate(self._in_service) if branch in on)

    def _setup(self, values: Mapping[str, float]) -> tuple[Profile, dict[str, Element]]:
        profile = self.profile
        if values:
            profile = replace(profile, branches=with_values(profile.branches, values))
        return profile, element_models(profile)

    def _solve(
        self, profile: Profile, models: Mapping[str, Element], emf: np.ndarray | None, k: int
    ) -> tuple[Network, Solution]:
        step_models = models
        if emf is not None and emf[k] != 1.0:
            step_models = {
                bid: replace(m, emf=m.emf * emf[k]) if isinstance(m, SourceModel) else m
                for bid, m in models.items()
            }
        net = build_network(profile, self.obs.steps[k].switches, step_models)
        sol = solve(net, tol_pu=FIT_TOL_PU, start=self._start[k])
        self.solves += 1
        return net, sol

    def predict(
        self,
        values: Mapping[str, float],
        emf: np.ndarray | None = None,
        steps: Sequence[int] | None = None,
        base: np.ndarray | None = None,
    ) -> np.ndarray:
        profile, models = self._setup(values)
        out = np.zeros(len(self.obs)) if base is None else base.copy()
        todo = range(len(self.obs.steps)) if steps is None else steps
        solved: list[tuple[Network, Solution] | None] = [None] * len(self.obs.steps)
        for k in todo:
            if not self._rows[k]:
                continue
            net, sol = self._solve(profile, models, emf, k)
            if steps is None:
                self._start[k] = sol
                solved[k] = (net, sol)
            for meter_id, (rows, q, ph) in self._rows[k].items():
                vals = np.array(phase_values(*meter_phasors(profile, profile.meter(meter_id), sol)))
                out[rows] = vals[q, ph]
        if steps is None:
            self._last = (_key(values, emf), solved)
        return out

    def sensitivities(
        self, values: Mapping[str, float], names: Sequence[str], emf: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """Readings and their derivatives at ``values``: at most one load flow per step.

        dV/dθ by the implicit function theorem on each step's converged load flow
        (``meas.calib.sensitivity``); an element's own derivative by central differences of
        its nameplate formulas, once per parameter for all steps.
        """
        profile, models = self._setup(values)
        derivs = [self._element_derivative(profile, name, values) for name in names]
        reuse = (
            self._last[1] if self._last is not None and self._last[0] == _key(values, emf) else None
        )
        n_steps = len(self.obs.steps)
        cols = len(names) + (n_steps if emf is not None else 0)
        h = np.zeros(len(self.obs))
        jac = np.zeros((len(self.obs), cols))
        for k in range(n_steps):
            if not self._rows[k]:
                continue
            got = reuse[k] if reuse is not None else None
            net, sol = got if got is not None else self._solve(profile, models, emf, k)
            self._start[k] = sol
            nodal = assemble(net)
            v = node_voltages(nodal, net, sol)
            elements: list[Element] = [*net.sources, *net.two_ports, *net.loads, *net.shunts]
            live = {m.branch: m for m in elements}
            scale = 1.0 if emf is None else float(emf[k])
            used: list[int] = []
            stamps: list[Stamp] = []
            for c, der in enumerate(derivs):
                el = live.get(der.branch)
                if el is not None:
                    used.append(c)
                    stamps.append(der.on(el, nodal, scale))
            if emf is not None:
                used.append(len(names) + k)
                stamps.append(emf_stamp(net, nodal, models))
            dv = StepSensitivity(nodal, v).dv(stamps)
            for meter_id, (rows, q, ph) in self._rows[k].items():
                meter = profile.meter(meter_id)
                vb, ib = meter_phasors(profile, meter, sol)
                h[rows] = np.array(phase_values(vb, ib))[q, ph]
                i0 = nodal.idx.get(meter.bus)
                if i0 is None or not used:
                    continue
                own = live.get(meter.branch) if meter.branch is not None else None
                di = current_derivative(own, meter.bus, nodal, net, v, dv, stamps)
                if own is not None:
                    for c, col in enumerate(used):
                        if col < len(names) and derivs[col].branch == meter.branch:
                            di[:, c] += derivs[col].current(own, meter.bus, nodal, net, v, scale)
                dd = np.array(reading_derivatives(vb, ib, dv[i0 : i0 + 3], di))
                jac[np.ix_(rows, np.array(used))] = dd[q, ph]
        return h, jac

    def _element_derivative(
        self, profile: Profile, name: str, values: Mapping[str, float]
    ) -> ElementDerivative:
        """Parameter ``name``'s element just below and above its value, as a derivative."""
        branch_id = name.partition(".")[0]
        br = profile.branch(branch_id)
        x = values.get(name)
        if x is None:
            x = next(p.nominal for p in model_parameters((br,)) if p.name == name)
        rel = CHARGING_STEP if name.endswith(("b_us", "b_us_per_km")) else ELEMENT_STEP
        # relative step; an additive parameter (tap_pct, in points) steps at least rel points
        step = rel * (max(abs(x), 1.0) if name.endswith("tap_pct") else abs(x) or 1.0)
        lo, hi = (
            element_models(replace(profile, branches=with_values((br,), {name: xx})))[branch_id]
            for xx in (x - step, x + step)
        )
        return ElementDerivative(branch_id, lo, hi, 2 * step, profile)


def _key(values: Mapping[str, float], emf: np.ndarray | None) -> object:
    return (tuple(sorted(values.items())), None if emf is None else tuple(emf.tolist()))


# The fit differentiates readings numerically, so the load flow must be exact far below the
# readings' spread: 1e-13 pu (3 nVA on the demo bench) is one cheap NR iteration more.
FIT_TOL_PU = 1e-13
_QUANTITY_INDEX = {"v_ln": 0, "i": 1, "p": 2, "q": 3}  # the order of phase_values
