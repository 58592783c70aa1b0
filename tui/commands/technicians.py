"""Who answers the runner in a headless walk: a person typing at prompts, or the simulated technician.

Both answer what the runner's view asks for (``act``), one action per call; the drive loop in
``headless`` calls them until the sequence ends or the technician stops.
"""

from __future__ import annotations

import asyncio
import contextlib
import sys
import threading
from typing import Protocol, TextIO

from meas.errors import BenchwalkError
from meas.model import SwitchState
from meas.session import SIM_OPERATOR
from meas.walk.runner import Runner
from meas.walk.view import RunnerView


class Technician(Protocol):
    """Answers the runner's current view with one action (or none, to wait for the next view)."""

    async def act(self, runner: Runner, view: RunnerView) -> None: ...


class Hands(Protocol):
    """Sets switches by hand on the simulated bench (``Session.set_by_hand``), no Modbus write."""

    def set_by_hand(self, view: RunnerView, command: str) -> list[tuple[str, SwitchState]]: ...


async def _read_line(inp: TextIO) -> str:
    """One line of ``inp`` read on a daemon thread: a stop signal can end the walk while the
    prompt waits (a thread of the default executor would hold the process until a line came)."""
    loop = asyncio.get_running_loop()
    fut: asyncio.Future[str] = loop.create_future()

    def deliver(line: str) -> None:
        if not fut.done():
            fut.set_result(line)

    def read() -> None:
        line = inp.readline()
        with contextlib.suppress(RuntimeError):  # the loop is gone: nobody waits any more
            loop.call_soon_threadsafe(deliver, line)

    threading.Thread(target=read, name="prompt-reader", daemon=True).start()
    return await fut


class PromptTechnician:
    """A person at the bench answering typed prompts; end of input stops the session."""

    def __init__(self, operator: str, inp: TextIO = sys.stdin, out: TextIO | None = None):
        self.operator, self.inp, self.out = operator, inp, out

    async def _ask(self, prompt: str) -> str | None:
        print(prompt, end="", file=self.out, flush=True)
        line = await _read_line(self.inp)
        return None if line == "" else line.strip()

    async def act(self, runner: Runner, view: RunnerView) -> None:
        a = view.action
        if a in ("wait", "none"):
            return
        if view.message:
            print(f"  ! {view.message}", file=self.out)
        if a == "request_remote":
            sid, state = view.remote_todo[0]
            question = runner.request_remote(sid, state)
            answer = await self._ask(f"  {question} [yes/skip REASON/stop] ")
            if answer is None or answer == "stop":
                return runner.stop("stopped at the prompt")
            if answer.lower() in ("y", "yes"):
                return await runner.confirm_remote(sid, state, self.operator)
            return self._other(runner, answer)
        prompts = {
            "confirm_operation": "  Operate as instructed, then type 'done'",
            "capture": "  Check the bench is as instructed, then type 'capture'",
            "accept": "  Checks passed: type 'accept' (or 'retake')",
            "accept_with_reason": "  Checks failed: 'accept REASON', 'retake' or 'skip REASON'",
            "retake": "  'retake', 'capture' (anyway, if not settled) or 'skip REASON'",
            "sign": (
                "  Hold point: these steps did not pass: "
                + "; ".join(view.hold_issues)
                + ". Type 'acknowledge NAME' to sign over them"
                if view.hold_issues
                else "  Hold point: type 'sign NAME'"
            ),
            "note": "  Type 'note TEXT'",
        }
        answer = await self._ask(prompts[a] + " [or 'stop']: ")
        if answer is None or answer == "stop":
            return runner.stop("stopped at the prompt")
        self._other(runner, answer)

    def _other(self, runner: Runner, answer: str) -> None:
        word, _, rest = answer.partition(" ")
        word = word.lower()
        try:
            if word == "done":
                runner.confirm_operation()
            elif word == "capture":
                runner.capture()
            elif word == "accept":
                runner.accept(rest or None)
            elif word == "retake":
                runner.retake()
            elif word == "skip":
                runner.skip(rest)
            elif word == "sign":
                runner.sign(rest)
            elif word == "acknowledge":
                runner.sign(rest, acknowledge=True)
            elif word == "note":
                runner.note(rest)
            else:
                print(f"  ? {answer!r} is not an answer here", file=self.out)
        except BenchwalkError as exc:
            print(f"  ! {exc}", file=self.out)


