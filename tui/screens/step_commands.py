"""The technician's step commands on the bench screen: key gating, prompts, remote operation, export.

A step key is enabled exactly when the runner's view allows its command; a command that needs
words (a reason, a note, a name) asks for them first; a remote operation is confirmed in its
own dialog and sent by a worker that reports the outcome.
"""

from __future__ import annotations

from collections.abc import Callable

from textual import events, work

from meas.errors import BenchwalkError
from meas.walk.view import why_not

from ..frame import Frame
from ..keys import ACTION_OF_PRESSED, COMMAND_OF, display_key
from .painting import PaintedScreen
from .prompt import Alert, TextPrompt
from .remote import RemoteConfirm
from .summary import WalkSummary

# what the technician is told once a step command is taken (journalled by the runner)
_DONE_WORDS = {
    "confirm_operation": "operation confirmed: verifying the switch status",
    "capture": "capture started: settling, then capturing",
    "retake": "retake started: settling again",
    "accept": "step accepted",
    "skip": "step skipped, reason journalled",
    "note": "note journalled",
    "sign": "hold point signed off",
}


class StepCommandScreen(PaintedScreen):
    """The painted screen with the step commands, and the frame's consequences they own."""

    def show_frame(self, frame: Frame) -> None:
        """Paint, then export a finished sequence once and alert a stopped one once."""
        super().show_frame(frame)
        step = frame.step
        if step is not None and step.state == "finished" and not self._auto_exported:
            self._auto_exported = True  # the sequence is complete: write the dataset at once
            self._export()
            runner = getattr(self.bridge, "runner", None)
            if runner is not None and hasattr(runner, "records"):
                self.app.push_screen(
                    WalkSummary(
                        runner.records(),
                        runner.verdict().line,
                        bool(getattr(self.bridge, "simulated", False)),
                    )
                )
        if (
            step is not None
            and step.state == "stopped"
            and not self._alerted_stop
            and not self._remote_busy
        ):
            self._alerted_stop = True
            msg = (
                getattr(self.bridge.runner, "message", "") if hasattr(self.bridge, "runner") else ""
            )
            self.app.push_screen(
                Alert(
                    "SEQUENCE STOPPED",
                    (msg or step.instruction)
                    + "\nThe session is saved; clear the cause, then resume it.",
                )
            )

    # ------------------------------------------------------------------ key gating
    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """A step key is enabled (and shown in the footer) exactly when the runner's view
        allows its command now."""
        command = COMMAND_OF.get(action)
        if command is None:
            return True
        step = self.frame.step if self.frame else None
        return step is not None and command in step.allowed

    def on_key(self, event: events.Key) -> None:
        """A step key that cannot act now says why instead of doing nothing silently."""
        command = COMMAND_OF.get(ACTION_OF_PRESSED.get(event.key, ""))
        frame = self.frame
        if command is None or frame is None or frame.step is None:
            return
        if command in frame.step.allowed:
            return
        runner = getattr(self.bridge, "runner", None)
        if runner is None:
            return
        event.stop()
        self.notice(f"\u2718 {display_key(event.key)}: {why_not(runner.view(), command)}")

    # ------------------------------------------------------------------ step actions
    def _run(self, name: str, *args: object) -> None:
        refusal = self.bridge.command(name, *args)
        self._repaint_now()  # first: a new step clears the old notice, not this one
        self.notice(
            f"\u2718 {refusal}"
            if refusal
            else f"\u2714 {_DONE_WORDS.get(name, name.replace('_', ' '))}"
        )

    def _repaint_now(self) -> None:
        """Show the command's effect at once instead of at the next poll."""
        try:
            frame = self.bridge.frame()
        except Exception:  # noqa: BLE001 - a paint must never take the screen down
            return
        if frame.events:
            self.log_lines(frame.events)
        self.show_frame(frame)
        self.refresh_bindings()

    def action_operated(self) -> None:
        self._run("confirm_operation")

    def action_capture(self) -> None:
        self._run("capture")

    def action_retake(self) -> None:
        self._run("retake")

    def _run_with(self, name: str) -> Callable[[str | None], None]:
        """A prompt's callback: the command with the answer, nothing when it was cancelled."""

        def run(answer: str | None) -> None:
            if answer:
                self._run(name, answer)

        return run

    def action_accept(self) -> None:
        frame = self.frame
        if (
            frame is not None
            and frame.step is not None
            and any(r.status.value == "fail" for r in frame.checks)
        ):
            self.app.push_screen(
                TextPrompt(
                    "Accept with failing checks", "Checks failed. Why is this step acceptable?"
                ),
                self._run_with("accept"),
            )
            return
        self._run("accept")

    def action_skip(self) -> None:
        self.app.push_screen(
            TextPrompt("Skip step", "Why is this step skipped? (journalled)"),
            self._run_with("skip"),
        )

    def action_note(self) -> None:
        self.app.push_screen(TextPrompt("Note", "Note for the journal:"), self._run_with("note"))

    def action_sign(self) -> None:
        """The signer types their own name (the field starts empty); a hold point over steps
        that did not pass lists them, and signing acknowledges them (journalled)."""
        view = self.bridge.runner.view()
        scope = tuple(getattr(view, "hold_scope", ()))
        issues = tuple(getattr(view, "hold_issues", ()))
        question = f"This hold point covers: {', '.join(scope) or 'no earlier step'}.\n"
        if issues:
            question += (
                "These steps did NOT pass:\n"
                + "\n".join(f"  \u2718 {i}" for i in issues)
                + "\nSigning acknowledges them. Name of the person signing off:"
            )
        else:
            question += "Name of the person signing off:"

        def sign(answer: str | None) -> None:
            if answer:
                self._run("sign", answer, *((True,) if issues else ()))

        self.app.push_screen(TextPrompt("Sign hold point", question), sign)

    def action_remote(self) -> None:
        frame = self.frame
        step = frame.step if frame else None
        view = self.bridge.runner.view()
        todo = list(getattr(view, "remote_todo", ()))
        if frame is None or step is None or not todo:
            self.notice("\u2718 no remote operation in this step")
            return
        switch_id, state = todo[0]
        try:
            question = self.bridge.request_remote(switch_id, state)
        except BenchwalkError as exc:
            self.notice(f"\u2718 {exc}")
            return
        sw = self.profile.switch(switch_id)
        present = step.actual.get(switch_id) or (
            frame.snapshot.switches.get(switch_id, "unknown") if frame.snapshot else "unknown"
        )

        def sent(ok: bool | None) -> None:
            if ok:
                self.notice(f"\u2026 sending {switch_id} -> {state}; verifying its status")
                self._remote_busy = True
                self._send_remote(switch_id, state)
            else:
                self.bridge.cancel_remote()
                self.notice(f"remote operation of {switch_id} cancelled: nothing sent")
                self.bridge.log(f"remote {switch_id} -> {state} cancelled")
                self._repaint_now()

        simulated = bool(getattr(self.bridge, "simulated", False))
        self.app.push_screen(
            RemoteConfirm(switch_id, sw.label, present, state, question, simulated=simulated),
            sent,
        )
        self._repaint_now()  # the NEXT line follows the dialog

    @work(group="command", exit_on_error=False)
    async def _send_remote(self, switch_id: str, state: str) -> None:
        try:
            failure = await self.bridge.confirm_remote(switch_id, state)
        finally:
            self._remote_busy = False
        if failure:
            self._alerted_stop = True  # this alert says it; no second one for the stop
        self._repaint_now()
        if failure:
            self.notice(f"\u2718 REMOTE FAILED: {failure}")
            self.app.push_screen(Alert(f"REMOTE OPERATION OF {switch_id} FAILED", failure))
        else:
            self.notice(f"\u2714 {switch_id} {state}: command sent and its status followed")

    # ------------------------------------------------------------------ export
    def action_export(self) -> None:
        self._export()

    @work(group="command", exit_on_error=False)
    async def _export(self) -> None:
        self.notice("\u2026 exporting")
        try:
            path = await self.bridge.export()
        except BenchwalkError as exc:
            self.notice(f"\u2718 export failed: {exc}")
            return
        self.bridge.log(f"exported {path}")
        self.notice(f"\u2714 dataset exported to {path}")
        self.exported = path
