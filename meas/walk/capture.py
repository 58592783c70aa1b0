"""Capture bookkeeping: the snapshot history, which snapshots are picked, and the review.

A step picks N snapshots at the policy interval once the readings are steady; each is checked
against the steady stretch of history only (a switching transient would read as noise or
disagreement), and the exact history rows are kept so an offline re-check can replay them.
The review judges each (check, subject) by its median status over the N captures, from a
running tally: memory stays flat however many captures a step takes (every capture's results
are in the journal; the step keeps only counts and one result per status).
"""

from __future__ import annotations

from collections import deque
from collections.abc import Sequence

from ..model import CapturePolicy
from ..results import STATUS_RANK, CheckResult, Status
from ..snapshot import Snapshot
from .live import LiveWatch
from .ports import CheckFn


class MedianTally:
    """Per (check, subject): how many captures gave each status, and the latest result of each.

    ``median()`` is the median by severity (worst first, the element at index n // 2), shown
    by the latest result with that status. Bounded by the subjects and the statuses, never by
    the number of captures.
    """

    def __init__(self) -> None:
        self.batches = 0
        self._counts: dict[tuple[str, str], dict[Status, int]] = {}
        self._latest: dict[tuple[str, str], dict[Status, CheckResult]] = {}

    def add(self, batch: Sequence[CheckResult]) -> None:
        self.batches += 1
        for r in batch:
            key = (r.check, r.subject)
            counts = self._counts.setdefault(key, {})
            counts[r.status] = counts.get(r.status, 0) + 1
            self._latest.setdefault(key, {})[r.status] = r

    def median(self) -> list[CheckResult]:
        out = []
        for key, counts in self._counts.items():
            middle = sum(counts.values()) // 2
            seen = 0
            for status in sorted(counts, key=STATUS_RANK.__getitem__):  # worst first
                seen += counts[status]
                if seen > middle:
                    out.append(self._latest[key][status])
                    break
        return out


def median_per_subject(batches: Sequence[Sequence[CheckResult]]) -> list[CheckResult]:
    """One result per (check, subject): the median by severity over the capture snapshots.

    A persistent fault (a reversed CT) fails every capture and so the step; one noisy
    excursion in N captures does not, since limits are set at about 95 % coverage (k = 2)
    and a step runs well over a hundred checks per snapshot. Every per-snapshot result
    stays in the journal and the dataset.
    """
    tally = MedianTally()
    for batch in batches:
        tally.add(batch)
    return tally.median()


class CaptureBook:
    """History, journal rows of recent snapshots, this tick's checks, and the step's picks."""

    def __init__(self, history: int) -> None:
        self.history: deque[Snapshot] = deque(maxlen=history)
        self._row_of: dict[tuple[int, float], int] = {}  # (seq, t_mono) -> journal row
        self._tick_results: list[CheckResult] | None = None
        self._tick_history: list[Snapshot] = []
        self.reset()

    def reset(self) -> None:
        """A new step: nothing picked, no steady stretch, no review."""
        self.restart()
        self.steady_t0 = float("-inf")
        self.review: list[CheckResult] = []

    def restart(self) -> None:
        """Drop the picks (settling again, or the configuration changed)."""
        self.tally = MedianTally()  # the picks' results, as counts (see MedianTally)
        self.last_t = float("-inf")

    # ------------------------------------------------------------------ per tick

    def new_tick(self) -> None:
        """Forget the cached results: the next ``results`` call checks again."""
        self._tick_results = None

    def saved(self, snapshot: Snapshot, row: int) -> None:
        """Remember the journal row of a snapshot (for the check-history event)."""
        self._row_of[(snapshot.seq, snapshot.t_mono)] = row
        if len(self._row_of) > 4 * (self.history.maxlen or 64):
            live = {(h.seq, h.t_mono) for h in self.history}
            self._row_of = {k: v for k, v in self._row_of.items() if k in live}

    def results(
        self, snapshot: Snapshot, checks: CheckFn, *, capturing: bool, live: LiveWatch
    ) -> list[CheckResult]:
        """Check results for this tick's snapshot, computed at most once per tick."""
        if self._tick_results is None:
            history = list(self.history)[:-1]
            if capturing:
                # judge captures against the steady stretch only: a switching transient in the
                # history would read as noise or disagreement
                history = [h for h in history if h.t_mono >= self.steady_t0]
                results = checks(snapshot, history)
            else:
                history = live.steady(history)
                results = live.gate(checks(snapshot, history))
            self._tick_results = results
            self._tick_history = history
        return self._tick_results

    def history_rows(self) -> list[int | None]:
        """Journal rows of the history the latest checks read, in order."""
        return [self._row_of.get((h.seq, h.t_mono)) for h in self._tick_history]

    # ------------------------------------------------------------------ picking

    def due(self, snapshot: Snapshot, policy: CapturePolicy, poll_interval_s: float) -> bool:
        """A pick is due: the policy interval has passed (within half a poll interval)."""
        slack = 0.5 * poll_interval_s
        return snapshot.t_mono - self.last_t >= policy.interval_s - slack

    @property
    def captured(self) -> int:
        """Snapshots picked so far in this step (since the last restart)."""
        return self.tally.batches

    def take(self, row: int, results: list[CheckResult], t_mono: float) -> None:
        self.tally.add(results)
        self.last_t = t_mono

    def complete(self, policy: CapturePolicy) -> bool:
        """All N picked: the review is judged (median per subject) and True returned."""
        if self.tally.batches < policy.snapshots:
            return False
        self.review = self.tally.median()
        return True
