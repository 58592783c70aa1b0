"""What the console shows, as plain data: one frame per poll cycle.

``tui.bridge`` builds these from the session and runner; the widgets only read them, so every
widget can be exercised with hand-built frames and none of them knows the runner's API.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from meas.results import CheckResult
from meas.snapshot import Snapshot

# The overall state in words and symbols, so it reads without colour (monochrome terminals,
# colour-blind users): the symbol and the word carry the meaning, colour only repeats it.
OVERALL_MARK = {
    "settling": ("~", "SETTLING"),
    "consistent": ("\u2714", "CONSISTENT"),
    "inconsistent": ("\u2718", "INCONSISTENT"),
    "waiting": ("\u2026", "WAITING"),
    "offline": ("\u2298", "NO DATA"),
    "done": ("\u25a0", "SEQUENCE DONE"),
}


@dataclass(frozen=True)
class StepInfo:
    index: int  # 1-based
    total: int
    step_id: str
    title: str
    instruction: str
    kind: str
    state: str  # the runner's state name, shown as is
    expected: dict[str, str] = field(default_factory=dict)  # switch -> "open"/"closed"
    actual: dict[str, str] = field(default_factory=dict)  # switch -> "open"/"closed"/"unknown"
    settle: float | None = None  # 0..1 of the settle window, None when not settling
    overall: str = "waiting"  # key of OVERALL_MARK
    next_action: str = ""  # what to press next, in words
    message: str = ""  # the runner's last notice (why verification failed, ...)
    action: str = ""  # the runner's next action (meas.walk.states.ACTIONS)
    allowed: frozenset[str] = frozenset()  # runner commands allowed now: the step keys enabled
    remote_switches: tuple[str, ...] = ()  # switches this step may operate remotely
    captured: int = 0
    to_capture: int = 0
    finished: bool = False
    flagged: tuple[str, ...] | None = None  # the runner's mismatches; None: every difference
    to_operate: tuple[str, ...] = ()  # switches this step operates (by hand or remotely)
    hint: str = ""  # a line for the step panel (e.g. what the simulated bench does for you)
    verdict: str = ""  # the session verdict so far, one line (``meas.verdict``)
    simulated: bool = False  # the readings come from the simulated bench

    @property
    def mismatches(self) -> list[str]:
        """Switches the step cannot go on with: the runner's list when it gave one (a switch
        without a status point reads unknown but is taken on the technician's word)."""
        if self.flagged is not None:
            return list(self.flagged)
        return [s for s, want in self.expected.items() if self.actual.get(s) != want]


@dataclass(frozen=True)
class Frame:
    snapshot: Snapshot | None
    checks: tuple[CheckResult, ...] = ()
    step: StepInfo | None = None
    events: tuple[str, ...] = ()  # new log lines since the previous frame
    settle_window_s: float = 2.0
