"""Guarded switch commands: the only module in benchwalk that writes to a device.

A write operates real plant, so every guard must hold first: control enabled in the profile,
a remote switch with a named command coil, a PLC and a status point to verify against, and
a technician's name as confirmation. Only that one coil is written (True = close), once, never
retried blindly (an unanswered write may still have operated); the status point then says
whether the switch followed.
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import Awaitable, Callable
from dataclasses import dataclass

from pymodbus.exceptions import ModbusException
from pymodbus.pdu import ModbusPDU

from ..errors import BenchwalkError
from ..model import Profile, Switch
from .cycle import Poller, plc_of

VERIFY_POLL_S = 0.02  # status re-read period while waiting for the switch to follow


class ControlRefused(BenchwalkError):
    """A command that the guards do not allow; nothing was written."""


@dataclass(frozen=True)
class OperateResult:
    switch: str
    intended: str  # "open" | "closed"
    final_status: str  # "open" | "closed" | "unknown"
    ok: bool
    elapsed_s: float
    message: str
    confirmed_by: str = ""


async def _pause() -> None:
    await asyncio.sleep(VERIFY_POLL_S)


class SwitchControl:
    """Guarded commands through ``poller``'s links. ``clock`` times the verification (a session
    on the simulated bench gives its simulated clock); ``wait`` runs between two status reads
    (a short sleep; a session driving the simulated bench cycle by cycle runs one cycle)."""

    def __init__(
        self,
        profile: Profile,
        poller: Poller,
        *,
        clock: Callable[[], float] = time.monotonic,
        wait: Callable[[], Awaitable[None]] = _pause,
    ):
        self.profile = profile
        self.poller = poller
        self.clock = clock
        self.wait = wait

    def check(self, switch_id: str, state: str, confirmed_by: str) -> Switch:
        """The switch if every guard holds; else ``ControlRefused`` saying which one failed."""
        # an id typed or passed in may hold anything: the message must stay one line
        name = switch_id if str(switch_id).isprintable() else repr(switch_id)
        if not self.profile.control.enabled:
            raise ControlRefused(
                f"switch {name}: control is disabled in the profile; set [control] enabled = true "
                "to let benchwalk operate switches"
            )
        try:
            sw = self.profile.switch(switch_id)
        except KeyError:
            raise ControlRefused(f"switch {name}: no such switch in the profile") from None
        if state not in ("open", "closed"):
            raise ControlRefused(
                f"switch {name}: cannot command state {state!r}; use open or closed"
            )
        if sw.operation != "remote":
            raise ControlRefused(
                f"switch {name} is operated by hand; operate it on site and confirm"
            )
        if sw.command_coil is None or sw.plc is None:
            raise ControlRefused(
                f"switch {name}: no PLC command coil configured; operate it by hand"
            )
        if sw.status is None:
            raise ControlRefused(
                f"switch {name}: no status point to verify a command; operate it by hand"
            )
        try:
            plc_of(self.profile, sw.plc)
        except KeyError:
            raise ControlRefused(f"switch {name}: PLC {sw.plc} is not in the profile") from None
        if not confirmed_by or not confirmed_by.strip():
            raise ControlRefused(f"switch {name}: a command needs the confirming technician's name")
        return sw

    async def operate(self, switch_id: str, state: str, *, confirmed_by: str) -> OperateResult:
        """Write the switch's command coil once, then wait for its status to follow."""
        sw = self.check(switch_id, state, confirmed_by)
        assert sw.plc is not None and sw.command_coil is not None
        plc = plc_of(self.profile, sw.plc)
        link = await self.poller.ensure_link(plc.transport)
        if not link.connected or link.client is None:
            raise BenchwalkError(
                f"switch {switch_id}: PLC {plc.id} at {plc.transport.endpoint} is not reachable; "
                "check its cable and address, then try again"
            )
        t0 = self.clock()
        sent_error = ""
        unit = plc.unit_id
        rr: ModbusPDU | None = None
        async with link.lock:  # the poller's reads wait; only this one request goes out
            client = link.client
            assert client is not None
            try:
                async with asyncio.timeout(plc.timeout_s):
                    rr = await client.write_coil(sw.command_coil, state == "closed", device_id=unit)
            except (TimeoutError, ModbusException) as exc:
                sent_error = f"no reply to the command ({type(exc).__name__}); "
        if rr is not None and rr.isError():
            code = rr.exception_code
            status = await self.poller.read_switch(switch_id)
            return OperateResult(
                switch_id,
                state,
                status,
                False,
                self.clock() - t0,
                f"PLC {plc.id} rejected the command to coil {sw.command_coil} with exception "
                f"{code:#04x}; {switch_id} reads {status}",
                confirmed_by,
            )
        return await self._verify(sw, state, t0, sent_error, confirmed_by)

    async def _verify(
        self, sw: Switch, state: str, t0: float, prefix: str, confirmed_by: str
    ) -> OperateResult:
        deadline = t0 + self.profile.control.verify_timeout_s
        # a guard on the wall clock too, should nothing advance ``clock`` (never reached when
        # the clock is the wall clock or advances with the cycles ``wait`` runs)
        wall_guard = time.monotonic() + 10 * self.profile.control.verify_timeout_s + 5.0
        status = "unknown"
        while True:
            status = await self.poller.read_switch(sw.id)
            if status == state:
                elapsed = self.clock() - t0
                return OperateResult(
                    sw.id,
                    state,
                    status,
                    True,
                    elapsed,
                    f"{prefix}{sw.id} is {status} after {elapsed:.2f} s",
                    confirmed_by,
                )
            if self.clock() >= deadline or time.monotonic() >= wall_guard:
                break
            await self.wait()
        elapsed = self.clock() - t0
        return OperateResult(
            sw.id,
            state,
            status,
            False,
            elapsed,
            f"{prefix}{sw.id} was commanded {state} but still reads {status} after "
            f"{self.profile.control.verify_timeout_s:g} s; check the mechanism and its status wiring",
            confirmed_by,
        )
