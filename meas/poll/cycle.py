"""Poll every meter and PLC status point once per cycle over Modbus TCP/RTU -> ``Snapshot``.

Endpoints (one client each, ``meas.modbus.link``) run concurrently, each served by its own
worker (``endpoints.py``); units behind one endpoint are polled in turn (``units.py``),
healthy ones first. A read whose cycle has closed while a
newer cycle waits is not retried: its answer could reach no snapshot and would only hold back
the neighbours.

Cycle deadline: a cycle waits for its answers only until ``max(interval, 1.5 x the learned
healthy time of the slowest endpoint + 50 ms)``. A unit that has not answered by then is
reported with quality timeout for that cycle while its request finishes in the background
on its endpoint's worker task (one task and one outstanding request per client). An answer
belongs only to the cycle it was requested for and is dropped if that cycle has closed, so a
late reply is never shown under a later cycle. The first pass over an endpoint has no
learned time and waits for every unit's full budget.

Simulated time: with ``before_cycle`` (a session on the simulated bench) each cycle first
awaits it, takes the time it returns as the snapshot's ``t_mono`` and waits for every unit's
full budget, so a loaded machine cannot turn a healthy answer into a timeout and the
snapshot is a function of the cycle number (``meas.sim.clock``).
"""

from __future__ import annotations

import asyncio
import contextlib
import math
import random
import time
from collections.abc import AsyncGenerator, Awaitable, Callable
from datetime import UTC, datetime

from ..modbus.codec import DecodeError
from ..modbus.decode import RequestDecoder, identification
from ..modbus.hardening import require_supported_pymodbus, tame_pymodbus_logging
from ..modbus.link import Backoff, EndpointLink, NoAnswer, ReadFailed
from ..modbus.plan import MeterPlan, plan_profile, status_reads
from ..model import Plc, Profile, RtuTransport, Switch, Transport
from ..snapshot import Snapshot
from .endpoints import Cycle, Endpoint
from .units import Draft, MeterStatus, Unit, note_silence

RUN_SLOT_MARGIN_S = 0.005  # run(): a cycle's answers are due this long before the next slot
# A failing TCP unit or link is tried again at least this often (+-20 % jitter), so a meter
# that comes back is read within 2 s at the default 0.2 s cycle; these tries are cheap probes
# (``units.probe_limit``), and ``[poll] backoff_max_s`` spaces the full-timeout ones instead.
# A serial line keeps the profile's backoff: every try there costs the whole bus a timeout.
RETURN_PROBE_MAX_S = 1.25


