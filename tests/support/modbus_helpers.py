"""Real Modbus test servers on loopback and small builders for ``meas.model`` profiles.

Reusable by any test that needs a meter or a PLC to talk to: ``MeterServer`` is a pymodbus
TCP server (``pymodbus.simulator`` data model, the only one whose updates take effect in
3.16) with one SimDevice per unit id; it records every write a client makes, can silence
individual unit ids, and can be stopped and restarted on the same port. ``SilentServer``
accepts connections and never answers. ``PtyLink`` joins two pseudo-terminals so a pymodbus
serial server and an RTU client talk over a real tty without hardware.
"""

from __future__ import annotations

import asyncio
import contextlib
import os
import socket
import time
import tty
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field

from pymodbus.server import ModbusSerialServer, ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

from meas.modbus.codec import encode
from meas.model import (
    Bench,
    Control,
    Meter,
    Plc,
    PollSettings,
    Profile,
    RtuTransport,
    StatusPoint,
    Switch,
    TcpTransport,
    Transport,
    Zone,
)
from meas.register_map import RegisterMap, RegisterSpec

LOOPBACK = "127.0.0.1"
WRITE_FUNCTION_CODES = {5, 6, 15, 16}
_FC_FOR_KIND = {"coil": 1, "discrete": 2, "holding": 3, "input": 4}  # server-side set codes


def free_port() -> int:
    """A TCP port the OS just handed out on loopback (for servers that must restart on it)."""
    with socket.socket() as s:
        s.bind((LOOPBACK, 0))
        return s.getsockname()[1]


async def wait_until(
    predicate: Callable[[], bool], timeout: float = 5.0, step: float = 0.01
) -> float:
    """Poll ``predicate`` until true; return the seconds it took. Fails the test on deadline."""
    t0 = time.monotonic()
    while not predicate():
        if time.monotonic() - t0 > timeout:
            raise AssertionError(f"condition not met within {timeout} s")
        await asyncio.sleep(step)
    return time.monotonic() - t0


# ---------------------------------------------------------------- profile builders


def spec(key: str, address: int, dtype: str = "float32", kind: str = "input", **kw) -> RegisterSpec:
    return RegisterSpec(key=key, kind=kind, address=address, dtype=dtype, **kw)  # type: ignore[arg-type]


def make_map(map_id: str, specs: Iterable[RegisterSpec], max_read: int = 125) -> RegisterMap:
    return RegisterMap(id=map_id, registers=tuple(specs), max_read=max_read)


def float_map(
    map_id: str = "f32",
    keys: Iterable[str] = ("v_ln.A", "i.A", "p.T", "q.T", "pf.T", "f.T"),
    start: int = 0,
    kind: str = "input",
    **kw,
) -> RegisterMap:
    """Consecutive float32 registers, two words each, from ``start``."""
    return make_map(
        map_id, [spec(k, start + 2 * n, "float32", kind, **kw) for n, k in enumerate(keys)]
    )


def tcp_meter(meter_id: str, port: int, unit_id: int = 1, map_id: str = "f32", **kw) -> Meter:
    kw.setdefault("timeout_s", 0.3)
    kw.setdefault("retries", 0)
    return Meter(
        id=meter_id,
        label=meter_id,
        transport=TcpTransport(LOOPBACK, port),
        unit_id=unit_id,
        map_id=map_id,
        bus="B1",
        branch="L1",
        **kw,
    )


def make_profile(
    maps: Iterable[RegisterMap],
    meters: Iterable[Meter],
    *,
    plcs: Iterable[Plc] = (),
    switches: Iterable[Switch] = (),
    control: Control | None = None,
    poll: PollSettings | None = None,
) -> Profile:
    """A minimal but complete Profile around the given maps and meters (test use only)."""
    bench = Bench(
        name="test bench",
        frequency_hz=50.0,
        power_scale=1.0,
        s_base_va=30000.0,
        zones=(Zone("z", 400.0, 400.0),),
    )
    return Profile(
        path="<test>",
        sha256="",
        bench=bench,
        maps={m.id: m for m in maps},
        meters=tuple(meters),
        buses=(),
        branches=(),
        switches=tuple(switches),
        plcs=tuple(plcs),
        control=control or Control(),
        poll=poll or PollSettings(backoff_initial_s=0.2, backoff_max_s=1.0),
    )


