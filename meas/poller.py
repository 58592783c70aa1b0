"""Poll every meter and PLC status point once per cycle over Modbus TCP/RTU -> ``Snapshot``.

One pymodbus client per endpoint (TCP host:port or serial device), because a client carries
one request at a time and real gateways accept few connections; units behind one endpoint
are polled in turn under that endpoint's lock, endpoints run concurrently. Connection
handling is ours alone (pymodbus ``reconnect_delay=0``): capped exponential backoff with
jitter around ``connect()``, and a separate backoff per unit id so a dead meter behind a
gateway costs its neighbours one timeout, not one per cycle, and never drops their link.
A unit that stops answering skips the rest of its reads for the cycle; a unit already in
backoff is probed with one attempt (no retries), after its healthy neighbours, and waits only
a few times the link's slowest learned healthy read (floor 50 ms; TCP only, and every 4th
probe waits the full timeout). A read whose cycle has closed while a newer cycle waits is not
retried: its answer could reach no snapshot and would only hold back the neighbours.

Cycle deadline: a cycle waits for its answers only until ``max(interval, 1.5 x the learned
healthy time of the slowest endpoint + 50 ms)``. A unit that has not answered by then is
reported with quality timeout for that cycle while its request finishes in the background
on its endpoint's worker task (one task and one outstanding request per client). An answer
belongs only to the cycle it was requested for and is dropped if that cycle has closed, so a
late reply is never shown under a later cycle. The first pass over an endpoint has no
learned time and waits for every unit's full budget.
"""

from __future__ import annotations

import asyncio
import contextlib
import itertools
import logging
import math
import operator
import random
import struct
import sys
import time
from collections.abc import AsyncIterator
from dataclasses import dataclass, field
from datetime import UTC, datetime

from pymodbus.client import AsyncModbusSerialClient, AsyncModbusTcpClient
from pymodbus.exceptions import ConnectionException, ModbusException, ModbusIOException

from .modbus.plan import MeterPlan, ReadRequest, plan_profile
from .model import Meter, Plc, Profile, RegisterMap, RegisterSpec, RtuTransport, Switch, Transport
from .quantities import split_key
from .scaling import ratio
from .snapshot import CommState, MeterBlock, Quality, Snapshot

log = logging.getLogger(__name__)

GATEWAY_NO_TARGET = {0x0A, 0x0B}  # gateway path unavailable / target failed to respond
MAX_BIT_READ = 2000  # coils / discrete inputs per read, Modbus Application Protocol V1.1b3
BIT_GAP = 16  # unused status bits one read may bridge
RECONNECT_AFTER_SILENT = 3  # consecutive unanswered reads on an open link before we redial
RTU_QUIET_S = 0.05  # after an RTU timeout: let a late reply drain before the next request
DEADLINE_HEADROOM = 1.5  # cycle deadline = headroom x learned healthy endpoint time + margin
DEADLINE_MARGIN_S = 0.05
RUN_SLOT_MARGIN_S = 0.005  # run(): a cycle's answers are due this long before the next slot
ANSWER_DECAY = 0.9  # per cycle: how fast a slow answer stops widening the deadline
PROBE_RTT_FACTOR = 4  # probe of a unit in backoff: this many x the link's slowest healthy read,
PROBE_FLOOR_S = 0.05  # but never shorter than this, nor longer than the unit's own timeout
FULL_PROBE_EVERY = 4  # every 4th probe waits the full timeout: a slow unit is never locked out
_FC_FOR_KIND = {"coil": 1, "discrete": 2, "holding": 3, "input": 4}
_READ_METHOD = {
    "holding": "read_holding_registers",
    "input": "read_input_registers",
    "coil": "read_coils",
    "discrete": "read_discrete_inputs",
}


def tame_pymodbus_logging(level: int = logging.CRITICAL) -> None:
    """pymodbus logs every timeout at ERROR with frame dumps; quiet it unless configured."""
    lg = logging.getLogger("pymodbus")
    if lg.level == logging.NOTSET:
        lg.setLevel(level)


def backoff_delay(failures: int, initial_s: float, max_s: float, rng: random.Random) -> float:
    """Delay before the next try after ``failures`` (>= 1) failed ones: doubling, capped, +-20 %."""
    base = min(max_s, initial_s * 2 ** max(0, failures - 1))
    return min(max_s, base * rng.uniform(0.8, 1.2))


@dataclass
class Backoff:
    initial_s: float
    max_s: float
    rng: random.Random
    failures: int = 0
    next_try: float = 0.0  # monotonic

    def ready(self, now: float) -> bool:
        return now >= self.next_try

    def fail(self, now: float) -> float:
        self.failures += 1
        delay = backoff_delay(self.failures, self.initial_s, self.max_s, self.rng)
        self.next_try = now + delay
        return delay

    def reset(self) -> None:
        self.failures = 0
        self.next_try = 0.0


@dataclass(frozen=True)
class MeterStatus:
    state: CommState
    last_good_utc: datetime | None
    error_count: int
    last_error: str
    exception_code: int | None
    latency_s: float = math.nan