class SimTechnician:
    """Answers every prompt the way a careful technician would, on the simulated bench.

    Failing reviews: one retake, then a gate-allow step is accepted with a recorded reason
    and a gate-block step is skipped with a reason, so the run ends and exits 1. A step whose
    switch status cannot be verified (a silent PLC) is tried ``attempts`` times, then skipped
    with the runner's last message as the reason.
    """

    def __init__(
        self,
        hands: Hands,
        operator: str = SIM_OPERATOR,
        retakes: int = 1,
        out: TextIO | None = None,
        attempts: int = 3,
    ):
        self.hands, self.operator, self.retakes, self.out = hands, operator, retakes, out
        self.attempts = attempts
        self._retaken: dict[str, int] = {}
        self._tried: dict[str, int] = {}
        self._handed: set[str] = set()  # steps whose bench was set by hand before a request

    def _give_up(self, runner: Runner, view: RunnerView) -> bool:
        """True (and the step skipped) once this step has been tried ``attempts`` times."""
        assert view.step is not None  # act() returns before this when there is no step
        n = self._tried[view.step.id] = self._tried.get(view.step.id, 0) + 1
        if n <= self.attempts:
            return False
        print(
            f"  switch status still not as expected after {self.attempts} tries: skipping",
            file=self.out,
        )
        runner.skip(
            f"{self.operator}: gave up after {self.attempts} tries: {view.message or 'switch status not verified'}"
        )
        return True

    def _set_by_hand(self, view: RunnerView, command: str) -> None:
        for sid, state in self.hands.set_by_hand(view, command):
            print(f"  (simulated technician sets {sid} {state} by hand)", file=self.out)

    async def act(self, runner: Runner, view: RunnerView) -> None:
        a, step = view.action, view.step
        if step is None or a in ("wait", "none") or not view.polled:
            return  # nothing to do, or no switch status read yet: wait for the first poll
        if a == "confirm_operation":
            if self._give_up(runner, view):
                return
            self._set_by_hand(view, "confirm_operation")
            runner.confirm_operation()
        elif a == "capture":
            if self._give_up(runner, view):
                return
            self._set_by_hand(view, "capture")
            runner.capture()
        elif a == "request_remote":
            if step.id not in self._handed and self.hands.set_by_hand(view, "request_remote"):
                self._handed.add(step.id)
                # set by hand first; the request waits for the status to show it at the next
                # poll (asking now would read the old status and be refused)
                print("  (simulated technician sets the bench as the step expects)", file=self.out)
                return
            sid, state = view.remote_todo[0]
            try:
                question = runner.request_remote(sid, state)
            except BenchwalkError as exc:  # refused (e.g. status unreadable): nothing was sent
                print(f"  remote command refused: {exc}; skipping", file=self.out)
                runner.skip(f"{self.operator}: remote command not sent: {exc}")
                return
            print(f"  {question} yes ({self.operator})", file=self.out)
            await runner.confirm_remote(sid, state, self.operator)
        elif a == "accept":
            runner.accept()
        elif a == "sign":
            if view.hold_issues:  # said aloud, and journalled by the runner
                print(
                    f"  {self.operator} signs acknowledging: {'; '.join(view.hold_issues)}",
                    file=self.out,
                )
            runner.sign(self.operator, acknowledge=bool(view.hold_issues))
        elif a == "note":
            runner.note(f"{self.operator}: nothing unusual on the simulated bench")
        elif a in ("retake", "accept_with_reason"):
            if view.settle_timed_out and view.state.value == "settling":
                runner.capture()  # journalled as captured before the readings settled
                return
            n = self._retaken.get(step.id, 0)
            if n < self.retakes:
                self._retaken[step.id] = n + 1
                print("  checks failed: retaking", file=self.out)
                runner.retake()
            elif a == "accept_with_reason":
                runner.accept(
                    f"{self.operator}: checks still failing after {n} retake(s); "
                    "accepted for the record (gate allow)"
                )
            else:
                runner.skip(f"{self.operator}: checks still failing after {n} retake(s)")