def plc(plc_id: str, port: int, unit_id: int = 1, timeout_s: float = 0.3) -> Plc:
    return Plc(
        id=plc_id, transport=TcpTransport(LOOPBACK, port), unit_id=unit_id, timeout_s=timeout_s
    )


def switch(
    switch_id: str,
    plc_id: str | None,
    status: int | None,
    *,
    command_coil: int | None = None,
    operation: str = "manual",
    kind: str = "discrete",
) -> Switch:
    return Switch(
        id=switch_id,
        branch="L1",
        operation=operation,
        plc=plc_id,  # type: ignore[arg-type]
        command_coil=command_coil,
        status=None if status is None else StatusPoint(kind, status),
    )  # type: ignore[arg-type]


def encoded(regmap: RegisterMap, values: dict[str, float]) -> list[tuple[str, int, list[int]]]:
    """(kind, address, words) a meter of this map holds for these engineering values."""
    return [
        (s.kind, s.address, encode(s, values[s.key])) for s in regmap.registers if s.key in values
    ]


# ---------------------------------------------------------------- servers


def _blocks(
    registers: int, bits: int
) -> tuple[list[SimData], list[SimData], list[SimData], list[SimData]]:
    return (
        [SimData(0, count=bits, values=False, datatype=DataType.BITS)],
        [SimData(0, count=bits, values=False, datatype=DataType.BITS)],
        [SimData(0, count=registers, values=0, datatype=DataType.REGISTERS)],
        [SimData(0, count=registers, values=0, datatype=DataType.REGISTERS)],
    )


@dataclass
class Write:
    unit: int
    function_code: int
    address: int
    values: list


@dataclass
class MeterServer:
    """pymodbus TCP server on loopback with one device per unit id (registers 0..registers-1).

    ``writes`` records every client write (FC 5/6/15/16) before it is applied; ``silent``
    holds unit ids whose replies are dropped (a dead meter behind a gateway). ``follow``
    maps a command coil to a status discrete input that takes the written value after
    ``follow_delay_s`` (a PLC whose breaker operates).
    """

    units: tuple[int, ...] = (1,)
    port: int = 0
    registers: int = 1200
    bits: int = 32
    silent: set[int] = field(default_factory=set)
    follow: dict[int, int] = field(default_factory=dict)
    follow_delay_s: float = 0.05
    writes: list[Write] = field(default_factory=list)
    server: ModbusTcpServer | None = None
    _state: dict[tuple[int, int, int], list] = field(
        default_factory=dict
    )  # (unit, fc, addr) -> values

    def _action(self, unit: int):
        async def action(fc, _start, address, _count, _regs, values):
            if values is not None and fc in WRITE_FUNCTION_CODES:
                self.writes.append(Write(unit, fc, address, list(values)))
                if fc == 5 and address in self.follow:
                    status = self.follow[address]
                    value = bool(values[0])
                    asyncio.get_running_loop().call_later(
                        self.follow_delay_s,
                        lambda: asyncio.ensure_future(
                            self.set_bits(unit, "discrete", status, [value])
                        ),
                    )
            return None

        return action

    def _trace(self, sending: bool, data: bytes) -> bytes:
        # MBAP header: transaction (2), protocol (2), length (2), unit id (1)
        if sending and len(data) > 6 and data[6] in self.silent:
            return b""
        return data

    async def start(self) -> MeterServer:
        devices = [
            SimDevice(u, simdata=_blocks(self.registers, self.bits), action=self._action(u))
            for u in self.units
        ]
        self.server = ModbusTcpServer(
            devices, address=(LOOPBACK, self.port), trace_packet=self._trace
        )
        await self.server.serve_forever(background=True)
        self.port = self.server.transport.sockets[0].getsockname()[1]
        for (unit, fc, address), values in self._state.items():  # a restart keeps the data
            await self.server.async_setValues(unit, fc, address, values)
        return self

    async def stop(self) -> None:
        if self.server is not None:
            await self.server.shutdown()
            self.server = None

    async def set_words(self, unit: int, kind: str, address: int, words: list[int]) -> None:
        fc = _FC_FOR_KIND[kind]
        self._state[(unit, fc, address)] = list(words)
        assert self.server is not None
        await self.server.async_setValues(unit, fc, address, list(words))

    async def set_bits(self, unit: int, kind: str, address: int, bits: list[bool]) -> None:
        await self.set_words(unit, kind, address, list(bits))

    async def load(self, unit: int, regmap: RegisterMap, values: dict[str, float]) -> None:
        """Hold these engineering values the way a meter of ``regmap`` encodes them."""
        for kind, address, words in encoded(regmap, values):
            await self.set_words(unit, kind, address, words)

    async def get_bits(self, unit: int, kind: str, address: int, count: int = 1) -> list[bool]:
        assert self.server is not None
        return list(await self.server.async_getValues(unit, _FC_FOR_KIND[kind], address, count))

    async def __aenter__(self) -> MeterServer:
        return await self.start()

    async def __aexit__(self, *exc) -> None:
        await self.stop()


