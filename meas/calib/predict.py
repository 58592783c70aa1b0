"""The model side of the fit: what the meters would read if the model were the bench.

For given parameter values the profile's own three-phase load flow (``meas.network``) is solved
for each step's switch state and read through each meter exactly as the simulated bench reads
it (``meas.network.readings``). A parameter of a branch that is switched out in a step cannot
change that step's readings, so a finite-difference column only re-solves the steps where the
branch is in service: on the demo bench that saves about a third of the load flows.

``Predictor`` is the seam: the fit takes any object with this shape, which is how a test puts
a reference library's load flow in the loop instead.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import replace
from typing import Protocol

import numpy as np

from ..model import Profile
from ..network.admittance import build_network
from ..network.elements import SourceModel, element_models
from ..network.loadflow import Solution, solve
from ..network.parameters import with_values
from ..network.readings import meter_phasors, phase_values
from .observations import Observations


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


class NetworkPredictor:
    """``Predictor`` on benchwalk's own load flow (``meas.network``)."""

    def __init__(self, profile: Profile, obs: Observations):
        self.profile = profile
        self.obs = obs
        self.solves = 0
        self._rows: list[list[tuple[int, str, int, int]]] = [[] for _ in obs.steps]
        for i in range(len(obs)):
            q = _QUANTITY_INDEX[obs.quantity[i]]
            self._rows[int(obs.step[i])].append((i, obs.meter[i], q, "ABC".index(obs.phase[i])))
        self._start: list[Solution | None] = [None] * len(obs.steps)
        models = element_models(profile)
        self._in_service: list[frozenset[str]] = []
        for st in obs.steps:
            net = build_network(profile, st.switches, models)
            self._in_service.append(frozenset(net.branch_buses) - net.open_branches)

    def affected(self, name: str) -> tuple[int, ...]:
        branch = name.partition(".")[0]
        return tuple(k for k, on in enumerate(self._in_service) if branch in on)

    def predict(
        self,
        values: Mapping[str, float],
        emf: np.ndarray | None = None,
        steps: Sequence[int] | None = None,
        base: np.ndarray | None = None,
    ) -> np.ndarray:
        profile = self.profile
        if values:
            profile = replace(profile, branches=with_values(profile.branches, values))
        models = element_models(profile)
        out = np.zeros(len(self.obs)) if base is None else base.copy()
        todo = range(len(self.obs.steps)) if steps is None else steps
        for k in todo:
            rows = self._rows[k]
            if not rows:
                continue
            step_models = models
            if emf is not None and emf[k] != 1.0:
                step_models = dict(models)
                for bid, m in models.items():
                    if isinstance(m, SourceModel):
                        step_models[bid] = replace(m, emf=m.emf * emf[k])
            net = build_network(profile, self.obs.steps[k].switches, step_models)
            sol = solve(net, tol_pu=FIT_TOL_PU, start=self._start[k])
            self.solves += 1
            if steps is None:
                self._start[k] = sol
            cache: dict[str, tuple[np.ndarray, ...]] = {}
            for i, meter_id, q, ph in rows:
                vals = cache.get(meter_id)
                if vals is None:
                    vals = phase_values(*meter_phasors(profile, profile.meter(meter_id), sol))
                    cache[meter_id] = vals
                out[i] = vals[q][ph]
        return out


# The fit differentiates readings numerically, so the load flow must be exact far below the
# readings' spread: 1e-13 pu (3 nVA on the demo bench) is one cheap NR iteration more.
FIT_TOL_PU = 1e-13
_QUANTITY_INDEX = {"v_ln": 0, "i": 1, "p": 2, "q": 3}  # the order of phase_values
