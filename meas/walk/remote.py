"""Remote guards: when a remote command may be requested, and sending it once confirmed.

A remote command takes two deliberate steps (request, then confirm with a name) and is refused
unless control is enabled and connected, the switch has a command coil, the step calls for
exactly that operation, it was not done already, the status has been read, and every other
switch is as the step expects: a command is never sent into a bench in an unknown or wrong
state.
"""

from __future__ import annotations

import inspect
from collections.abc import Mapping

from ..errors import BenchwalkError
from ..model import Profile, Step, Switch
from .ports import OperateOutcome, SwitchOperator
from .status import mismatch_text, mismatches, unread


class RemoteOps:
    """The remote operations of one step: which are done, which one awaits confirmation."""

    def __init__(self) -> None:
        self.pending: tuple[str, str] | None = None  # (switch, state) awaiting confirmation
        self.done: set[str] = set()

    def todo(self, step: Step | None) -> list[tuple[str, str]]:
        """The remote operations of ``step`` not yet done, in the step's order."""
        if step is None or step.kind != "remote":
            return []
        return [(s, v) for s, v in step.operate.items() if s not in self.done]


def already_done(step: Step, ops: RemoteOps, switches: Mapping[str, str]) -> list[tuple[str, str]]:
    """The remote operations of ``step`` still to do whose switch already reads its target."""
    return [(s, v) for s, v in ops.todo(step) if switches.get(s) == v]


def check_request(
    profile: Profile,
    control: SwitchOperator | None,
    step: Step,
    ops: RemoteOps,
    switch_id: str,
    state: str,
    *,
    expected: Mapping[str, str],
    actual: Mapping[str, str] | None,
) -> Switch:
    """Raise ``BenchwalkError`` with the reason when this request is refused; else the switch.

    ``actual`` is None before the first poll (no switch status read yet).
    """
    if not profile.control.enabled:
        raise BenchwalkError(
            "control is disabled in the profile ([control] enabled = false): operate by hand"
        )
    if control is None:
        raise BenchwalkError("no switch control is connected in this session")
    try:
        sw = profile.switch(switch_id)
    except KeyError:
        raise BenchwalkError(f"there is no switch {switch_id} in the profile") from None
    if sw.operation != "remote" or sw.command_coil is None:
        raise BenchwalkError(f"{switch_id} ({sw.label}) is operated by hand, not by command")
    if step.kind != "remote" or step.operate.get(switch_id) != state:
        raise BenchwalkError(f"step {step.id} does not call for {switch_id} {state}")
    if switch_id in ops.done:
        raise BenchwalkError(f"{switch_id} was already operated in this step")
    if actual is None:
        raise BenchwalkError("no switch status read yet: wait for the first poll")
    todo = {s for s, _ in ops.todo(step)}
    others = [s for s in mismatches(profile, expected, actual) if s not in todo]
    if others:
        raise BenchwalkError(
            f"the bench is not as this step expects ({mismatch_text(expected, actual, others)}): "
            + (
                "no command is sent while switch status cannot be read; check the PLC and its link"
                if unread(actual, others)
                else "set it right before sending a command"
            )
        )
    return sw


def question(sw: Switch, state: str) -> str:
    """What the technician is asked before the command is sent."""
    verb = "Close" if state == "closed" else "Open"
    return f"{verb} {sw.id} ({sw.label}) by remote command? Confirm to send."


async def send(
    control: SwitchOperator, switch_id: str, state: str, operator: str
) -> OperateOutcome:
    """Send the command through the guarded switch control (sync or async)."""
    result = control.operate(switch_id, state, confirmed_by=operator)
    if inspect.isawaitable(result):
        return await result
    return result
