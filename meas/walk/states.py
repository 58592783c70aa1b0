"""The walk's vocabulary: step states, next actions, command names and a step's outcome."""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum

from ..results import CheckResult, Status


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
    step_id: str
    outcome: str  # "accepted" | "skipped"
    status: Status  # worst check status of the final capture (PASS when none)
    failures: tuple[CheckResult, ...] = ()
    reason: str = ""
