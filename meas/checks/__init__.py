"""All consistency checks over one Snapshot (plus a short history), and their ordering.

``CheckEngine(profile)`` precomputes the per-profile structures (columns, classes, ratings,
topology) and, per check family, a plan: the n/a results that depend only on the profile, the
fixed texts of passing results, constant passing results (shared: results are immutable).
``.run(snapshot, history)`` is then a few whole-array numpy expressions per family and one tight
loop that files each result straight into its status bucket (fail, warn, pass, n/a), so the
output comes failures first without a sort. Results are deterministic: the same inputs always
give the same list in the same order, so an offline re-check of an exported dataset reproduces
the table exactly. The speed-ups keep every IEEE 754 operation and its memory layout (numpy's
SIMD loops may round transcendental functions differently on contiguous and strided data);
tests/checks/test_checks_golden.py pins every field of every result bit for bit.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal, TypedDict

import numpy as np

from ..model import Profile
from ..results import STATUS_RANK, CheckResult
from ..snapshot import Snapshot
from .base import buckets
from .comm import CommPlan
from .frame import Frame
from .layout import Layout
from .meter import MeterPlan
from .network import NetworkChecks
from .network.model_fit import ModelFit
from .phase import PhasePlan
from .quality import QualityPlan
from .quality import history as stack_history
from .settle import SettleDetector, SettleState
from .wiring import WiringPlan


class _Quiet(TypedDict):
    """numpy.errstate keywords: NaN marks a missing reading, its warnings say nothing new."""

    invalid: Literal["ignore"]
    divide: Literal["ignore"]
    over: Literal["ignore"]


_QUIET: _Quiet = {"invalid": "ignore", "divide": "ignore", "over": "ignore"}

__all__ = [
    "CheckEngine",
    "run_checks",
    "sort_results",
    "SettleDetector",
    "SettleState",
    "CHECK_IDS",
]

CHECK_IDS = (
    "meter.p_sum",
    "meter.q_sum",
    "meter.s_total",
    "meter.pf",
    "meter.s_phase",
    "meter.frequency",
    "phase.v_sequence",
    "phase.v_unbalance",
    "phase.i_unbalance",
    "phase.pf_spread",
    "phase.wiring",
    "network.p_balance",
    "network.q_balance",
    "network.losses",
    "network.v_agree",
    "network.f_agree",
    "network.open_switch",
    "network.energization",
    "network.bad_data",
    "network.model_fit",
    "quality.comm",
    "quality.v_range",
    "quality.i_range",
    "quality.frozen",
    "quality.noise",
)
_ORDER = {c: i for i, c in enumerate(CHECK_IDS)}


def sort_results(results: Sequence[CheckResult]) -> list[CheckResult]:
    """Failures first, then warnings, passes, n/a; within a status by check id order, then subject."""
    return sorted(
        results, key=lambda r: (STATUS_RANK[r.status], _ORDER.get(r.check, 99), r.check, r.subject)
    )


class CheckEngine:
    """Every check for one profile. Keeps a small cache of frames for the history."""

    def __init__(self, profile: Profile):
        self.profile = profile
        self.layout = Layout.build(profile)
        self.network = NetworkChecks(self.layout)
        self.meter = MeterPlan(self.layout)
        self.phase = PhasePlan(self.layout)
        self.wiring = WiringPlan(self.layout)
        self.quality = QualityPlan(self.layout)
        self.comm = CommPlan(self.layout)
        self.model_fit = ModelFit(self.layout)
        self._cache: dict[int, tuple[Snapshot, Frame]] = {}

    def frame(self, snap: Snapshot) -> Frame:
        hit = self._cache.get(id(snap))
        if hit is not None and hit[0] is snap:
            return hit[1]
        with np.errstate(**_QUIET):
            fr = Frame.build(self.layout, snap)
        if len(self._cache) > 64:
            self._cache.pop(next(iter(self._cache)))
        self._cache[id(snap)] = (snap, fr)
        return fr

    def forget(self, snap: Snapshot) -> None:
        """Drop a snapshot's cached frame (benchmarks: time a snapshot as if new)."""
        self._cache.pop(id(snap), None)

    def run(self, snapshot: Snapshot, history: Sequence[Snapshot] = ()) -> list[CheckResult]:
        """All checks on ``snapshot``; ``history`` = earlier snapshots, oldest first."""
        with np.errstate(
            **_QUIET
        ):  # NaN marks missing readings: the numpy warnings they raise say nothing new
            return self._run(snapshot, history)

    def _run(self, snapshot: Snapshot, history: Sequence[Snapshot]) -> list[CheckResult]:
        lay = self.layout
        fr = self.frame(snapshot)
        frames = [self.frame(s) for s in history[-max(lay.limits.s.frozen_cycles, 16) :]] + [fr]
        bk = buckets()
        self.comm.run(snapshot, fr, bk)
        self.meter.run(fr, bk)
        self.phase.run(fr, bk)
        self.wiring.run(fr, bk)
        self.network.run(fr, dict(snapshot.switches), bk)
        self.model_fit.run(snapshot, history, bk)
        self.quality.ranges(fr, bk)
        hist = stack_history(frames[-max(self.quality.frozen_need, self.quality.noise_need) :])
        self.quality.frozen(hist, len(frames), fr, bk)
        self.quality.noise(hist, len(frames), bk)
        return bk[0] + bk[1] + bk[2] + bk[3]


def run_checks(
    profile: Profile, snapshot: Snapshot, history: Sequence[Snapshot] = ()
) -> list[CheckResult]:
    """All checks, failures first. Builds a CheckEngine each call: keep one for repeated use."""
    return CheckEngine(profile).run(snapshot, history)
