"""benchwalk demo: the demo bench on the simulated bench (real Modbus on loopback).

With ``--headless`` a simulated technician walks the whole demo sequence: it operates
manual switches with ``operate_by_hand``, confirms remote commands as "simulated
technician", signs hold points and writes notes; the dataset and report go to ``--out``.
Without it the console starts.
"""

from __future__ import annotations

import argparse
import asyncio
import sys
from pathlib import Path
from typing import TextIO

from ..errors import BenchwalkError
from ..session import SIM_OPERATOR, Session
from ..sim.hands import set_by_hand
from ..walk.runner import Runner
from ..walk.view import RunnerView
from .run import CAUTION, add_common, drive, finish, saved_printer

HELP = "run the demo feeder bench on the simulated bench (console, or --headless end to end)"

DEMO_PROFILE = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"


class SimTechnician:
    """Answers every prompt the way a careful technician would, on the simulated bench.

    Failing reviews: one retake, then a gate-allow step is accepted with a recorded reason
    and a gate-block step is skipped with a reason, so the run ends and exits 1. A step whose
    switch status cannot be verified (a silent PLC) is tried ``attempts`` times, then skipped
    with the runner's last message as the reason.
    """

    def __init__(
        self,
        bench,
        operator: str = SIM_OPERATOR,
        retakes: int = 1,
        out: TextIO = sys.stdout,
        attempts: int = 3,
    ):
        self.bench, self.operator, self.retakes, self.out = bench, operator, retakes, out
        self.attempts = attempts
        self._retaken: dict[str, int] = {}
        self._tried: dict[str, int] = {}

    def _give_up(self, runner: Runner, view: RunnerView) -> bool:
        """True (and the step skipped) once this step has been tried ``attempts`` times."""
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
        for sid, state in set_by_hand(view, self.bench, command):
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
            self._set_by_hand(view, "request_remote")
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
            runner.sign(self.operator)
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


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--fault",
        action="append",
        default=[],
        metavar="KIND:METER[:ARG]",
        help="inject a fault into the simulated bench (repeatable), e.g. ct-reversed:M2:B",
    )
    p.add_argument(
        "--headless",
        action="store_true",
        help="run the whole demo sequence in this terminal and write the dataset",
    )
    p.add_argument("--seed", type=int, default=None, help="random seed of the simulated noise")
    p.add_argument("--profile", type=Path, default=DEMO_PROFILE, help=argparse.SUPPRESS)
    add_common(p)


async def _headless(args: argparse.Namespace) -> int:
    operator = args.operator or SIM_OPERATOR
    print(CAUTION, flush=True)
    session = await Session.new(
        args.profile,
        operator,
        sessions_dir=args.sessions,
        simulate=True,
        faults=args.fault,
        seed=args.seed,
        on_saved=saved_printer(args.log_saved),
        live_checks=False,
    )
    print(f"Session {session.session_id}: journal {session.path} (simulated bench)", flush=True)
    try:
        code = await drive(session, SimTechnician(session.bench, SIM_OPERATOR))
    except BaseException:
        await session.close()
        raise
    return await finish(session, code, args.out, sys.stdout)


def start_console(**kwargs) -> int:
    """Start the console (``tui.app``), imported only here so the core stays headless."""
    try:
        from tui.app import run_console
    except ImportError as exc:
        raise BenchwalkError(
            f"the console is not available in this build ({exc}); use --headless"
        ) from None
    return int(run_console(**kwargs) or 0)


def main(args: argparse.Namespace) -> int:
    if not args.headless:
        return start_console(
            profile=str(args.profile),
            demo=True,
            faults=tuple(args.fault),
            seed=args.seed,
            operator=args.operator,
            sessions_dir=args.sessions,
            out=args.out,
        )
    return asyncio.run(_headless(args))
