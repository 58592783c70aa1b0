"""The simulated PLC: switch mechanisms, status points, and the transient after each operation.

Time is an explicit argument (seconds on any monotonic clock), so every behaviour here is a
pure function of the commands given and the time asked about, and tests need no sleeping.

Transient: after a switching operation the readings do not jump; they move from the old
steady state to the new one with the profile's ``[sim] settle_s`` time constant tau, either
first order (``remaining = exp(-t/tau)``: 36.8 % of the step left at t = tau, a property of
the first-order response, common practice) or damped second order with zeta = 0.7 and
zeta * omega_n = 1/tau (same decay envelope, about 4.6 % overshoot), so that a settle
detector has something real to detect.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

from ..errors import BenchwalkError
from ..model import SWITCH_STATES, Profile, SwitchState
from .meters import Phasors, blend

DAMPING = 0.7


def settle_settings(profile: Profile) -> tuple[float, str]:
    """(tau in s, "first_order" | "damped") from ``[sim]``, checked with a clear message."""
    tau = float(profile.sim.get("settle_s", 1.0))
    kind = str(profile.sim.get("transient", "first_order"))
    if not math.isfinite(tau) or tau < 0:
        raise BenchwalkError(f"{profile.path}: sim.settle_s must be a number >= 0, got {tau}")
    if kind not in ("first_order", "damped"):
        raise BenchwalkError(
            f"{profile.path}: sim.transient must be 'first_order' or 'damped', got {kind!r}"
        )
    return tau, kind


def remaining(kind: str, tau: float, dt: float) -> float:
    """Fraction of a unit step still to go at ``dt`` s after it (1 at dt = 0, -> 0)."""
    if dt <= 0:
        return 1.0
    if tau <= 0:
        return 0.0
    if kind == "first_order":
        return math.exp(-dt / tau)
    wn = 1.0 / (DAMPING * tau)
    wd = wn * math.sqrt(1.0 - DAMPING**2)
    k = DAMPING / math.sqrt(1.0 - DAMPING**2)
    return math.exp(-dt / tau) * (math.cos(wd * dt) + k * math.sin(wd * dt))


@dataclass
class Mechanism:
    """One switch: where its contacts are and where they are going."""

    switch: str
    state: SwitchState
    target: SwitchState
    due_t: float = -math.inf
    operate_time_s: float = 0.2


class PlcSim:
    """Switch states, command coils and status points of every switch in the profile."""

    def __init__(
        self, profile: Profile, states: Mapping[str, SwitchState] | None = None, t: float = 0.0
    ):
        self.profile = profile
        self.t = t
        given = dict(states or {})
        self._mech = {
            s.id: Mechanism(
                s.id,
                given.get(s.id, s.normal),
                given.get(s.id, s.normal),
                operate_time_s=s.operate_time_s,
            )
            for s in profile.switches
        }
        self._coil_to_switch = {
            s.command_coil: s.id
            for s in profile.switches
            if s.operation == "remote" and s.command_coil is not None
        }
        self.commands: list[
            tuple[float, str, SwitchState, str]
        ] = []  # (t, switch, state, "coil"|"hand")
        self.changed_at = -math.inf  # when contacts last moved (the due time, not when asked)

    def _start(self, switch_id: str, state: SwitchState, t: float, how: str) -> None:
        m = self._mech[switch_id]
        self.commands.append((t, switch_id, state, how))
        if state == m.target:
            return
        m.target = state
        m.due_t = t + m.operate_time_s

    def command_coil(self, address: int, value: bool, t: float) -> bool:
        """A Modbus write to a coil; False if no remote switch has this command coil."""
        switch_id = self._coil_to_switch.get(address)
        if switch_id is None:
            return False
        self._start(switch_id, "closed" if value else "open", t, "coil")
        return True

    def is_command_coil(self, address: int) -> bool:
        return address in self._coil_to_switch

    def operate_by_hand(self, switch_id: str, state: SwitchState, t: float) -> None:
        """The simulated technician operating a switch at its panel (not a Modbus write)."""
        if switch_id not in self._mech:
            raise BenchwalkError(f"switch {switch_id!r} is not in {self.profile.path}")
        if state not in SWITCH_STATES:
            raise BenchwalkError(
                f"switch {switch_id}: state must be 'open' or 'closed', got {state!r}"
            )
        self._start(switch_id, state, t, "hand")

    def advance(self, t: float) -> list[str]:
        """Move mechanisms to time ``t``; the ids of switches whose contacts changed."""
        self.t = max(self.t, t)
        changed = []
        for m in self._mech.values():
            if m.state != m.target and self.t >= m.due_t:
                m.state = m.target
                changed.append(m.switch)
                self.changed_at = max(self.changed_at, m.due_t)
        return changed

    def states(self) -> dict[str, SwitchState]:
        return {sid: m.state for sid, m in self._mech.items()}

    def status_bits(self) -> list[tuple[str, int, bool]]:
        """(point kind "coil"|"discrete", address, True = closed) for every status point."""
        return [
            (s.status.kind, s.status.address, self._mech[s.id].state == "closed")
            for s in self.profile.switches
            if s.status is not None
        ]

    def command_bits(self) -> list[tuple[int, bool]]:
        """(command coil address, value) as the coils read back: the last command, True = close."""
        return [
            (addr, self._mech[sid].target == "closed") for addr, sid in self._coil_to_switch.items()
        ]


class Transient:
    """Per-meter phasors moving from the old steady state to the new one after a change."""

    def __init__(self, kind: str, tau: float, steady: Mapping[str, Phasors], t: float = 0.0):
        self.kind, self.tau = kind, tau
        self._old = dict(steady)
        self._new = dict(steady)
        self._t0 = t

    def retarget(self, steady: Mapping[str, Phasors], t: float) -> None:
        """A new steady state from time ``t``; starts from where the readings are now."""
        self._old = self.at(t)
        self._new = dict(steady)
        self._t0 = t

    def at(self, t: float) -> dict[str, Phasors]:
        r = remaining(self.kind, self.tau, t - self._t0)
        if r == 0.0:
            return dict(self._new)
        return {
            m: blend(self._old[m], new, r) if m in self._old else new
            for m, new in self._new.items()
        }
