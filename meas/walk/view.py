"""The runner's picture for a screen or a prompt: ``RunnerView`` and how it is built.

The view is the one owner of "what can the technician do now": ``action`` names the next
thing to do (one of ``ACTIONS``) and ``allowed`` the commands offered now (names from
``COMMANDS``). The console enables exactly those keys and headless mode answers ``action``;
neither re-derives them from states or step kinds.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

from ..checks import sort_results
from ..model import Step, SwitchState
from ..results import CheckResult, Status, overall
from .standdown import doubtful_meters, hold_while_settling, stand_down
from .states import State

if TYPE_CHECKING:
    from .walk_state import WalkState


@dataclass(frozen=True)
class RunnerView:
    """Everything a screen shows about the sequence, as plain values."""

    index: int  # 0-based index of the current step
    total: int
    step: Step | None
    state: State
    expected: dict[str, SwitchState]
    actual: dict[str, str]
    mismatches: tuple[str, ...]  # switch ids whose status differs from expectation
    settle_progress: float  # 0..1
    settle_elapsed_s: float
    settle_timed_out: bool
    captured: int
    capture_target: int
    results: tuple[CheckResult, ...]  # latest, failures first
    overall: str  # "settling" | "consistent" | "inconsistent" | "waiting"
    next_action: str  # what to do next, in words
    action: str  # one of ACTIONS
    pending_remote: tuple[str, str] | None = None  # (switch, state) awaiting confirm_remote
    remote_todo: tuple[tuple[str, str], ...] = ()  # remote operations of this step not yet done
    message: str = ""  # last notice (e.g. why verification failed)
    operator: str = ""
    polled: bool = False  # a snapshot has been fed; before that switch states are unknown
    to_operate: tuple[
        str, ...
    ] = ()  # switches a manual or remote step changes from the step before
    allowed: frozenset[str] = frozenset()  # runner commands offered now (names in COMMANDS)
    verdict: str = ""  # the session verdict so far, one line (``meas.verdict``)
    hold_scope: tuple[str, ...] = ()  # a hold point: the steps it covers
    hold_issues: tuple[str, ...] = ()  # of those, the ones that did not pass (to acknowledge)


_OPEN_STEP = (State.WAITING, State.VERIFYING, State.SETTLING, State.CAPTURING, State.REVIEWING)


def allowed_now(
    state: State,
    action: str,
    pending: bool,
    *,
    settle_timed_out: bool = False,
    captures: bool = True,
) -> frozenset[str]:
    """The commands offered in this state for this next action.

    Capture while settling is offered only once the settle timeout has passed, and a retake
    only on a step that captures; an offered command can still be refused with a sentence
    when a detail is wrong (a missing reason or name, a remote guard).
    """
    out = {"note"}  # a note can be added at any time
    if state not in (State.FINISHED, State.STOPPED):
        out.add("stop")
    if action in ("confirm_operation", "request_remote", "capture", "sign"):
        out.add(action)
    if state is State.WAITING and pending:
        out.add("confirm_remote")
    if state is State.SETTLING:
        out.discard("capture")
        if settle_timed_out:
            out.add("capture")  # capture anyway once the settle timeout has passed
    if state in (State.REVIEWING, State.SETTLING) and captures:
        out.add("retake")
    if state is State.REVIEWING and action in ("accept", "accept_with_reason"):
        out.add("accept")
    if state in _OPEN_STEP:
        out.add("skip")
    return frozenset(out)


_WORDS = {
    "confirm_operation": "confirm an operation",
    "request_remote": "request a remote command",
    "confirm_remote": "send a remote command",
    "capture": "capture",
    "retake": "retake",
    "skip": "skip",
    "accept": "accept",
    "sign": "sign",
    "note": "add a note",
    "stop": "stop",
}


def why_not(view: RunnerView, command: str) -> str:
    """Why ``command`` is not offered now, in one sentence (a key that cannot act says so)."""
    step, st = view.step, view.state
    what = _WORDS.get(command, command.replace("_", " "))
    if step is None:
        return f"cannot {what}: the sequence is over"
    if command == "capture" and st is State.SETTLING:
        return (
            f"cannot capture yet: the readings are settling ({int(round(100 * view.settle_progress))} %); "
            "capture starts by itself once they are steady, or is offered after the settle timeout"
        )
    if command == "capture" and st is State.WAITING and step.kind != "capture":
        return f"cannot capture now: step {step.id} is a {step.kind} step and captures after its operation"
    if command == "confirm_operation" and step.kind != "manual":
        how = "by remote command" if step.kind == "remote" else f"as a {step.kind} step"
        return f"nothing to confirm by hand: step {step.id} is done {how}"
    if command == "request_remote" and step.kind != "remote":
        return f"step {step.id} has no remote operation (a {step.kind} step)"
    if command == "accept" and st is State.REVIEWING and view.action == "retake":
        return (
            f"cannot accept: checks failed and step {step.id} does not allow accepting failures "
            "(gate block); retake, or skip with a reason"
        )
    if command == "retake" and step.capture is None:
        return f"nothing to retake: step {step.id} captures nothing"
    if command == "sign" and step.kind != "hold":
        return f"nothing to sign: step {step.id} is not a hold point"
    return f"cannot {what} now: the step is {st.value}"


def view_of(runner: WalkState) -> RunnerView:
    """The picture of ``runner`` now."""
    step = runner.step
    expected = runner.expected()
    actual = {k: v for k, v in runner.actual().items() if k in expected} if expected else {}
    mism = tuple(runner.mismatches()) if step is not None else ()
    settle = runner.settle
    policy = step.capture if step is not None else None
    progress = (
        1.0
        if settle is not None and settle.settled
        else (settle.progress if settle is not None else 0.0)
    )
    if runner.state in (State.REVIEWING,):
        results = tuple(sort_results(runner.book.review))  # stood down when it was judged
    else:
        live = runner.live_results
        live = stand_down(runner.profile, live, doubtful_meters(live, runner.last))
        if _settling(runner):
            live = hold_while_settling(live, progress)
        results = tuple(sort_results(live))
    action, words = _next(runner)
    return RunnerView(
        index=runner.index,
        total=len(runner.profile.steps),
        step=step,
        state=runner.state,
        expected=expected,
        actual=actual,
        mismatches=mism,
        settle_progress=progress,
        settle_elapsed_s=settle.elapsed_s if settle is not None else 0.0,
        settle_timed_out=bool(settle is not None and settle.timed_out),
        captured=runner.book.captured,
        capture_target=policy.snapshots if policy is not None else 0,
        results=results,
        overall=_overall(runner, results),
        next_action=words,
        action=action,
        pending_remote=runner.remote.pending,
        remote_todo=tuple(runner.remote.todo(step)),
        message=runner.message,
        operator=runner.operator,
        polled=runner.last is not None,
        to_operate=_to_operate(runner),
        allowed=allowed_now(
            runner.state,
            action,
            runner.remote.pending is not None,
            settle_timed_out=bool(settle is not None and settle.timed_out),
            captures=step is not None and step.capture is not None,
        ),
        verdict=runner.verdict().line,
        hold_scope=runner.hold_scope(),
        hold_issues=runner.hold_issues(),
    )


def _to_operate(runner: WalkState) -> tuple[str, ...]:
    step = runner.step
    if step is None or step.kind not in ("manual", "remote"):
        return ()
    now = runner.configs[runner.index]
    before = runner.configs[runner.index - 1] if runner.index > 0 else {}
    return tuple(sid for sid, st in now.items() if before.get(sid) != st or sid in step.operate)


def _settling(runner: WalkState) -> bool:
    """The readings are still moving: nothing is judged yet, results are held."""
    if runner.state in (State.OPERATING, State.VERIFYING, State.SETTLING):
        return True
    # a switch was seen operating: the readings are still moving
    return runner.state is State.WAITING and runner.live.settling


def _overall(runner: WalkState, results: Sequence[CheckResult]) -> str:
    if _settling(runner):
        return "settling"
    if runner.last is None or runner.done:
        return "waiting"
    return "inconsistent" if overall(list(results)) is Status.FAIL else "consistent"


def _next(runner: WalkState) -> tuple[str, str]:
    step = runner.step
    st = runner.state
    if st is State.FINISHED:
        return "none", f"The sequence is complete. Verdict {runner.verdict().line}."
    if st is State.STOPPED:
        return "none", f"Stopped: {runner.message}. Resume the session when the cause is cleared."
    assert step is not None
    if st is State.WAITING:
        if step.kind == "hold":
            scope = runner.hold_scope()
            covers = f" covering {', '.join(scope)}" if scope else ""
            issues = runner.hold_issues()
            if issues:
                return "sign", (
                    f"Hold point{covers}: {len(issues)} step(s) did not pass "
                    f"({'; '.join(issues)}); the signer acknowledges them by name."
                )
            return "sign", f"Hold point{covers}: the responsible person signs off by name."
        if step.kind == "note":
            return "note", "Write the note this step asks for."
        if step.kind == "capture":
            return "capture", "Check the bench is as instructed, then start the capture."
        todo = runner.remote.todo(step)
        if todo:
            sid, want = todo[0]
            if runner.remote.pending:
                return "request_remote", f"Confirm the remote command {sid} {want}, or cancel."
            verb = "close" if want == "closed" else "open"
            return "request_remote", f"Request the remote command to {verb} {sid}."
        return "confirm_operation", "Operate the switches as instructed, then confirm."
    if st is State.OPERATING:
        return "wait", "Remote command sent: waiting for the switch to report."
    if st is State.VERIFYING:
        return "wait", "Checking switch status against the step's expectation."
    if st is State.SETTLING:
        if runner.settle is not None and runner.settle.timed_out:
            return "retake", "Not settled: wait again (retake), capture anyway, or skip."
        return "wait", "Waiting for the readings to settle."
    if st is State.CAPTURING:
        return "wait", "Capturing snapshots."
    status = overall(runner.book.review)
    if status is Status.FAIL:
        if step.gate == "allow":
            return "accept_with_reason", "Checks failed: retake, or accept with a reason."
        return "retake", "Checks failed: find the cause and retake, or skip with a reason."
    return "accept", "Checks passed: accept the step."
