"""The simulated technician's hands: which switches are set by hand before a command.

On the simulated bench nobody stands at the panel, so before confirming a manual operation or
starting a capture the switches the step expects are set by hand, as a person at the bench
would; before a remote request, all but the switches the step commands remotely. The command
line's simulated technician and the console both call this, so they act alike.
"""

from __future__ import annotations

from typing import Protocol

from ..model import SwitchState
from ..walk.states import State
from ..walk.view import RunnerView


class Hands(Protocol):
    """What the simulated bench offers a hand at its panel (not a Modbus write)."""

    def operate_by_hand(self, switch_id: str, state: SwitchState) -> None: ...


def to_set_by_hand(view: RunnerView, command: str) -> list[tuple[str, SwitchState]]:
    """The switches (and states) set by hand before ``command`` on the simulated bench.

    ``confirm_operation`` and ``capture`` while waiting: every mismatched switch.
    ``request_remote``: every mismatched switch but those the step commands remotely.
    Anything else: none.
    """
    if command == "request_remote":
        keep = {s for s, _ in view.remote_todo}
    elif command in ("confirm_operation", "capture") and view.state == State.WAITING:
        keep = set()
    else:
        return []
    return [(sid, view.expected[sid]) for sid in view.mismatches if sid not in keep]


def set_by_hand(view: RunnerView, bench: Hands, command: str) -> list[tuple[str, SwitchState]]:
    """Set the switches ``command`` needs on the simulated bench; returns what was set."""
    done = to_set_by_hand(view, command)
    for sid, state in done:
        bench.operate_by_hand(sid, state)
    return done