class Poller:
    """Concurrent cycles over every endpoint; see the module docstring for the strategy."""

    def __init__(
        self,
        profile: Profile,
        *,
        plans: dict[str, MeterPlan] | None = None,
        before_cycle: Callable[[], Awaitable[float]] | None = None,
    ):
        require_supported_pymodbus()
        self.profile = profile
        self.before_cycle = before_cycle  # simulated time: see the module docstring
        self.plans = plans if plans is not None else plan_profile(profile)
        self._rng = random.Random()
        self._endpoints: dict[str, Endpoint] = {}
        self._units: dict[str, Unit] = {}
        self._plc_units: dict[str, Unit] = {}
        self._seq = 0
        self._started = False
        for m in profile.meters:
            plan = self.plans[m.id]
            specs = {s.key: s for s in profile.maps[m.map_id].registers}
            keys = tuple(k for r in plan.requests for k in r.keys)
            unit = Unit(
                m.id,
                m.unit_id,
                m.timeout_s,
                m.retries,
                self._backoff(m.transport),
                meter=m,
                plan=plan,
                decoders=[RequestDecoder(r, specs, m) for r in plan.requests],
                keys=keys,
                nan_values=dict.fromkeys(keys, math.nan),
            )
            self._attach(m.transport, unit)
            self._units[m.id] = unit
        for p in profile.plcs:
            sw = [s for s in profile.switches if s.plc == p.id and s.status is not None]
            unit = Unit(
                p.id,
                p.unit_id,
                p.timeout_s,
                0,
                self._backoff(p.transport),
                status_reads=status_reads(sw),
            )
            self._attach(p.transport, unit)
            self._plc_units[p.id] = unit
        tame_pymodbus_logging()

    def _backoff(self, transport: Transport) -> Backoff:
        poll = self.profile.poll
        cap = poll.backoff_max_s
        if not isinstance(transport, RtuTransport):
            cap = min(cap, RETURN_PROBE_MAX_S)
        return Backoff(min(poll.backoff_initial_s, cap), cap, self._rng)

    def _attach(self, transport: Transport, unit: Unit) -> None:
        unit.full_probe_every_s = self.profile.poll.backoff_max_s
        ep = self._endpoints.get(transport.endpoint)
        if ep is None:
            link = EndpointLink(
                transport.endpoint, transport, unit.timeout_s, self._backoff(transport)
            )
            ep = self._endpoints[transport.endpoint] = Endpoint(link)
        ep.link.timeout_s = max(ep.link.timeout_s, unit.timeout_s)
        ep.units.append(unit)
        ep.link.uniform_timeout = len({u.timeout_s for u in ep.units}) == 1

    # ------------------------------------------------------------ public API

    @property
    def late_answers(self) -> int:
        """Drafts that arrived after their cycle closed (dropped), over every endpoint."""
        return sum(ep.late_answers for ep in self._endpoints.values())

    @property
    def endpoint_clients(self) -> dict[str, EndpointLink]:
        """Endpoint -> link (client + lock)."""
        return {name: ep.link for name, ep in self._endpoints.items()}

    async def ensure_link(self, transport: Transport) -> EndpointLink:
        """The endpoint's link, dialled now if down (a technician is waiting: no backoff)."""
        link = self._endpoints[transport.endpoint].link
        if not link.connected:
            await link.connect(time.monotonic())
        return link

    async def read_switch(self, switch_id: str) -> str:
        """One fresh read of a switch's status point: "open", "closed" or "unknown"."""
        sw = self.profile.switch(switch_id)
        if sw.plc is None or sw.status is None:
            return "unknown"
        unit = self._plc_units.get(sw.plc)
        if unit is None:
            return "unknown"
        ep = self._endpoints[plc_of(self.profile, sw.plc).transport.endpoint]
        try:
            bits, _ = await ep.link.read(
                sw.status.kind,
                sw.status.address,
                1,
                unit.unit_id,
                unit.timeout_s,
                unit.retries + 1,
            )
        except NoAnswer:
            note_silence(ep.link, unit, ep.units)
            return "unknown"
        except ReadFailed:
            return "unknown"
        return "closed" if bits[0] else "open"

    async def identify(self) -> dict[str, dict[str, str]]:
        """Each meter's identification strings (its map's text registers), read once.

        Meter id -> {key: text}; a meter that does not answer, or whose map has no text
        registers, is left out (identification is information, never a check)."""
        out: dict[str, dict[str, str]] = {}
        for m in self.profile.meters:
            rmap = self.profile.maps[m.map_id]
            link = self._endpoints[m.transport.endpoint].link
            if not rmap.text or not link.connected:
                continue
            got: dict[str, str] = {}
            for spec in rmap.text:
                try:
                    words, _ = await link.read(
                        spec.kind, spec.address, spec.count, m.unit_id, m.timeout_s, m.retries + 1
                    )
                    got |= identification(rmap, {spec.kind: (spec.address, words)})
                except (NoAnswer, ReadFailed, DecodeError):
                    continue
            if got:
                out[m.id] = got
        return out

    async def start(self) -> None:
        """Connect every endpoint concurrently; an unreachable one just enters backoff."""
        self._started = True
        now = time.monotonic()
        await asyncio.gather(*(ep.link.connect(now) for ep in self._endpoints.values()))

    def cycle_budget(self, interval_s: float | None = None) -> float:
        """Seconds the next cycle may wait for answers (see the module docstring)."""
        interval = self.profile.poll.interval_s if interval_s is None else interval_s
        patient = self.before_cycle is not None
        return max([interval, *(ep.need(patient) for ep in self._endpoints.values())])

    async def poll_once(self, *, deadline_s: float | None = None) -> Snapshot:
        """One cycle; returns by ``cycle_budget(deadline_s)`` whatever any meter does."""
        if not self._started:
            await self.start()
        t_sim = await self.before_cycle() if self.before_cycle is not None else None
        t_mono = time.monotonic()
        time_utc = datetime.now(UTC)
        self._seq += 1
        cyc = Cycle(
            self._seq, time_utc, t_mono + self.cycle_budget(deadline_s), set(self._endpoints)
        )
        for ep in self._endpoints.values():
            ep.wanted = cyc
            if ep.task is None or ep.task.done():
                ep.task = asyncio.create_task(ep.serve(), name=f"poll {ep.link.endpoint}")
        if cyc.remaining:
            with contextlib.suppress(TimeoutError):
                async with asyncio.timeout_at(cyc.deadline):
                    await cyc.done.wait()
        cyc.closed = True
        blocks = {}
        bits: dict[tuple[str, str], bool] = {}
        for m in self.profile.meters:
            unit = self._units[m.id]
            blocks[m.id] = unit.deliver(
                cyc.drafts.get(m.id) or self._pending(unit, cyc, t_mono), time_utc
            )
        for unit in self._plc_units.values():
            draft = cyc.drafts.get(unit.id)
            if draft is None and unit.status_reads:
                draft = self._pending(unit, cyc, t_mono)
            if draft is not None:
                unit.deliver(draft, time_utc)
                bits.update(draft.bits)
        switches = {sw.id: _switch_state(sw, bits) for sw in self.profile.switches}
        return Snapshot(
            seq=cyc.seq,
            time_utc=time_utc,
            t_mono=t_mono if t_sim is None else t_sim,
            meters=blocks,
            switches=switches,
            cycle_s=time.monotonic() - t_mono,
        )

    async def run(self, interval_s: float | None = None) -> AsyncGenerator[Snapshot, None]:
        """Cycles on a fixed grid; an overrun skips to the next free slot instead of bursting."""
        interval = self.profile.poll.interval_s if interval_s is None else interval_s
        t0 = time.monotonic()
        k = 0
        while True:
            # end the cycle just before the next slot, so a pending meter never costs a slot
            slot_left = t0 + (k + 1) * interval - time.monotonic() - RUN_SLOT_MARGIN_S
            yield await self.poll_once(deadline_s=max(0.0, slot_left))
            k += 1
            now = time.monotonic()
            if t0 + k * interval < now:
                k = math.ceil((now - t0) / interval)
            await asyncio.sleep(max(0.0, t0 + k * interval - time.monotonic()))

    def meter_status(self) -> dict[str, MeterStatus]:
        return {mid: u.status() for mid, u in self._units.items()}

    def plc_status(self) -> dict[str, MeterStatus]:
        return {pid: u.status() for pid, u in self._plc_units.items()}

    async def close(self) -> None:
        """Stop the workers (an outstanding request is cancelled) and close every client."""
        tasks = [
            ep.task for ep in self._endpoints.values() if ep.task is not None and not ep.task.done()
        ]
        for t in tasks:
            t.cancel()
        for t in tasks:
            with contextlib.suppress(asyncio.CancelledError, Exception):
                await t
        for ep in self._endpoints.values():
            ep.task = None
            ep.wanted = None
            ep.link.close()
        self._started = False

    def _pending(self, unit: Unit, cyc: Cycle, t_mono: float) -> Draft:
        """A unit with no answer by the cycle deadline (its endpoint says why)."""
        ep = next(e for e in self._endpoints.values() if unit in e.units)
        return ep.pending(unit, cyc, t_mono)


def _switch_state(sw: Switch, bits: dict[tuple[str, str], bool]) -> str:
    if sw.plc is None or sw.status is None:
        return "unknown"
    closed = bits.get((sw.plc, sw.id))
    return "unknown" if closed is None else ("closed" if closed else "open")


def plc_of(profile: Profile, plc_id: str) -> Plc:
    for p in profile.plcs:
        if p.id == plc_id:
            return p
    raise KeyError(plc_id)