class SilentServer:
    """Accepts TCP connections on loopback, reads whatever comes, never answers."""

    def __init__(self) -> None:
        self.port = 0
        self._server: asyncio.AbstractServer | None = None
        self._writers: list[asyncio.StreamWriter] = []

    async def _handle(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        self._writers.append(writer)
        with contextlib.suppress(Exception):
            while await reader.read(1024):
                pass

    async def __aenter__(self) -> SilentServer:
        self._server = await asyncio.start_server(self._handle, LOOPBACK, 0)
        self.port = self._server.sockets[0].getsockname()[1]
        return self

    async def __aexit__(self, *exc) -> None:
        for w in self._writers:
            w.close()
        assert self._server is not None
        self._server.close()
        with contextlib.suppress(Exception):
            await asyncio.wait_for(self._server.wait_closed(), 1.0)


class PtyLink:
    """Two pseudo-terminal pairs joined by a byte relay: ``client_path`` <-> ``server_path``.

    A pty ignores baud rate, so the relay is a wire with no transmission time.
    """

    def __init__(self) -> None:
        self._ma, self._sa = os.openpty()
        self._mb, self._sb = os.openpty()
        for fd in (self._sa, self._sb):
            tty.setraw(fd)
        for fd in (self._ma, self._mb):
            os.set_blocking(fd, False)
        self.client_path = os.ttyname(self._sa)
        self.server_path = os.ttyname(self._sb)
        self.bytes_relayed = 0

    def _pump(self, src: int, dst: int) -> None:
        try:
            data = os.read(src, 4096)
        except (BlockingIOError, OSError):
            return
        self.bytes_relayed += len(data)
        with contextlib.suppress(OSError):
            os.write(dst, data)

    def start(self) -> PtyLink:
        loop = asyncio.get_running_loop()
        loop.add_reader(self._ma, self._pump, self._ma, self._mb)
        loop.add_reader(self._mb, self._pump, self._mb, self._ma)
        return self

    def close(self) -> None:
        loop = asyncio.get_running_loop()
        for fd in (self._ma, self._mb):
            loop.remove_reader(fd)
        for fd in (self._ma, self._mb, self._sa, self._sb):
            with contextlib.suppress(OSError):
                os.close(fd)


async def rtu_server(
    path: str, units: tuple[int, ...] = (1,), registers: int = 200
) -> ModbusSerialServer:
    """A pymodbus RTU server on a tty path, serving ``units`` (data set via ``async_setValues``)."""
    devices = [SimDevice(u, simdata=_blocks(registers, 16)) for u in units]
    # 8N1: this kernel's pty drops PARENB and then rejects pyserial's reconfigure (EINVAL)
    server = ModbusSerialServer(
        devices, port=path, baudrate=19200, parity="N", stopbits=1, reconnect_delay=0
    )
    await server.serve_forever(background=True)
    return server


def rtu_meter(meter_id: str, path: str, unit_id: int = 1, map_id: str = "f32", **kw) -> Meter:
    kw.setdefault("timeout_s", 0.5)
    kw.setdefault("retries", 0)
    transport: Transport = RtuTransport(device=path, baudrate=19200, parity="N", stopbits=1)
    return Meter(
        id=meter_id,
        label=meter_id,
        transport=transport,
        unit_id=unit_id,
        map_id=map_id,
        bus="B1",
        branch="L1",
        **kw,
    )