class _Disconnected(Exception):
    def __init__(self, why: str, during: bool = False):
        super().__init__(why)
        self.during = during  # the link died under this unit's request: blame the unit


class _NoAnswer(Exception):
    pass


class _BadReply(Exception):
    def __init__(self, why: str, costly: bool = False):
        super().__init__(why)
        self.costly = costly  # it cost a timeout: back the unit off like a silent one


class _DeviceException(Exception):
    def __init__(self, code: int):
        super().__init__(code)
        self.code = code


@dataclass
class _StatusRead:
    kind: str  # "coil" | "discrete"
    address: int
    count: int
    switches: tuple[tuple[str, int], ...]  # (switch id, bit address)


@dataclass
class _Unit:
    """A meter or a PLC behind an endpoint, with its own backoff and status."""

    id: str
    unit_id: int
    timeout_s: float
    retries: int
    backoff: Backoff
    meter: Meter | None = None
    regmap: RegisterMap | None = None
    plan: MeterPlan | None = None
    specs: dict[str, RegisterSpec] = field(default_factory=dict)
    decoders: list[RequestDecoder] = field(default_factory=list)  # by request index
    keys: tuple[str, ...] = ()  # every key the plan reads, in request order
    nan_values: dict[str, float] = field(default_factory=dict)  # template: every key NaN
    status_reads: list[_StatusRead] = field(default_factory=list)
    state: CommState = CommState.OFFLINE
    last_good_utc: datetime | None = None
    error_count: int = 0
    last_error: str = "not polled yet"
    exception_code: int | None = None
    latency_s: float = math.nan
    answer_s: float = 0.0  # decaying max of the time a full answered poll takes
    pending: int = 0  # cycles in a row delivered as pending (request still outstanding)

    @property
    def requests(self) -> int:
        return len(self.plan.requests) if self.plan is not None else len(self.status_reads)


@dataclass
class _Draft:
    """What one unit's poll produced, before it is delivered into its cycle's Snapshot."""

    values: dict[str, float]
    quality: dict[str, Quality]
    state: CommState
    error: str
    exception_code: int | None
    latency_s: float
    bits: dict[tuple[str, str], bool] = field(default_factory=dict)  # PLC status points


@dataclass
class _Cycle:
    """One poll cycle being assembled; workers publish drafts into it until it closes."""

    seq: int
    time_utc: datetime
    deadline: float  # monotonic
    remaining: set[str]  # endpoints that have not finished their pass for this cycle
    drafts: dict[str, _Draft] = field(default_factory=dict)
    done: asyncio.Event = field(default_factory=asyncio.Event)
    closed: bool = False

    def publish(self, unit_id: str, draft: _Draft) -> bool:
        if self.closed:
            return False  # a late answer: its cycle is gone, never show it under another one
        self.drafts[unit_id] = draft
        return True

    def link_done(self, endpoint: str) -> None:
        self.remaining.discard(endpoint)
        if not self.remaining:
            self.done.set()


@dataclass
class EndpointLink:
    """One client, its lock and its connection backoff; ``control.py`` reuses it for writes."""

    endpoint: str
    transport: Transport
    timeout_s: float
    backoff: Backoff
    units: list[_Unit] = field(default_factory=list)
    client: AsyncModbusTcpClient | AsyncModbusSerialClient | None = None
    lock: asyncio.Lock = field(default_factory=asyncio.Lock)
    last_error: str = ""
    silent_reads: int = 0
    uniform_timeout: bool = True  # every unit has the same timeout: pymodbus can enforce it
    connects: int = 0  # successful connects, for tests and diagnostics
    task: asyncio.Task | None = None  # the worker serving this link's cycles, if running
    wanted: _Cycle | None = None  # newest cycle this link has not served yet
    learned: bool = False  # one full pass done: the cycle deadline applies from now on
    busy_with: str = ""  # unit id whose request is outstanding, for the pending message

    @property
    def connected(self) -> bool:
        return self.client is not None and self.client.connected

    @property
    def is_serial(self) -> bool:
        return isinstance(self.transport, RtuTransport)


def _make_client(transport: Transport, timeout_s: float):
    """A pymodbus client with its own reconnect and retries off (we do both)."""
    if isinstance(transport, RtuTransport):
        client = AsyncModbusSerialClient(
            transport.device,
            baudrate=transport.baudrate,
            parity=transport.parity,
            stopbits=transport.stopbits,
            bytesize=transport.bytesize,
            timeout=timeout_s,
            retries=0,
            reconnect_delay=0,
        )
    else:
        client = AsyncModbusTcpClient(
            transport.host,
            port=transport.port,
            timeout=timeout_s,
            retries=0,
            reconnect_delay=0,
        )
    client.set_max_no_responses(1 << 30)  # never let one dead unit drop a shared link
    _harden(client)
    return client


