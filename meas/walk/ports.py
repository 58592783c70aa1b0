"""What the runner needs from the things around it, as Protocols of its own.

The runner never imports the journal, the switch control or the settle detector: the session
hands in whatever satisfies these seams (the SQLite journal, the guarded switch control, the
settle detector's adapter), so the state machine can be read and tested on its own.
"""

from __future__ import annotations

from collections.abc import Awaitable, Callable, Mapping, Sequence
from typing import Protocol

from ..model import CapturePolicy
from ..results import CheckResult
from ..snapshot import Snapshot


class JournalSink(Protocol):
    """The calls the runner makes on the session journal (append only)."""

    def record_snapshot(self, snapshot: Snapshot, *, step_id: str | None, role: str) -> int:
        """Save one snapshot with its role; returns its row id."""
        ...

    def record_checks(
        self, snapshot_row: int, step_id: str | None, results: Sequence[CheckResult]
    ) -> None: ...

    def record_event(
        self,
        kind: str,
        message: str,
        *,
        step_id: str | None = None,
        operator: str | None = None,
        data: dict[str, object] | None = None,
    ) -> object: ...

    def record_step(
        self,
        step_id: str,
        state: str,
        *,
        outcome: str | None = None,
        operator: str | None = None,
        reason: str | None = None,
        settle_s: float | None = None,
        actual_switches: Mapping[str, str] | None = None,
        expected_switches: Mapping[str, str] | None = None,
    ) -> None: ...


class OperateOutcome(Protocol):
    """What a remote command reports back."""

    @property
    def ok(self) -> bool: ...
    @property
    def message(self) -> str: ...
    @property
    def final_status(self) -> str: ...


class SwitchOperator(Protocol):
    """The guarded switch control: sends one command coil and follows the status."""

    def operate(
        self, switch_id: str, state: str, *, confirmed_by: str
    ) -> Awaitable[OperateOutcome] | OperateOutcome: ...


class Settle(Protocol):
    """What the runner needs from a settle detector (see ``meas.checks``)."""

    def update(self, snapshot: Snapshot) -> None: ...
    @property
    def settled(self) -> bool: ...
    @property
    def timed_out(self) -> bool: ...
    @property
    def elapsed_s(self) -> float: ...
    @property
    def settle_s(self) -> float: ...  # how long settling took (when steady), for the journal
    @property
    def worst(self) -> str: ...  # "<meter>:<quantity>" furthest from steady
    @property
    def progress(self) -> float: ...


# the check engine: results for one snapshot, given earlier snapshots only
CheckFn = Callable[[Snapshot, Sequence[Snapshot]], list[CheckResult]]
SettleFactory = Callable[[CapturePolicy], Settle]
