"""One endpoint's side of a poll cycle: the cycle being assembled, and the worker that serves
it over the endpoint's link.

The worker serves the newest cycle it is wanted for, healthy units first (a dead one's probe
must not hold back its neighbours), publishes each unit's draft into the cycle and counts the
answers that arrive after their cycle closed. ``Endpoint.need`` is how long a cycle waits for
it (the cycle deadline of ``meas.poll.cycle``, whose ``Poller`` owns the endpoints).
"""

from __future__ import annotations

import asyncio
import logging
import struct
import time
from dataclasses import dataclass, field
from datetime import datetime

from pymodbus.exceptions import ModbusException

from ..modbus.link import EndpointLink
from ..snapshot import Quality
from .units import Draft, Unit, poll_meter, poll_plc, unanswered

log = logging.getLogger(__name__)

DEADLINE_HEADROOM = 1.5  # cycle deadline = headroom x learned healthy endpoint time + margin
DEADLINE_MARGIN_S = 0.05


@dataclass
class Cycle:
    """One poll cycle being assembled; workers publish drafts into it until it closes."""

    seq: int
    time_utc: datetime
    deadline: float  # monotonic
    remaining: set[str]  # endpoints that have not finished their pass for this cycle
    drafts: dict[str, Draft] = field(default_factory=dict)
    done: asyncio.Event = field(default_factory=asyncio.Event)
    closed: bool = False

    def publish(self, unit_id: str, draft: Draft) -> bool:
        if self.closed:
            return False  # a late answer: its cycle is gone, never show it under another one
        self.drafts[unit_id] = draft
        return True

    def link_done(self, endpoint: str) -> None:
        self.remaining.discard(endpoint)
        if not self.remaining:
            self.done.set()


@dataclass
class Endpoint:
    """One endpoint's link, the units behind it and the worker that serves its cycles."""

    link: EndpointLink
    units: list[Unit] = field(default_factory=list)
    task: asyncio.Task[None] | None = None  # the worker serving this endpoint's cycles
    wanted: Cycle | None = None  # newest cycle this endpoint has not served yet
    learned: bool = False  # one full pass done: the cycle deadline applies from now on
    busy_with: str = ""  # unit id whose request is outstanding, for the pending message
    late_answers: int = 0  # drafts that arrived after their cycle closed (dropped)

    def need(self, patient: bool = False) -> float:
        """How long a cycle should wait for this endpoint: learned healthy time, or the full budget
        (always when ``patient``)."""
        if patient or not self.learned:
            return self.link.connect_timeout_s + sum(
                u.timeout_s * (u.retries + 1) * max(1, u.requests) for u in self.units
            )
        healthy = sum(u.answer_s for u in self.units if u.backoff.failures == 0)
        return DEADLINE_HEADROOM * healthy + DEADLINE_MARGIN_S

    async def serve(self) -> None:
        """The endpoint's worker: serve the newest wanted cycle until none is open any more."""
        while True:
            cyc, self.wanted = self.wanted, None
            if cyc is None or cyc.closed:
                return
            try:
                await self._poll(cyc)
            finally:
                self.busy_with = ""
                cyc.link_done(self.link.endpoint)

    async def _poll(self, cyc: Cycle) -> None:
        """One pass over the units for ``cyc``, each draft published into it."""
        link = self.link
        now = time.monotonic()
        if not link.connected and link.backoff.ready(now):
            await link.connect(now)  # first redial after a drop is immediate

        def superseded() -> bool:  # no retry for a closed cycle while a newer one waits
            return cyc.closed and self.wanted is not None

        # healthy units first: a dead one's probe must not hold back its neighbours
        for unit in sorted(self.units, key=lambda u: u.backoff.failures > 0):
            if unit.backoff.failures and superseded():
                break  # no probe for a cycle that can take no answer while a newer one waits
            if unit.meter is None and not unit.status_reads:
                continue  # a PLC with no status points: nothing to read
            self.busy_with = unit.id
            try:
                if unit.meter is not None:
                    draft = await poll_meter(link, unit, self.units, superseded)
                else:
                    draft = await poll_plc(link, unit, self.units, superseded)
            except (
                ModbusException,
                OSError,
                ValueError,
                struct.error,
            ) as exc:  # never kill the worker
                log.warning("%s unit %s: %s", link.endpoint, unit.unit_id, exc)
                draft = unanswered(unit, Quality.DECODE, f"{type(exc).__name__}: {exc}")
            if not cyc.publish(unit.id, draft):
                self.late_answers += 1
        self.learned = True

    def pending(self, unit: Unit, cyc: Cycle, t_mono: float) -> Draft:
        """A unit of this endpoint with no answer by the cycle deadline: timeout for this
        cycle, request kept."""
        waiting = self.busy_with
        why = f"no answer by the cycle deadline ({(cyc.deadline - t_mono) * 1000:.0f} ms)" + (
            f"; {self.link.endpoint} busy with {waiting}" if waiting and waiting != unit.id else ""
        )
        return unanswered(unit, Quality.TIMEOUT, why)