def _harden(client) -> None:
    """Two pymodbus 3.16 behaviours a hostile device turns into trouble, fixed at the client.

    An undecodable reply (say a byte count beyond the data) raises inside the protocol's
    ``data_received``: asyncio logs a traceback and closes the shared link. We drop the bytes
    instead, count them and end the request at once as a bad reply; the link stays up. And a
    connection lost mid-request leaves the request waiting its full timeout: we fail it at
    once with ``ConnectionException``.
    """
    ctx = client.ctx
    ctx.bad_frames = 0
    handle = ctx.framer.handleFrame
    disconnected = ctx.callback_disconnected

    def guarded_handle(data: bytes, exp_devid: int, exp_tid: int):
        try:
            return handle(data, exp_devid, exp_tid)
        except ModbusIOException:
            ctx.bad_frames += 1
            fut = getattr(ctx, "response_future", None)
            if fut is not None and not fut.done():  # end the request now, not at its timeout
                fut.set_exception(ModbusIOException("undecodable reply"))
            return len(data), None

    def failing_disconnected(exc: Exception | None) -> None:
        fut = getattr(ctx, "response_future", None)
        if fut is not None and not fut.done():
            fut.set_exception(
                ConnectionException(f"connection lost during a request ({exc or 'closed'})")
            )
        disconnected(exc)

    ctx.framer.handleFrame = guarded_handle
    ctx.callback_disconnected = failing_disconnected


_BOUNDS = {  # no healthy meter reports values outside these (primary units): DECODE quality
    # negative magnitudes, |PF| > 1 (+ one count of a 0.001 resolution), angles beyond a turn
    **dict.fromkeys(("v_ln", "v_ll", "i", "s", "f", "e_imp", "e_exp"), (0.0, math.inf)),
    "pf": (-1.001, 1.001),
    "v_ang": (-360.0, 360.0),
    "i_ang": (-360.0, 360.0),
}
_FLOAT_MAX = sys.float_info.max
_STRUCT_CHAR = {
    "int16": "h",
    "uint16": "H",
    "int32": "i",
    "uint32": "I",
    "float32": "f",
    "float64": "d",
}


class RequestDecoder:
    """Decode every value of one read in one ``struct`` call; same result as ``registers.decode``.

    The word/byte-order permutation of the whole read and one struct format (pad bytes for
    the gaps) are precompiled, so a read costs one pack, at most one permutation and one
    unpack, then the scale, offset and CT/VT ratio in one pass in the reference's order of
    operations (``tests/test_poller.py`` checks it against ``registers.decode`` +
    ``scaling.to_primary``). A read with an impossible or non-finite value takes a slow path
    that names each bad value.
    """

    def __init__(self, req: ReadRequest, specs: dict[str, RegisterSpec], meter: Meter):
        self.count = req.count
        self._pack = struct.Struct(f">{req.count}H").pack
        items = []
        for key in req.keys:
            sp = specs[key]
            off = 2 * (sp.address - req.address)
            nb = 2 * sp.count
            words = list(range(sp.count))
            if sp.word_order == "little":
                words.reverse()
            perm = []
            for w in words:
                perm += (
                    [off + 2 * w, off + 2 * w + 1]
                    if sp.byte_order == "big"
                    else [off + 2 * w + 1, off + 2 * w]
                )
            lo, hi = _BOUNDS.get(split_key(key)[0], (-math.inf, math.inf))
            items.append(
                (
                    off,
                    nb,
                    perm,
                    key,
                    _STRUCT_CHAR[sp.dtype],
                    sp.scale,
                    sp.offset,
                    ratio(meter, key),
                    lo,
                    hi,
                )
            )
        items.sort(key=lambda it: it[0])
        self.keys = tuple(it[3] for it in items)
        self._items = [
            (
                key,
                struct.Struct(">" + ch),
                off,
                None if perm == list(range(off, off + nb)) else perm,
                scale,
                offset,
                r,
                lo,
                hi,
            )
            for off, nb, perm, key, ch, scale, offset, r, lo, hi in items
        ]
        self._scale = tuple(it[5] for it in items)
        self._offset = tuple(it[6] for it in items)
        self._ratio = tuple(it[7] for it in items)
        self._plain = all(
            s == 1.0 and o == 0.0 and r == 1.0
            for s, o, r in zip(self._scale, self._offset, self._ratio, strict=True)
        )
        # bounds per quantity group, checked with min()/max() of one itemgetter (C loops);
        # a pair index gives a tuple even for a group of one
        groups: dict[tuple[float, float], list[int]] = {}
        for n, it in enumerate(items):
            if (it[8], it[9]) != (-math.inf, math.inf):
                groups.setdefault((it[8], it[9]), []).append(n)
        self._bounded = [
            (operator.itemgetter(*(idx if len(idx) > 1 else idx * 2)), lo, hi)
            for (lo, hi), idx in groups.items()
        ]
        self._all_ok = dict.fromkeys(self.keys, Quality.OK)
        overlap = any(b[0] < a[0] + a[1] for a, b in itertools.pairwise(items))
        self._unpack = None  # overlapping values (no valid profile has them): per-value slow path
        self._permute = None
        if not overlap:
            perm_all = list(range(2 * req.count))
            fmt, pos = ">", 0
            for off, nb, perm, _key, ch, *_ in items:
                perm_all[off : off + nb] = perm
                fmt += "x" * (off - pos) + ch
                pos = off + nb
            self._unpack = struct.Struct(fmt).unpack_from
            if perm_all != list(range(2 * req.count)):
                self._permute = operator.itemgetter(*perm_all)

    def decode(self, words: list[int], values: dict, quality: dict, errors: list[str]) -> int:
        """Fill ``values``/``quality`` for this read's keys -> how many are ok."""
        buf = self._pack(*words)
        if self._unpack is None:
            return self._decode_each(buf, values, quality, errors)
        if self._permute is not None:
            buf = bytes(self._permute(buf))
        raw = self._unpack(buf)
        if self._plain:  # == (raw * 1.0 + 0.0) * 1.0 bit for bit, ints become float
            vals = [r + 0.0 for r in raw]
        else:
            vals = [
                (r * s + o) * k
                for r, s, o, k in zip(raw, self._scale, self._offset, self._ratio, strict=True)
            ]
        total = sum(vals)  # finite iff no NaN/Inf (an overflow only sends us the slow way)
        if total - total == 0.0 and all(
            lo <= min(g(vals)) and max(g(vals)) <= hi for g, lo, hi in self._bounded
        ):
            values.update(zip(self.keys, vals, strict=True))
            quality.update(self._all_ok)
            return len(vals)
        return self._judge(raw, vals, values, quality, errors)

    def _judge(self, raw, vals, values: dict, quality: dict, errors: list[str]) -> int:
        n_ok = 0
        for (key, _st, _off, _perm, _s, _o, _r, lo, hi), x, v in zip(
            self._items, raw, vals, strict=True
        ):
            if not math.isfinite(v):
                errors.append(f"{key}: register value is {x}")
                quality[key] = Quality.DECODE
            elif not lo <= v <= hi:
                errors.append(f"{key}: impossible value {v:g}")
                quality[key] = Quality.DECODE
            else:
                values[key] = v
                quality[key] = Quality.OK
                n_ok += 1
        return n_ok

    def _decode_each(self, buf: bytes, values: dict, quality: dict, errors: list[str]) -> int:
        raw, vals = [], []
        for _key, st, off, perm, scale, offset, r, _lo, _hi in self._items:
            x = (
                st.unpack_from(buf, off)[0]
                if perm is None
                else st.unpack(bytes(buf[i] for i in perm))[0]
            )
            raw.append(x)
            vals.append((x * scale + offset) * r)
        return self._judge(raw, vals, values, quality, errors)


