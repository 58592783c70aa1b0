"""One Modbus endpoint (TCP host:port or serial device): its client, connection and reads.

One pymodbus client per endpoint, because a client carries one request at a time and real
gateways accept few connections; the lock serialises the poller's reads and a switch command.
Connection handling is ours alone (pymodbus ``reconnect_delay=0`` and ``retries=0``): capped
exponential backoff with jitter around ``connect()``, and our own retries around each read, so
that a caller can stop retrying a read whose answer nobody will use. A read either returns the
values or raises one ``ReadFailed`` subclass that says how it failed.
"""

from __future__ import annotations

import asyncio
import random
import time
from collections.abc import Awaitable, Callable, Sequence
from dataclasses import dataclass, field
from typing import Literal, Protocol

from pymodbus.client import AsyncModbusSerialClient, AsyncModbusTcpClient, ModbusBaseClient
from pymodbus.exceptions import ConnectionException, ModbusException, ModbusIOException
from pymodbus.pdu import ModbusPDU

from ..model import RtuTransport, Transport
from .hardening import BadFrames, harden

RTU_QUIET_S = 0.05  # after an RTU timeout: let a late reply drain before the next request

ReadKind = Literal["holding", "input", "coil", "discrete"]
_FC_FOR_KIND: dict[ReadKind, int] = {"coil": 1, "discrete": 2, "holding": 3, "input": 4}


class _ReadMethod(Protocol):
    """An unbound pymodbus read method: (client, address, count=, device_id=) -> reply."""

    def __call__(
        self, client: ModbusBaseClient, address: int, /, *, count: int = ..., device_id: int = ...
    ) -> Awaitable[ModbusPDU]: ...


_READ: dict[ReadKind, _ReadMethod] = {
    "holding": ModbusBaseClient.read_holding_registers,
    "input": ModbusBaseClient.read_input_registers,
    "coil": ModbusBaseClient.read_coils,
    "discrete": ModbusBaseClient.read_discrete_inputs,
}


def backoff_delay(failures: int, initial_s: float, max_s: float, rng: random.Random) -> float:
    """Delay before the next try after ``failures`` (>= 1) failed ones: doubling, capped, +-20 %.

    The exponent stops growing once the cap is reached (2**63 x any positive start is past
    any cap), so a unit that fails for days never overflows a float.
    """
    base = min(max_s, initial_s * 2.0 ** min(63, max(0, failures - 1)))
    return min(max_s, base * rng.uniform(0.8, 1.2))


@dataclass
class Backoff:
    """When the next try of a link or a unit may go out (monotonic time)."""

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


class ReadFailed(Exception):
    """A read that produced no values."""


class Disconnected(ReadFailed):
    def __init__(self, why: str, during: bool = False):
        super().__init__(why)
        self.during = during  # the link died under this unit's request: blame the unit


class NoAnswer(ReadFailed):
    """Every attempt timed out."""


class BadReply(ReadFailed):
    def __init__(self, why: str, costly: bool = False):
        super().__init__(why)
        self.costly = costly  # it cost a timeout: back the unit off like a silent one


class DeviceException(ReadFailed):
    def __init__(self, code: int):
        super().__init__(code)
        self.code = code


def make_client(transport: Transport, timeout_s: float) -> ModbusBaseClient:
    """A pymodbus client with its own reconnect and retries off (we do both); harden it next."""
    client: ModbusBaseClient
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
    return client


def check_reply(rr: ModbusPDU, kind: ReadKind, unit_id: int) -> None:
    """Refuse a reply that is not the answer to this request (function code, unit id)."""
    fc = _FC_FOR_KIND[kind]
    got = rr.function_code
    if got not in (fc, fc | 0x80):
        raise BadReply(f"reply has function code {got}, asked with {fc}")
    dev = rr.dev_id
    if dev not in (unit_id, 0) and unit_id != 0:
        raise BadReply(f"reply from unit {dev}, asked unit {unit_id}")


