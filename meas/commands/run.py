"""benchwalk run: walk a real bench through its sequence, confirming each step on standard input.

Also home of the headless driver shared by ``demo`` and ``resume``: a technician object
(typed prompts here, the simulated technician in ``demo``) answers what the runner's view
asks for, until the sequence ends or the technician stops (end of input). Exit codes:
0 every check passed, 1 a check failed (a step accepted or skipped with failing checks),
2 usage or profile error, 3 stopped before the end (the session can be resumed).
"""

from __future__ import annotations

import argparse
import asyncio
import sys
from collections.abc import Callable
from pathlib import Path
from typing import TextIO

from ..errors import BenchwalkError
from ..results import Status
from ..session import Session
from ..walk.runner import Runner
from ..walk.states import State
from ..walk.view import RunnerView

HELP = "walk a bench through its switching sequence headless, confirming steps on standard input"

EXIT_PASS, EXIT_FAIL, EXIT_STOPPED = 0, 1, 3

CAUTION = (
    "CAUTION: switching a live bench is for qualified persons only. Follow the site switching "
    "procedure and lockout/tagout; local codes and licensed practice prevail. benchwalk records "
    "and checks readings: it is no interlock and does not make any operation safe."
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("profile", help="bench profile (TOML)")
    p.add_argument(
        "--headless",
        action="store_true",
        help="run in this terminal with typed prompts instead of the console",
    )
    add_common(p)


def add_common(p: argparse.ArgumentParser) -> None:
    p.add_argument("--operator", default=None, help="name recorded with every decision")
    p.add_argument(
        "--out",
        type=Path,
        default=None,
        help="folder for the dataset and report (default: ./benchwalk-<session>)",
    )
    p.add_argument(
        "--sessions",
        type=Path,
        default=None,
        help="folder of session journals (default: $BENCHWALK_SESSIONS or ./sessions)",
    )
    p.add_argument(
        "--log-saved", action="store_true", help="print one line per snapshot saved in the journal"
    )


def saved_printer(
    enabled: bool, out: TextIO = sys.stdout
) -> Callable[[int, str, str], None] | None:
    if not enabled:
        return None

    def show(row: int, step: str, role: str) -> None:
        print(f"saved snapshot {row} step={step} role={role}", file=out, flush=True)

    return show


# ---------------------------------------------------------------------- technicians


class PromptTechnician:
    """A person at the bench answering typed prompts; end of input stops the session."""

    def __init__(self, operator: str, inp: TextIO = sys.stdin, out: TextIO = sys.stdout):
        self.operator, self.inp, self.out = operator, inp, out

    async def _ask(self, prompt: str) -> str | None:
        print(prompt, end="", file=self.out, flush=True)
        line = await asyncio.to_thread(self.inp.readline)
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
            "sign": "  Hold point: type 'sign NAME'",
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
            elif word == "note":
                runner.note(rest)
            else:
                print(f"  ? {answer!r} is not an answer here", file=self.out)
        except BenchwalkError as exc:
            print(f"  ! {exc}", file=self.out)


# ---------------------------------------------------------------------- the headless loop


def print_step(view: RunnerView, out: TextIO) -> None:
    step = view.step
    if step is None:
        return
    print(f"\n[{view.index + 1}/{view.total}] {step.title}  ({step.kind}, id {step.id})", file=out)
    print(f"  {step.instruction}", file=out)
    if view.expected and step.kind not in ("hold", "note"):
        print("  expect: " + ", ".join(f"{k} {v}" for k, v in view.expected.items()), file=out)


async def drive(session: Session, technician, out: TextIO = sys.stdout) -> int:
    """Run the session's sequence to its end with ``technician`` answering; the exit code."""
    runner = session.runner
    shown = -1
    last_state = None
    async for view in session.views():
        if view.step is not None and view.index != shown:
            shown = view.index
            print_step(view, out)
        if view.state != last_state and view.state is State.REVIEWING and view.capture_target:
            worst = "fail" if view.overall == "inconsistent" else "pass"
            print(f"  captured {view.captured} snapshots: checks {worst}", file=out)
        last_state = view.state
        if runner.done:
            break
        if not view.polled:
            continue  # switch states unknown until the first poll
        await technician.act(runner, view)
        if runner.done:
            break
    return summarize(session, out)


def summarize(session: Session, out: TextIO) -> int:
    """Print the outcome per step and the failing checks; the exit code."""
    runner = session.runner
    print("", file=out)
    if runner.stopped:
        print(
            f"Stopped at step {runner.step.id if runner.step else '-'}: {runner.message}", file=out
        )
        print(
            f"Session {session.session_id} is saved in {session.path}; continue with: "
            f"benchwalk resume {session.session_id} --headless",
            file=out,
        )
        return EXIT_STOPPED
    failures = [(o.step_id, r) for o in runner.outcomes.values() for r in o.failures]
    for o in runner.outcomes.values():
        extra = f" ({o.reason})" if o.reason else ""
        print(f"  {o.step_id:<22} {o.outcome:<9} {o.status.value}{extra}", file=out)
    if failures:
        print("\nFailing checks:", file=out)
        print(f"  {'step':<20} {'check':<22} {'subject':<8} {'cause':<16} message", file=out)
        for step_id, r in failures:
            print(
                f"  {step_id:<20} {r.check:<22} {r.subject:<8} {r.cause:<16} {r.message}", file=out
            )
    failed, skipped = runner.verdict() is Status.FAIL, runner.skipped_steps()
    if failed:
        word = "FAIL"
    elif skipped:
        # nothing failed, but the measurement set has holes: not a pass to put in a report
        word = f"INCOMPLETE ({len(skipped)} of {len(runner.profile.steps)} steps skipped: {', '.join(skipped)})"
    else:
        word = "PASS"
    print(f"\nSession {session.session_id}: {word}", file=out)
    return EXIT_FAIL if failed or skipped else EXIT_PASS


async def finish(session: Session, code: int, out_dir: Path | None, out: TextIO) -> int:
    """Export the dataset and report when the sequence completed; close the session."""
    try:
        if session.runner.finished:
            target = out_dir or Path(f"benchwalk-{session.session_id}")
            dataset, report = session.export(target)
            print(f"Dataset written to {dataset}, report to {report}", file=out)
    finally:
        await session.close()
    return code


async def _run(args: argparse.Namespace) -> int:
    try:
        operator = args.operator or input("Operator name: ").strip()
    except EOFError:
        operator = ""
    if not operator:
        raise BenchwalkError("an operator name is needed: give --operator NAME")
    print(CAUTION, flush=True)
    session = await Session.new(
        args.profile,
        operator,
        sessions_dir=args.sessions,
        on_saved=saved_printer(args.log_saved),
        live_checks=False,
    )
    print(f"Session {session.session_id}: journal {session.path}", flush=True)
    try:
        code = await drive(session, PromptTechnician(operator))
    except BaseException:
        await session.close()
        raise
    return await finish(session, code, args.out, sys.stdout)


def main(args: argparse.Namespace) -> int:
    if not args.headless:
        from .demo import start_console

        return start_console(
            profile=str(args.profile),
            demo=False,
            operator=args.operator,
            sessions_dir=args.sessions,
            out=args.out,
        )
    return asyncio.run(_run(args))
