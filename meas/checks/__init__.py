"""All consistency checks over one Snapshot (plus a short history), and their ordering.

``CheckEngine(profile)`` precomputes the per-profile structures (columns, classes, ratings,
topology) once; ``.run(snapshot, history)`` is then a handful of numpy expressions per check.
Results are deterministic: the same inputs always give the same list in the same order, so
an offline re-check of an exported dataset reproduces the table exactly.
"""

from __future__ import annotations

from collections.abc import Sequence

from ..model import Profile
from ..results import STATUS_RANK, CheckResult
from ..snapshot import Snapshot
from .frame import Frame, Layout
from .meter import meter_checks
from .network import NetworkChecks
from .phase import phase_checks
from .quality import comm_checks, frozen_checks, noise_checks, range_checks
from .settle import SettleDetector, SettleState

__all__ = ["CheckEngine", "run_checks", "sort_results", "by_status", "SettleDetector", "SettleState", "CHECK_IDS"]

CHECK_IDS = (
    "meter.p_sum", "meter.q_sum", "meter.s_total", "meter.pf", "meter.s_phase", "meter.frequency",
    "phase.v_sequence", "phase.v_unbalance", "phase.i_unbalance", "phase.pf_spread", "phase.wiring",
    "network.p_balance", "network.q_balance", "network.losses", "network.v_agree", "network.f_agree",
    "network.open_switch", "network.energization", "network.bad_data",
    "quality.comm", "quality.v_range", "quality.i_range", "quality.frozen", "quality.noise",
)
_ORDER = {c: i for i, c in enumerate(CHECK_IDS)}


def sort_results(results: Sequence[CheckResult]) -> list[CheckResult]:
    """Failures first, then warnings, passes, n/a; within a status by check id order, then subject."""
    return sorted(results, key=lambda r: (STATUS_RANK[r.status], _ORDER.get(r.check, 99), r.check, r.subject))


def by_status(results: Sequence[CheckResult]) -> list[CheckResult]:
    """Failures first, then warnings, passes, n/a, keeping the given order within each status.

    The engine emits results in a fixed order (check id order, subjects in profile order), so
    this stable bucket pass is deterministic and much cheaper than a full sort.
    """
    buckets: tuple[list[CheckResult], ...] = ([], [], [], [])
    rank = STATUS_RANK
    for r in results:
        buckets[rank[r.status]].append(r)
    return buckets[0] + buckets[1] + buckets[2] + buckets[3]


class CheckEngine:
    """Every check for one profile. Keeps a small cache of frames for the history."""

    def __init__(self, profile: Profile):
        self.profile = profile
        self.layout = Layout.build(profile)
        self.network = NetworkChecks(self.layout)
        self._cache: dict[int, tuple[Snapshot, Frame]] = {}

    def frame(self, snap: Snapshot) -> Frame:
        hit = self._cache.get(id(snap))
        if hit is not None and hit[0] is snap:
            return hit[1]
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
        lay = self.layout
        fr = self.frame(snapshot)
        frames = [self.frame(s) for s in history[-max(lay.limits.s.frozen_cycles, 16):]] + [fr]
        out = comm_checks(lay, snapshot)
        out += meter_checks(lay, fr)
        out += phase_checks(lay, fr)
        out += self.network.run(fr, dict(snapshot.switches))
        out += range_checks(lay, fr)
        out += frozen_checks(lay, frames)
        out += noise_checks(lay, frames)
        return by_status(out)


def run_checks(profile: Profile, snapshot: Snapshot, history: Sequence[Snapshot] = ()) -> list[CheckResult]:
    """All checks, failures first. Builds a CheckEngine each call: keep one for repeated use."""
    return CheckEngine(profile).run(snapshot, history)
