"""The step state machine: a step's state and its transitions on each polled snapshot.

It knows steps, switch states, settle and checks; it knows nothing of Modbus or of screens.
Whoever owns the poll loop feeds it every snapshot (``tick``). The state, the questions asked
of it and the bookkeeping of a step are ``meas.walk.walk_state.WalkState``'s, which this class
extends; the technician's commands are ``meas.walk.runner.Runner``'s, built on this class.
What it is given is typed in ``meas.walk.ports``; the public API is the docstring of
``meas.walk``.
"""

from __future__ import annotations

from ..results import CheckResult, overall
from ..snapshot import Snapshot
from . import remote
from .standdown import review_quality
from .states import State
from .status import unread
from .walk_state import WalkState


class StepMachine(WalkState):
    """The walk's transitions: a step's state moved on each polled snapshot."""

    async def tick(self, snapshot: Snapshot) -> None:
        """Advance on one polled snapshot; records it in the journal with its role."""
        self.last = snapshot
        self.book.history.append(snapshot)
        if self.done:
            return
        self.live.follow(snapshot, self.step)
        self.book.new_tick()
        if self.live_checks:
            self.live_results = self._results_for(snapshot)
        st = self.state
        if st is State.WAITING and self._resumed_step == self.index:
            self._resume_remote(snapshot)
            st = self.state
        if st in (State.OPERATING, State.VERIFYING, State.SETTLING):
            self._record(snapshot, "settling")
        if st is State.VERIFYING:
            self._tick_verify(snapshot)
        elif st is State.SETTLING:
            self._tick_settle(snapshot)
        elif st is State.CAPTURING:
            self._tick_capture(snapshot)
        elif st in (State.WAITING, State.REVIEWING) and (
            snapshot.t_mono - self._last_live_t >= self.live_every_s
        ):
            self._last_live_t = snapshot.t_mono
            self._record(snapshot, "live")

    def _begin_verify(self) -> None:
        self._step_t0 = self._now()  # the step's own snapshots start here (see the review)
        self.message = ""
        self._verify_deadline = None
        self.state = State.VERIFYING

    def _resume_remote(self, snapshot: Snapshot) -> None:
        """On the step a session resumed at, a remote switch already reading its target (the
        command went out before the stop) is not commanded again: the step verifies."""
        step = self.step
        if step is None or self.remote.pending is not None:
            return
        for sid, want in remote.already_done(step, self.remote, snapshot.switches):
            self.remote.done.add(sid)
            msg = f"{sid} already reads {want} after the resume: no command sent"
            self._journal("remote_already_done", msg, switch=sid, state=want)
            if not self.remote.todo(step):
                self._resumed_step = None
                self._begin_verify()

    def _results_for(self, snapshot: Snapshot) -> list[CheckResult]:
        capturing = self.state is State.CAPTURING
        return self.book.results(snapshot, self._checks, capturing=capturing, live=self.live)

    def _status_hold(self, snapshot: Snapshot) -> str | None:
        """Settling and capturing: ``"changed"``, ``"unread"`` (hold this snapshot) or None.

        A status read as the wrong state is a change of configuration. A status that could not
        be read (the PLC missed a poll) proves nothing either way: the snapshot is kept but not
        captured, and only a loss lasting past ``control.verify_timeout_s`` sends the step back.
        """
        bad = self.mismatches()
        if not bad:
            if self._unread_since is not None:
                self._unread_since = None
                self.message = ""
            return None
        if not unread(self.actual(), bad):
            self._unread_since = None
            self._config_changed()
            return "changed"
        if self._unread_since is None:
            self._unread_since = snapshot.t_mono
            self.message = f"status of {', '.join(bad)} not read: captures held until it is"
            self._journal("status_unread", self.message)
        elif snapshot.t_mono - self._unread_since > self.profile.control.verify_timeout_s:
            lost_s = snapshot.t_mono - self._unread_since
            self._unread_since = None
            text = ", ".join(bad)
            self._journal("status_lost", f"status of {text} unread for {lost_s:.1f} s")
            self.message = (
                f"status of {text} not read for {lost_s:.1f} s: check the PLC and its link, "
                "then confirm again"
            )
            self.book.restart()
            self.state = State.WAITING
        return "unread"

    def _tick_verify(self, snapshot: Snapshot) -> None:
        step = self.step
        assert step is not None
        if self._verify_deadline is None:
            self._verify_deadline = snapshot.t_mono + self.profile.control.verify_timeout_s
        bad = self.mismatches()
        if not bad:
            self.journal.record_step(
                step.id,
                "verified",
                operator=self.operator,
                actual_switches=self.actual(),
                expected_switches=self.expected(),
            )
            self.message = ""
            self._start_settle()
            return
        if snapshot.t_mono < self._verify_deadline:
            return
        text = self._mismatch_text(bad)
        if step.kind == "remote":
            self._stop(f"switch status does not match after the remote command: {text}")
        else:
            self._journal("mismatch", text, actual=self.actual(), expected=self.expected())
            todo = (
                "check the PLC and its link"
                if unread(self.actual(), bad)
                else "set the switches as instructed"
            )
            self.message = f"{text}; {todo}, then confirm again"
            self._verify_deadline = None
            self.state = State.WAITING

    def _start_settle(self) -> None:
        step = self.step
        assert step is not None
        if step.capture is None:
            self.book.review = []
            self.state = State.REVIEWING
            # no capture, no checks: nothing to call a pass
            self.journal.record_step(step.id, "reviewing", operator=self.operator)
            return
        self.settle = self._settle_factory(step.capture)
        self._settle_t0 = None
        self._unread_since = None
        self.book.restart()
        self.state = State.SETTLING
        self.journal.record_step(step.id, "settling", operator=self.operator)

    def _tick_settle(self, snapshot: Snapshot) -> None:
        step = self.step
        assert step is not None and self.settle is not None
        hold = self._status_hold(snapshot)
        if hold == "changed" or self.state is not State.SETTLING:
            return
        settle = self.settle
        was_timed_out = settle.timed_out
        if self._settle_t0 is None:
            self._settle_t0 = snapshot.t_mono
        settle.update(snapshot)
        if settle.settled:
            self.book.steady_t0 = self._settle_t0 + settle.settle_s
            self.journal.record_step(
                step.id, "capturing", operator=self.operator, settle_s=settle.settle_s
            )
            self.state = State.CAPTURING
            self.book.new_tick()  # judge this snapshot again, on the steady history
            self._tick_capture(snapshot)
        elif settle.timed_out and not was_timed_out:
            worst = settle.worst
            self.message = (
                f"not settled after {settle.elapsed_s:.1f} s"
                + (f" (least steady: {worst})" if worst else "")
                + ": wait again (retake), capture anyway, or skip with a reason"
            )
            self._journal("settle_timeout", self.message, elapsed_s=settle.elapsed_s, worst=worst)

    def _tick_capture(self, snapshot: Snapshot) -> None:
        step = self.step
        assert step is not None and step.capture is not None
        hold = self._status_hold(snapshot)
        if hold == "changed" or self.state is not State.CAPTURING:
            return
        policy = step.capture
        if hold == "unread" or not self.book.due(snapshot, policy, self.profile.poll.interval_s):
            self._record(snapshot, "live")
            return
        row = self._record(snapshot, "capture")
        results = self.live_results = self._results_for(snapshot)
        self.journal.record_checks(row, step.id, results)
        # the exact history these checks saw, so an offline re-check can replay it
        used = self.book.history_rows()
        self.journal.record_event(
            "check_history",
            f"checks of snapshot {row} used {len(used)} earlier snapshots",
            step_id=step.id,
            data={"snapshot": row, "history": used},
        )
        self.book.take(row, results, snapshot.t_mono)
        if self.book.complete(policy):
            self._review_quality(snapshot)
            status = overall(self.book.review)
            self.state = State.REVIEWING
            self.journal.record_step(
                step.id,
                "reviewing",
                operator=self.operator,
                outcome=status.value,
                actual_switches=self.actual(),
                expected_switches=self.expected(),
            )

    def _review_quality(self, snapshot: Snapshot) -> None:
        """The quality finding carried into the review, checks on a doubtful meter stood
        down (``meas.walk.standdown.review_quality``), and the doubt journalled."""
        mine = [h for h in self.book.history if h.t_mono >= self._step_t0][:-1]
        review, doubtful = review_quality(
            self.profile, self._checks, snapshot, mine, self.book.review
        )
        if doubtful:
            self._journal(
                "readings_in_doubt",
                "; ".join(sorted(doubtful.values()))
                + ": the checks that read them stand down in the review",
                meters=doubtful,
            )
        self.book.review = review

    def _config_changed(self) -> None:
        step = self.step
        assert step is not None
        text = self._mismatch_text(self.mismatches())
        self._journal("config_changed", text)
        self.message = (
            f"switch state changed during the step ({text}); restore it and confirm again"
        )
        self.book.restart()
        self.state = State.WAITING

    def _stop(self, reason: str) -> None:
        step = self.step
        self.message = reason
        if step is not None:
            self.journal.record_step(
                step.id,
                "stopped",
                operator=self.operator,
                reason=reason,
                actual_switches=self.actual(),
                expected_switches=self.expected(),
            )
        self._journal("stopped", reason)
        self.state = State.STOPPED