@dataclass
class EndpointLink:
    """One client, its lock and its connection backoff; switch control reuses it for writes."""

    endpoint: str
    transport: Transport
    timeout_s: float  # the longest timeout of the units behind the endpoint
    backoff: Backoff
    client: ModbusBaseClient | None = None
    lock: asyncio.Lock = field(default_factory=asyncio.Lock)
    last_error: str = ""
    silent_reads: int = 0
    uniform_timeout: bool = True  # every unit has the same timeout: pymodbus can enforce it
    connects: int = 0  # successful connects, for tests and diagnostics
    bad_frames: BadFrames = field(default_factory=BadFrames)  # of the current client

    @property
    def connected(self) -> bool:
        return self.client is not None and self.client.connected

    @property
    def is_serial(self) -> bool:
        return isinstance(self.transport, RtuTransport)

    @property
    def connect_timeout_s(self) -> float:
        return max(self.timeout_s, 0.1) * 2

    async def connect(self, now: float) -> bool:
        """Dial (or redial) the endpoint once; a failure enters the link's backoff."""
        if self.client is None:
            # one timeout for every unit: pymodbus enforces it; else ours does and theirs is a backstop
            self.client = make_client(
                self.transport, self.timeout_s + (0 if self.uniform_timeout else 0.5)
            )
            self.bad_frames = harden(self.client)
        else:
            self.client.close()
        try:
            async with asyncio.timeout(self.connect_timeout_s):
                ok = await self.client.connect()
        except (TimeoutError, OSError, ModbusException) as exc:
            ok, self.last_error = False, f"connect failed: {exc or type(exc).__name__}"
        if ok:
            self.backoff.reset()
            self.silent_reads = 0
            self.connects += 1
            self.last_error = ""
            return True
        self.client.close()
        delay = self.backoff.fail(now)
        self.last_error = f"cannot connect to {self.endpoint}; next try in {delay:.1f} s"
        return False

    def drop(self, why: str) -> None:
        """Close a link that went bad; the next cycle after backoff redials it."""
        if self.client is not None:
            self.client.close()
        self.backoff.fail(time.monotonic())
        self.last_error = why

    def close(self) -> None:
        if self.client is not None:
            self.client.close()
            self.client = None

    async def read(
        self,
        kind: ReadKind,
        address: int,
        count: int,
        unit_id: int,
        timeout_s: float,
        attempts: int,
        limit_s: float | None = None,
        stop_retrying: Callable[[], bool] | None = None,
    ) -> tuple[Sequence[int], bool]:
        """One read with the unit's timeout (or ``limit_s``) and retries -> (values, retried).

        ``stop_retrying`` is asked before each retry (never before the first attempt): true
        when the answer could reach no one any more.
        """
        if limit_s is None and not self.uniform_timeout:
            limit_s = timeout_s  # else the client's own timeout is this unit's
        fn = _READ[kind]
        tries = 0
        for attempt in range(attempts):
            if attempt and stop_retrying is not None and stop_retrying():
                break
            if not self.connected:
                raise Disconnected(self.last_error or f"{self.endpoint} not connected")
            client = self.client
            bad = self.bad_frames
            assert client is not None
            tries += 1
            async with self.lock:
                bad_before = bad.count
                try:
                    if limit_s is None:
                        rr = await fn(client, address, count=count, device_id=unit_id)
                    else:
                        async with asyncio.timeout(limit_s):
                            rr = await fn(client, address, count=count, device_id=unit_id)
                except (TimeoutError, ModbusIOException):
                    if bad.count != bad_before:
                        raise BadReply("undecodable reply", costly=True) from None
                    if not self.connected:
                        raise Disconnected(
                            f"{self.endpoint} closed during the request", during=True
                        ) from None
                    self.silent_reads += 1
                    if self.is_serial:
                        await asyncio.sleep(RTU_QUIET_S)
                    continue
                except ConnectionException as exc:
                    raise Disconnected(str(exc), during=self.client is client) from exc
            self.silent_reads = 0
            check_reply(rr, kind, unit_id)
            if rr.isError():
                raise DeviceException(rr.exception_code)
            data = rr.bits[:count] if kind in ("coil", "discrete") else rr.registers
            if len(data) != count:
                raise BadReply(f"asked for {count} values at {address}, got {len(data)}")
            return data, attempt > 0
        raise NoAnswer(f"no answer within {limit_s or timeout_s:g} s x {tries}")
