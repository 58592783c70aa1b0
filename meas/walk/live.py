"""The live settle watch: when may checks that read history (noise, frozen) judge again?

Between captures the runner still checks every snapshot for the screen. After any switching
seen in the switch status the readings move for a while, and a noise or frozen check over
that history would read the transient as a fault. So a switch seen in a new (known) state
starts a settle detector with the same criterion as a capture (so does the first snapshot
of a session); until it is steady those checks say "not judged while the readings settle",
and afterwards they read only history from the start of the steady stretch.
"""

from __future__ import annotations

from ..model import CapturePolicy, Profile, Step
from ..results import CheckResult, Status
from ..snapshot import Snapshot
from .ports import Settle, SettleFactory

HISTORY_CHECKS = frozenset(
    {"quality.noise", "quality.frozen"}
)  # checks that read earlier snapshots


def _settling_na(r: CheckResult) -> CheckResult:
    return CheckResult(
        r.check,
        r.subject,
        Status.NA,
        unit=r.unit,
        message="not judged while the readings settle after switching",
    )


class LiveWatch:
    """Follows the switch status of every snapshot and gates the history checks."""

    def __init__(self, profile: Profile, settle_factory: SettleFactory) -> None:
        self._profile = profile
        self._settle_factory = settle_factory
        self._known: dict[str, str] = {}
        self._started = False
        self._settle: Settle | None = None
        self.steady_t0 = float("-inf")  # history before this is not read by live checks

    @property
    def settling(self) -> bool:
        """A switch was seen operating and the readings are not steady yet."""
        return self._settle is not None

    def follow(self, snapshot: Snapshot, step: Step | None) -> None:
        """Restart the watch when a switch is seen in a new (known) state, then feed it."""
        # the first snapshot: nothing is known of how steady the readings are (the bench
        # was just connected, or switched just before): settle first, as after switching
        changed = not self._started
        self._started = True
        for sid, st in snapshot.switches.items():
            if st == "unknown":
                continue  # an unread status proves no operation
            if self._known.get(sid, st) != st:
                changed = True
            self._known[sid] = st
        if changed:
            policy = (step.capture if step is not None else None) or next(
                (s.capture for s in self._profile.steps if s.capture is not None),
                CapturePolicy(),
            )
            self._settle = self._settle_factory(policy)
            self.steady_t0 = float("inf")
        live = self._settle
        if live is None:
            return
        live.update(snapshot)
        if live.settled:
            self.steady_t0 = snapshot.t_mono - live.elapsed_s + live.settle_s
            self._settle = None
        elif live.timed_out:  # never steady: judge from here on rather than never
            self.steady_t0 = snapshot.t_mono
            self._settle = None

    def steady(self, history: list[Snapshot]) -> list[Snapshot]:
        """The part of ``history`` the live checks may read."""
        return [h for h in history if h.t_mono >= self.steady_t0]

    def gate(self, results: list[CheckResult]) -> list[CheckResult]:
        """While settling, history checks that could not judge say why."""
        if self._settle is None:
            return results
        return [
            _settling_na(r) if r.check in HISTORY_CHECKS and r.status is Status.NA else r
            for r in results
        ]