def _status_reads(switches: list[Switch]) -> list[_StatusRead]:
    """Coalesce a PLC's status points per kind into few bit reads."""
    reads: list[_StatusRead] = []
    for kind in ("coil", "discrete"):
        pts = sorted(
            (s.status.address, s.id) for s in switches if s.status and s.status.kind == kind
        )
        group: list[tuple[int, str]] = []
        for addr, sid in pts:
            if group and (addr - group[-1][0] > BIT_GAP or addr - group[0][0] >= MAX_BIT_READ):
                reads.append(_bits_read(kind, group))
                group = []
            group.append((addr, sid))
        if group:
            reads.append(_bits_read(kind, group))
    return reads


def _bits_read(kind: str, group: list[tuple[int, str]]) -> _StatusRead:
    start = group[0][0]
    return _StatusRead(kind, start, group[-1][0] - start + 1, tuple((sid, a) for a, sid in group))


class Poller:
    """Concurrent cycles over every endpoint; see the module docstring for the strategy."""

    def __init__(self, profile: Profile, *, plans: dict[str, MeterPlan] | None = None):
        self.profile = profile
        self.plans = plans if plans is not None else plan_profile(profile)
        self._rng = random.Random()
        self._links: dict[str, EndpointLink] = {}
        self._units: dict[str, _Unit] = {}
        self._plc_units: dict[str, _Unit] = {}
        self._seq = 0
        self._started = False
        self.late_answers = 0  # drafts that arrived after their cycle closed (dropped)
        for m in profile.meters:
            regmap = profile.maps[m.map_id]
            unit = _Unit(
                m.id,
                m.unit_id,
                m.timeout_s,
                m.retries,
                self._backoff(),
                meter=m,
                regmap=regmap,
                plan=self.plans[m.id],
                specs={s.key: s for s in regmap.registers},
            )
            unit.decoders = [RequestDecoder(r, unit.specs, m) for r in unit.plan.requests]
            unit.keys = tuple(k for r in unit.plan.requests for k in r.keys)
            unit.nan_values = dict.fromkeys(unit.keys, math.nan)
            self._attach(m.transport, unit)
            self._units[m.id] = unit
        for p in profile.plcs:
            sw = [s for s in profile.switches if s.plc == p.id and s.status is not None]
            unit = _Unit(
                p.id, p.unit_id, p.timeout_s, 0, self._backoff(), status_reads=_status_reads(sw)
            )
            self._attach(p.transport, unit)
            self._plc_units[p.id] = unit
        tame_pymodbus_logging()

    def _backoff(self) -> Backoff:
        return Backoff(
            self.profile.poll.backoff_initial_s, self.profile.poll.backoff_max_s, self._rng
        )

    def _attach(self, transport: Transport, unit: _Unit) -> None:
        link = self._links.get(transport.endpoint)
        if link is None:
            link = EndpointLink(transport.endpoint, transport, unit.timeout_s, self._backoff())
            self._links[transport.endpoint] = link
        link.timeout_s = max(link.timeout_s, unit.timeout_s)
        link.units.append(unit)
        link.uniform_timeout = len({u.timeout_s for u in link.units}) == 1

    # ------------------------------------------------------------ public API

    @property
    def endpoint_clients(self) -> dict[str, EndpointLink]:
        """Endpoint -> link (client + lock). Use ``link_for(transport)`` to find one."""
        return self._links

    def link_for(self, transport: Transport) -> EndpointLink:
        return self._links[transport.endpoint]

    async def ensure_link(self, transport: Transport) -> EndpointLink:
        """The endpoint's link, dialled now if down (a technician is waiting: no backoff)."""
        link = self._links[transport.endpoint]
        if not link.connected:
            await self._connect(link, time.monotonic())
        return link

    async def read_switch(self, switch_id: str) -> str:
        """One fresh read of a switch's status point: "open", "closed" or "unknown"."""
        sw = self.profile.switch(switch_id)
        if sw.plc is None or sw.status is None:
            return "unknown"
        unit = self._plc_units.get(sw.plc)
        if unit is None:
            return "unknown"
        link = self._links[plc_of(self.profile, sw.plc).transport.endpoint]
        try:
            bits, _ = await self._read(link, unit, sw.status.kind, sw.status.address, 1)
        except (_NoAnswer, _DeviceException, _BadReply, _Disconnected):
            return "unknown"
        return "closed" if bits[0] else "open"

    async def start(self) -> None:
        """Connect every endpoint concurrently; an unreachable one just enters backoff."""
        self._started = True
        now = time.monotonic()
        await asyncio.gather(*(self._connect(link, now) for link in self._links.values()))

    def cycle_budget(self, interval_s: float | None = None) -> float:
        """Seconds the next cycle may wait for answers (see the module docstring)."""
        interval = self.profile.poll.interval_s if interval_s is None else interval_s
        return max([interval, *(self._link_need(link) for link in self._links.values())])

    async def poll_once(self, *, deadline_s: float | None = None) -> Snapshot:
        """One cycle; returns by ``cycle_budget(deadline_s)`` whatever any meter does."""
        if not self._started:
            await self.start()
        t_mono = time.monotonic()
        time_utc = datetime.now(UTC)
        self._seq += 1
        cyc = _Cycle(self._seq, time_utc, t_mono + self.cycle_budget(deadline_s), set(self._links))
        for link in self._links.values():
            link.wanted = cyc
            if link.task is None or link.task.done():
                link.task = asyncio.create_task(self._serve(link), name=f"poll {link.endpoint}")
        if cyc.remaining:
            with contextlib.suppress(TimeoutError):
                async with asyncio.timeout_at(cyc.deadline):
                    await cyc.done.wait()
        cyc.closed = True
        blocks = {}
        bits: dict[tuple[str, str], bool] = {}
        for m in self.profile.meters:
            unit = self._units[m.id]
            blocks[m.id] = self._deliver(
                unit, cyc.drafts.get(m.id) or self._pending(unit, cyc, t_mono), time_utc
            )
        for unit in self._plc_units.values():
            draft = cyc.drafts.get(unit.id)
            if draft is None and unit.status_reads:
                draft = self._pending(unit, cyc, t_mono)
            if draft is not None:
                self._deliver(unit, draft, time_utc)
                bits.update(draft.bits)
        switches = {sw.id: self._switch_state(sw, bits) for sw in self.profile.switches}
        return Snapshot(
            seq=cyc.seq,
            time_utc=time_utc,
            t_mono=t_mono,
            meters=blocks,
            switches=switches,
            cycle_s=time.monotonic() - t_mono,
        )

    async def run(self, interval_s: float | None = None) -> AsyncIterator[Snapshot]:
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
        return {mid: self._status(u) for mid, u in self._units.items()}

    def plc_status(self) -> dict[str, MeterStatus]:
        return {pid: self._status(u) for pid, u in self._plc_units.items()}

    async def close(self) -> None:
        """Stop the workers (an outstanding request is cancelled) and close every client."""
        tasks = [
            link.task
            for link in self._links.values()
            if link.task is not None and not link.task.done()
        ]
        for t in tasks:
            t.cancel()
        for t in tasks:
            with contextlib.suppress(asyncio.CancelledError, Exception):
                await t
        for link in self._links.values():
            link.task = None
            link.wanted = None
            if link.client is not None:
                link.client.close()
                link.client = None
        self._started = False

    # ------------------------------------------------------------ connection

    async def _connect(self, link: EndpointLink, now: float) -> bool:
        if link.client is None:
            # one timeout for every unit: pymodbus enforces it; else ours does and theirs is a backstop
            link.client = _make_client(
                link.transport, link.timeout_s + (0 if link.uniform_timeout else 0.5)
            )
        else:
            link.client.close()
        try:
            async with asyncio.timeout(self._connect_timeout(link)):
                ok = await link.client.connect()
        except (TimeoutError, OSError, ModbusException) as exc:
            ok, link.last_error = False, f"connect failed: {exc or type(exc).__name__}"
        if ok:
            link.backoff.reset()
            link.silent_reads = 0
            link.connects += 1
            link.last_error = ""
            return True
        link.client.close()
        delay = link.backoff.fail(now)
        link.last_error = f"cannot connect to {link.endpoint}; next try in {delay:.1f} s"
        return False

    @staticmethod
    def _connect_timeout(link: EndpointLink) -> float:
        return max(link.timeout_s, 0.1) * 2

    def _drop(self, link: EndpointLink, why: str) -> None:
        """Close a link that went bad; the next cycle after backoff redials it."""
        if link.client is not None:
            link.client.close()
        link.backoff.fail(time.monotonic())
        link.last_error = why

    # ------------------------------------------------------------ one cycle

    def _link_need(self, link: EndpointLink) -> float:
        """How long a cycle should wait for this link: learned healthy time, or the full budget."""
        if not link.learned:
            return self._connect_timeout(link) + sum(
                u.timeout_s * (u.retries + 1) * max(1, u.requests) for u in link.units
            )
        healthy = sum(u.answer_s for u in link.units if u.backoff.failures == 0)
        return DEADLINE_HEADROOM * healthy + DEADLINE_MARGIN_S

    async def _serve(self, link: EndpointLink) -> None:
        """The link's worker: serve the newest wanted cycle until none is open any more."""
        while True:
            cyc, link.wanted = link.wanted, None
            if cyc is None or cyc.closed:
                return
            try:
                await self._poll_link(link, cyc)
            finally:
                link.busy_with = ""
                cyc.link_done(link.endpoint)

    async def _poll_link(self, link: EndpointLink, cyc: _Cycle) -> None:
        now = time.monotonic()
        if not link.connected and link.backoff.ready(now):
            await self._connect(link, now)  # first redial after a drop is immediate
        # healthy units first: a dead one's probe must not hold back its neighbours
        for unit in sorted(link.units, key=lambda u: u.backoff.failures > 0):
            if unit.backoff.failures and cyc.closed and link.wanted is not None:
                break  # no probe for a cycle that can take no answer while a newer one waits
            if unit.meter is None and not unit.status_reads:
                continue  # a PLC with no status points: nothing to read
            link.busy_with = unit.id
            try:
                if unit.meter is not None:
                    draft = await self._poll_meter(link, unit, cyc)
                else:
                    draft = await self._poll_plc(link, unit, cyc)
            except (
                ModbusException,
                OSError,
                ValueError,
                struct.error,
            ) as exc:  # never kill the worker
                log.warning("%s unit %s: %s", link.endpoint, unit.unit_id, exc)
                draft = self._failed(unit, f"{type(exc).__name__}: {exc}")
            if not cyc.publish(unit.id, draft):
                self.late_answers += 1
        link.learned = True

    async def _read(
        self,
        link: EndpointLink,
        unit: _Unit,
        kind: str,
        address: int,
        count: int,
        attempts: int | None = None,
        *,
        limit_s: float | None = None,
        cyc: _Cycle | None = None,
    ):
        """One read with the unit's timeout (or ``limit_s``) and retries -> (values, retried).

        No retry for a cycle that has closed while a newer one waits: its answer could reach
        no snapshot, and the wait would only hold back the unit's neighbours.
        """
        attempts = unit.retries + 1 if attempts is None else attempts
        if limit_s is None and not link.uniform_timeout:
            limit_s = unit.timeout_s  # else the client's own timeout is this unit's
        method = _READ_METHOD[kind]
        tries = 0
        for attempt in range(attempts):
            if attempt and cyc is not None and cyc.closed and link.wanted is not None:
                break
            if not link.connected:
                raise _Disconnected(link.last_error or f"{link.endpoint} not connected")
            client = link.client
            assert client is not None
            fn = getattr(client, method)
            tries += 1
            async with link.lock:
                bad_before = client.ctx.bad_frames
                try:
                    if limit_s is None:
                        rr = await fn(address, count=count, device_id=unit.unit_id)
                    else:
                        async with asyncio.timeout(limit_s):
                            rr = await fn(address, count=count, device_id=unit.unit_id)
                except (TimeoutError, ModbusIOException):
                    if client.ctx.bad_frames != bad_before:
                        raise _BadReply("undecodable reply", costly=True) from None
                    if not link.connected:
                        raise _Disconnected(
                            f"{link.endpoint} closed during the request", during=True
                        ) from None
                    link.silent_reads += 1
                    if link.is_serial:
                        await asyncio.sleep(RTU_QUIET_S)
                    continue
                except ConnectionException as exc:
                    raise _Disconnected(str(exc), during=link.client is client) from exc
            link.silent_reads = 0
            _check_reply(rr, kind, unit.unit_id)
            if rr.isError():
                raise _DeviceException(int(getattr(rr, "exception_code", 0) or 0))
            data = rr.bits[:count] if kind in ("coil", "discrete") else rr.registers
            if len(data) != count:
                raise _BadReply(f"asked for {count} values at {address}, got {len(data)}")
            return data, attempt > 0
        if link.silent_reads >= RECONNECT_AFTER_SILENT * (unit.retries + 1) and all(
            u.backoff.failures > 0 or u is unit for u in link.units
        ):
            self._drop(link, f"no unit on {link.endpoint} answers; reconnecting")
        raise _NoAnswer(f"no answer within {limit_s or unit.timeout_s:g} s x {tries}")

    def _probe_limit(self, link: EndpointLink, unit: _Unit) -> float | None:
        """Timeout of a probe of a unit in backoff (None: its full timeout).

        A probe holds the shared client, so it waits only a few times the slowest learned
        healthy read on the link (the unit's own remembered one included). Not on a serial
        line, where a reply after a timeout is taken for the next request's; and every
        ``FULL_PROBE_EVERY``-th probe waits the full timeout so a slow unit can always return.
        """
        if link.is_serial or unit.backoff.failures % FULL_PROBE_EVERY == 0:
            return None
        slowest = max(
            (u.answer_s / u.requests for u in link.units if u.answer_s > 0 and u.requests),
            default=0.0,
        )
        if slowest <= 0:
            return None  # nothing learned on this link: no basis for a shorter wait
        limit = max(PROBE_FLOOR_S, PROBE_RTT_FACTOR * slowest)
        return limit if limit < unit.timeout_s else None

    async def _poll_meter(
        self, link: EndpointLink, unit: _Unit, cyc: _Cycle | None = None
    ) -> _Draft:
        assert unit.plan is not None and unit.meter is not None
        values = dict(unit.nan_values)
        quality: dict[str, Quality] = {}
        errors: list[str] = []
        exception_code: int | None = None
        retried = no_answer = False
        now = time.monotonic()
        if not link.connected or not unit.backoff.ready(now):
            reason = (
                (link.last_error or f"{link.endpoint} not connected")
                if not link.connected
                else (
                    f"unit {unit.unit_id} silent; next try in {max(0.0, unit.backoff.next_try - now):.1f} s"
                )
            )
            return _Draft(
                values,
                dict.fromkeys(unit.keys, Quality.OFFLINE),
                CommState.OFFLINE,
                reason,
                None,
                math.nan,
            )
        probing = unit.backoff.failures > 0
        attempts = 1 if probing else unit.retries + 1  # a probe: is it back?
        limit_s = self._probe_limit(link, unit) if probing else None
        n_ok = 0
        rest: Quality | None = None  # the quality the unread rest got when we gave up on the unit
        t0 = now
        requests = unit.plan.requests
        for i, req in enumerate(requests):
            try:
                words, r = await self._read(
                    link, unit, req.kind, req.address, req.count, attempts, limit_s=limit_s, cyc=cyc
                )
                retried |= r
                n_ok += unit.decoders[i].decode(words, values, quality, errors)
                continue
            except _NoAnswer as exc:
                no_answer = True
                errors.append(str(exc))
                rest = Quality.TIMEOUT
            except _DeviceException as exc:
                exception_code = exception_code or exc.code
                errors.append(
                    f"exception {exc.code:#04x} reading FC{req.function_code} {req.address}+{req.count}"
                )
                quality.update(dict.fromkeys(req.keys, Quality.EXCEPTION))
                if exc.code not in GATEWAY_NO_TARGET:
                    continue
                no_answer = True  # the gateway could not reach the unit: same as silence
                rest = Quality.TIMEOUT
            except _BadReply as exc:
                errors.append(str(exc))
                quality.update(dict.fromkeys(req.keys, Quality.DECODE))
                if not exc.costly:
                    continue
                no_answer = True
                rest = Quality.DECODE
            except _Disconnected as exc:
                errors.append(str(exc))
                no_answer |= exc.during
                rest = Quality.OFFLINE
            for rq in requests[i:]:  # give up on this unit for the cycle
                for k in rq.keys:
                    quality.setdefault(k, rest)
            break
        latency = time.monotonic() - t0
        if n_ok:
            unit.backoff.reset()
        elif no_answer:
            unit.backoff.fail(time.monotonic())
        if rest not in (Quality.TIMEOUT, Quality.OFFLINE) and not retried:  # every request answered
            unit.answer_s = max(latency, unit.answer_s * ANSWER_DECAY)
        if n_ok == len(unit.keys):
            state = CommState.DEGRADED if retried else CommState.OK
        elif n_ok:
            state = CommState.DEGRADED
        elif all(q is Quality.OFFLINE for q in quality.values()):
            state = CommState.OFFLINE
        else:
            state = CommState.FAILING
        return _Draft(values, quality, state, "; ".join(errors), exception_code, latency)

    async def _poll_plc(self, link: EndpointLink, unit: _Unit, cyc: _Cycle | None = None) -> _Draft:
        out: dict[tuple[str, str], bool] = {}
        now = time.monotonic()
        if not link.connected or not unit.backoff.ready(now):
            return _Draft(
                {}, {}, CommState.OFFLINE, link.last_error or "in backoff", None, math.nan
            )
        errors: list[str] = []
        no_answer = False
        exception_code: int | None = None
        attempts = 1 if unit.backoff.failures else unit.retries + 1
        limit_s = self._probe_limit(link, unit) if unit.backoff.failures else None
        t0 = time.monotonic()
        for rd in unit.status_reads:
            try:
                bits, _ = await self._read(
                    link, unit, rd.kind, rd.address, rd.count, attempts, limit_s=limit_s, cyc=cyc
                )
            except _NoAnswer as exc:
                errors.append(str(exc))
                no_answer = True
                break
            except _DeviceException as exc:
                errors.append(
                    f"exception {exc.code:#04x} reading {rd.kind} {rd.address}+{rd.count}"
                )
                exception_code = exc.code
                continue
            except (_BadReply, _Disconnected) as exc:
                errors.append(str(exc))
                if getattr(exc, "costly", False) or getattr(exc, "during", False):
                    no_answer = True
                    break
                continue
            for sid, addr in rd.switches:
                out[(unit.id, sid)] = bool(bits[addr - rd.address])
        latency = time.monotonic() - t0
        if out:
            unit.backoff.reset()
            if not errors:
                unit.answer_s = max(latency, unit.answer_s * ANSWER_DECAY)
            state = CommState.DEGRADED if errors else CommState.OK
        else:
            if no_answer:
                unit.backoff.fail(time.monotonic())
            state = CommState.FAILING
        return _Draft({}, {}, state, "; ".join(errors), exception_code, latency, bits=out)

    def _failed(self, unit: _Unit, error: str) -> _Draft:
        return _Draft(
            dict(unit.nan_values),
            dict.fromkeys(unit.keys, Quality.DECODE),
            CommState.FAILING,
            error,
            None,
            math.nan,
        )

    def _pending(self, unit: _Unit, cyc: _Cycle, t_mono: float) -> _Draft:
        """A unit with no answer by the cycle deadline: timeout for this cycle, request kept."""
        link = next(lk for lk in self._links.values() if unit in lk.units)
        waiting = link.busy_with
        why = f"no answer by the cycle deadline ({(cyc.deadline - t_mono) * 1000:.0f} ms)" + (
            f"; {link.endpoint} busy with {waiting}" if waiting and waiting != unit.id else ""
        )
        return _Draft(
            dict(unit.nan_values),
            dict.fromkeys(unit.keys, Quality.TIMEOUT),
            CommState.FAILING,
            why,
            None,
            math.nan,
        )

    def _deliver(self, unit: _Unit, d: _Draft, time_utc: datetime) -> MeterBlock:
        """Record a draft as this cycle's result for the unit (status, counters) -> block."""
        unit.state = d.state
        unit.latency_s = d.latency_s
        if d.state in (CommState.OK, CommState.DEGRADED):
            unit.last_good_utc = time_utc
        if d.state in (CommState.FAILING, CommState.OFFLINE):
            unit.error_count += 1
        else:
            unit.error_count = 0
        unit.last_error = d.error
        unit.exception_code = d.exception_code
        return MeterBlock(
            meter=unit.id,
            values=d.values,
            quality=d.quality,
            state=d.state,
            exception_code=d.exception_code,
            error=d.error,
            last_good_utc=unit.last_good_utc,
            error_count=unit.error_count,
            latency_s=d.latency_s,
        )

    def _switch_state(self, sw: Switch, bits: dict[tuple[str, str], bool]) -> str:
        if sw.plc is None or sw.status is None:
            return "unknown"
        closed = bits.get((sw.plc, sw.id))
        return "unknown" if closed is None else ("closed" if closed else "open")

    @staticmethod
    def _status(u: _Unit) -> MeterStatus:
        return MeterStatus(
            u.state, u.last_good_utc, u.error_count, u.last_error, u.exception_code, u.latency_s
        )


def _check_reply(rr, kind: str, unit_id: int) -> None:
    """Refuse a reply that is not the answer to this request (function code, unit id)."""
    fc = _FC_FOR_KIND[kind]
    got = int(getattr(rr, "function_code", 0) or 0)
    if got not in (fc, fc | 0x80):
        raise _BadReply(f"reply has function code {got}, asked with {fc}")
    dev = getattr(rr, "dev_id", unit_id)
    if dev not in (unit_id, 0) and unit_id != 0:
        raise _BadReply(f"reply from unit {dev}, asked unit {unit_id}")


def plc_of(profile: Profile, plc_id: str) -> Plc:
    for p in profile.plcs:
        if p.id == plc_id:
            return p
    raise KeyError(plc_id)
