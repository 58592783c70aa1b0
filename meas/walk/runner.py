"""The technician's commands on the step state machine: what console and headless mode call.

Each command checks that it is allowed now (``RunnerView.allowed`` offers the same set) and
raises ``BenchwalkError`` with a sentence to show when it is not; every decision is journalled
with operator and time. The public API is the docstring of ``meas.walk``.
"""

from __future__ import annotations

from ..errors import BenchwalkError
from ..model import Step
from ..results import Status, overall
from ..verdict import OutcomeKind
from . import remote
from .machine import StepMachine
from .states import State, StepOutcome

# The check family whose n/a rows with cause "unverified" name readings nothing could verify
# (meas.checks.network.model_fit; the walk does not import the checks).
UNVERIFIED_CHECK = "network.model_fit"


class Runner(StepMachine):
    """One session's walk through ``profile.steps``; see the ``meas.walk`` docstring."""

    def confirm_operation(self) -> None:
        """The technician says the manual operation of this step is done."""
        step = self._require(State.WAITING, what="confirm an operation")
        if step.kind != "manual":
            raise BenchwalkError(
                f"step {step.id} is a {step.kind} step: nothing to confirm by hand"
            )
        self._journal(
            "operation_confirmed", f"{step.id}: operation confirmed", operate=dict(step.operate)
        )
        self._begin_verify()

    def request_remote(self, switch_id: str, state: str) -> str:
        """First of two deliberate steps; returns the question to put to the technician."""
        step = self._require(State.WAITING, what="request a remote operation")
        sw = remote.check_request(
            self.profile,
            self.control,
            step,
            self.remote,
            switch_id,
            state,
            expected=self.expected(),
            actual=self.actual() if self.last is not None else None,
        )
        self.remote.pending = (switch_id, state)
        self._journal(
            "remote_requested", f"{switch_id} -> {state} requested", switch=switch_id, state=state
        )
        return remote.question(sw, state)

    def cancel_remote(self) -> None:
        """Withdraw a requested remote command (its dialog closed): nothing was sent."""
        if self.remote.pending is None:
            return
        sid, state = self.remote.pending
        self.remote.pending = None
        self._journal("remote_cancelled", f"{sid} -> {state} cancelled: nothing sent")

    async def confirm_remote(self, switch_id: str, state: str, operator: str) -> None:
        """Second deliberate step: send the command, then verify status on the next snapshots."""
        step = self._require(State.WAITING, what="send a remote command")
        if self.remote.pending != (switch_id, state):
            raise BenchwalkError(f"request {switch_id} {state} first, then confirm it")
        if not operator.strip():
            raise BenchwalkError("a remote command needs the name of the person confirming it")
        assert self.control is not None  # a request is refused without control
        self.remote.pending = None
        self.state = State.OPERATING
        self.journal.record_event(
            "remote_confirmed",
            f"{switch_id} -> {state} confirmed",
            step_id=step.id,
            operator=operator,
            data={"switch": switch_id, "state": state},
        )
        try:
            result = await remote.send(self.control, switch_id, state, operator)
        except BenchwalkError as exc:
            self.state = State.WAITING
            self.message = str(exc)
            raise
        ok, msg = bool(result.ok), result.message or ""
        self.journal.record_event(
            "remote_result",
            f"{switch_id} -> {state}: {'ok' if ok else 'failed'} {msg}".strip(),
            step_id=step.id,
            operator=operator,
            data={"ok": ok, "final_status": str(result.final_status)},
        )
        if not ok:
            self._stop(f"remote command {switch_id} {state} failed: {msg or 'no detail'}")
            return
        self.remote.done.add(switch_id)
        if self.remote.todo(step):
            self.state = State.WAITING
        else:
            self._begin_verify()

    def capture(self) -> None:
        """Start a capture step, or capture after the settle timeout (recorded as such)."""
        step = self._require(State.WAITING, State.SETTLING, what="capture")
        if self.state is State.WAITING:
            if step.kind != "capture":
                raise BenchwalkError(f"step {step.id} starts with its {step.kind} operation")
            self._journal("capture_started", f"{step.id}: capture started")
            self._begin_verify()
            return
        assert self.settle is not None
        if not self.settle.timed_out:
            raise BenchwalkError(
                "still settling: wait, or capture once the settle timeout has passed"
            )
        self._journal(
            "captured_unsettled",
            f"{step.id}: captured before the readings settled",
            elapsed_s=self.settle.elapsed_s,
        )
        self.journal.record_step(
            step.id,
            "capturing",
            operator=self.operator,
            settle_s=self.settle.elapsed_s,
            reason="captured after settle timeout",
        )
        self.book.steady_t0 = self._now()
        self.state = State.CAPTURING

    def retake(self) -> None:
        """Discard the review (it stays in the journal) and settle and capture again."""
        step = self._require(State.REVIEWING, State.SETTLING, what="retake")
        if step.capture is None:
            raise BenchwalkError(f"step {step.id} captures nothing to retake")
        self.journal.record_step(
            step.id, "retaken", operator=self.operator, outcome=overall(self.book.review).value
        )
        self._start_settle()

    def skip(self, reason: str) -> None:
        """Leave the step without accepting it; the reason is journalled."""
        step = self._require(
            State.WAITING,
            State.VERIFYING,
            State.SETTLING,
            State.CAPTURING,
            State.REVIEWING,
            what="skip",
        )
        if not reason or not reason.strip():
            raise BenchwalkError("give a reason to skip this step")
        status = overall(self.book.review)
        self.journal.record_step(
            step.id, "skipped", outcome="skipped", operator=self.operator, reason=reason.strip()
        )
        self._conclude(step, "skipped", status, reason.strip())

    def accept(self, reason: str | None = None) -> None:
        """Accept the reviewed captures; failing checks need gate allow and a reason."""
        step = self._require(State.REVIEWING, what="accept")
        status = overall(self.book.review)
        if status is Status.FAIL:
            if step.gate == "block":
                raise BenchwalkError(
                    f"checks failed and step {step.id} does not allow accepting failures: "
                    "retake, or skip with a reason"
                )
            if not reason or not reason.strip():
                raise BenchwalkError("checks failed: give a reason to accept this step anyway")
        kind: OutcomeKind = "accepted_with_failures" if status is Status.FAIL else "passed"
        self.journal.record_step(
            step.id,
            "accepted",
            outcome=kind,
            operator=self.operator,
            reason=(reason or "").strip() or None,
            actual_switches=self.actual(),
            expected_switches=self.expected(),
        )
        self._conclude(step, kind, status, (reason or "").strip())

    def _conclude(self, step: Step, outcome: OutcomeKind, status: Status, reason: str) -> None:
        failures = tuple(r for r in self.book.review if r.status is Status.FAIL)
        unverified = tuple(
            f"{step.id} {r.subject}: {r.message.removeprefix('unverified: ')}"
            for r in self.book.review
            if r.check == UNVERIFIED_CHECK and r.cause == "unverified"
        )
        self.outcomes[step.id] = StepOutcome(step.id, outcome, status, failures, reason, unverified)
        if unverified:  # journalled, so the dataset and a resumed session give the same verdict
            self.journal.record_event(
                "readings_unverified",
                f"{len(unverified)} meter(s) not verifiable against the network model",
                step_id=step.id,
                data={"lines": list(unverified)},
            )
        self.state = State.SKIPPED if outcome == "skipped" else State.ACCEPTED
        self._advance()

    def sign(self, name: str, acknowledge: bool = False) -> None:
        """Named sign-off of a hold point.

        A hold point covers the steps since the previous one (``hold_scope``); when any of
        them was skipped, accepted with failures or not captured (``hold_issues``) the signer
        must acknowledge them (``acknowledge=True``), and the acknowledgement is journalled.
        """
        step = self._require(State.WAITING, what="sign")
        if step.kind != "hold":
            raise BenchwalkError(f"step {step.id} is not a hold point")
        if not name or not name.strip():
            raise BenchwalkError("a hold point needs the name of the person signing it off")
        who = name.strip()
        issues = self.hold_issues()
        reason = f"signed off by {who}"
        if issues:
            if not acknowledge:
                raise BenchwalkError(
                    f"hold point {step.id} covers steps that did not pass ({'; '.join(issues)}): "
                    "acknowledge them to sign"
                )
            self.journal.record_event(
                "hold_acknowledged",
                f"{who} signs {step.id} acknowledging: {'; '.join(issues)}",
                step_id=step.id,
                operator=who,
                data={"scope": list(self.hold_scope()), "issues": list(issues)},
            )
            reason += f", acknowledging {len(issues)} step(s) that did not pass"
        self.journal.record_step(step.id, "accepted", outcome="passed", operator=who, reason=reason)
        self._conclude(step, "passed", Status.PASS, reason)

    def note(self, text: str) -> None:
        """Completes a note step; at any other time adds a note to the journal."""
        if not text or not text.strip():
            raise BenchwalkError("the note is empty")
        step = self.step
        self._journal("note", text.strip())
        if step is not None and step.kind == "note" and self.state is State.WAITING:
            self.journal.record_step(
                step.id, "accepted", outcome="passed", operator=self.operator, reason=text.strip()
            )
            self._conclude(step, "passed", Status.PASS, text.strip())

    def stop(self, reason: str) -> None:
        """End the session at this step; ``Session.resume`` continues here."""
        if self.done:
            return
        self._stop(reason or "stopped by the technician")
