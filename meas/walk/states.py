"""The walk's vocabulary: step states, next actions, command names and a step's outcome."""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum

from ..results import CheckResult, Status
from ..verdict import OutcomeKind, StepRecord


class State(StrEnum):
    WAITING = "waiting"
    OPERATING = "operating"
    VERIFYING = "verifying"
    SETTLING = "settling"
    CAPTURING = "capturing"
    REVIEWING = "reviewing"
    ACCEPTED = "accepted"
    SKIPPED = "skipped"
    STOPPED = "stopped"
    FINISHED = "finished"


# what the technician does next (``RunnerView.action``): the console maps it to a key,
# headless mode to a prompt
ACTIONS = (
    "confirm_operation",
    "request_remote",
    "capture",
    "wait",
    "accept",
    "accept_with_reason",
    "retake",
    "sign",
    "note",
    "none",
)

# the runner's commands, by method name (``RunnerView.allowed`` is a subset)
COMMANDS = (
    "confirm_operation",
    "request_remote",
    "confirm_remote",
    "capture",
    "retake",
    "skip",
    "accept",
    "sign",
    "note",
    "stop",
)


@dataclass(frozen=True)
class StepOutcome:
    """How a step ended (``meas.verdict`` owns the vocabulary and the session verdict)."""

    step_id: str
    outcome: OutcomeKind  # passed | accepted_with_failures | skipped (not_captured: no entry)
    status: Status  # worst check status of the final review (PASS when none)
    failures: tuple[CheckResult, ...] = ()
    reason: str = ""
    # one line per meter the model-aware check could not verify in the final review
    unverified: tuple[str, ...] = ()

    def record(self) -> StepRecord:
        failed = len(self.failures) or (1 if self.status is Status.FAIL else 0)
        return StepRecord(self.step_id, self.outcome, self.reason, failed)
