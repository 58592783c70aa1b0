"""The settle detector as the runner sees it: settled, timed out, settle time, progress."""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import TYPE_CHECKING

from ..model import CapturePolicy, Profile
from ..snapshot import Snapshot

if TYPE_CHECKING:
    from ..checks.settle import SettleState


class SettleAdapter:
    """Presents ``meas.checks.SettleDetector`` with the small interface the runner uses."""

    def __init__(self, profile: Profile, policy: CapturePolicy):
        from ..checks.settle import SettleDetector

        self._det = SettleDetector(profile, policy.settle)
        self._window_s = policy.settle.window_s
        self._limit = policy.settle.rel_spread
        self._state: SettleState | None = None

    def update(self, snapshot: Snapshot) -> None:
        self._state = self._det.feed(snapshot)

    @property
    def settled(self) -> bool:
        return bool(self._state is not None and self._state.settled)

    @property
    def timed_out(self) -> bool:
        return bool(self._state is not None and self._state.timed_out)

    @property
    def elapsed_s(self) -> float:
        return float(self._state.elapsed_s) if self._state is not None else 0.0

    @property
    def settle_s(self) -> float:
        """When the readings became steady, seconds after settling began (elapsed until then)."""
        st = self._state
        if st is None:
            return 0.0
        return float(st.settle_time_s) if math.isfinite(st.settle_time_s) else float(st.elapsed_s)

    @property
    def worst(self) -> str:
        return str(self._state.worst) if self._state is not None else ""

    @property
    def progress(self) -> float:
        """0..1: the window filling, then how close the worst spread is to the limit."""
        st = self._state
        if st is None:
            return 0.0
        if st.settled:
            return 1.0
        fill = min(1.0, st.elapsed_s / self._window_s) if self._window_s > 0 else 1.0
        if not st.window_full:
            return 0.5 * fill
        closeness = self._limit / st.spread if st.spread > 0 else 1.0
        return 0.5 + 0.5 * min(1.0, closeness) * 0.99


def settle_factory(profile: Profile) -> Callable[[CapturePolicy], SettleAdapter]:
    return lambda policy: SettleAdapter(profile, policy)
