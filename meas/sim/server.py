"""Modbus servers of the simulated bench, built on pymodbus 3.16's ``SimDevice`` data model.

One pymodbus server per TCP port (several unit ids on one port make a gateway), one per
serial line for RTU. Communication faults are emulated without blocking the server (a slow
server action would send late replies with the wrong transaction id, see
/work/shared/PYMODBUS_NOTES.md): ``offline`` and ``exception`` through the device action,
``slow`` through a small MBAP-aware TCP front that delays the replies of slow units.
Servers always bind 127.0.0.1 unless the caller names another host.
"""

from __future__ import annotations

import asyncio
import contextlib
import dataclasses
import ipaddress
import logging
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from datetime import UTC, datetime

from pymodbus.constants import ExcCodes
from pymodbus.exceptions import NoSuchIdException
from pymodbus.framer import FramerType
from pymodbus.pdu.device import ModbusDeviceIdentification
from pymodbus.server import ModbusSerialServer, ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

from ..errors import BenchwalkError
from ..modbus.codec import encode_text
from ..model import RegisterMap

READ_FC = frozenset({1, 2, 3, 4})
WRITE_FC = frozenset({5, 6, 15, 16})
# every function code that changes a device (Modbus Application Protocol V1.1b3, 6): the four
# above, mask write register (22) and read/write multiple registers (23)
ANY_WRITE_FC = WRITE_FC | {22, 23}
COIL_WRITE_FC = frozenset({5, 15})
FC_HOLDING, FC_INPUT, FC_COIL, FC_DISCRETE = 3, 4, 1, 2

log = logging.getLogger(__name__)

# what every simulated unit answers to read device identification (function 43 / 14); pymodbus
# keeps one identity per process, so the meters and the PLC all give these invented names
SIM_IDENTITY = ModbusDeviceIdentification(
    info_name={
        "VendorName": "benchwalk simulated bench",
        "ProductCode": "BW-SIM",
        "MajorMinorRevision": "1.0",
        "ProductName": "simulated meter or PLC",
    }
)


def exposure_warning(host: str) -> str | None:
    """The warning for a bind address other than loopback (None for loopback).

    The simulated bench's servers accept writes to their command coils from anyone who
    reaches them; loopback keeps them on this machine.
    """
    try:
        if ipaddress.ip_address(host).is_loopback:
            return None
    except ValueError:
        if host == "localhost":
            return None
    return (
        f"WARNING: the simulated bench listens on {host}, not loopback only: anyone on the "
        "network can read it and write its command coils. Use this only on an isolated "
        "network; omit --host to keep it on 127.0.0.1."
    )


@dataclass
class UnitGate:
    """Per-unit communication faults, consulted on every request (mutable at run time)."""

    offline: bool = False
    exception_code: int | None = None
    delay_s: float = 0.0
    requests: int = 0  # client requests seen (not counting the bench's own updates)


def _gate_answer(gate: UnitGate, unit_id: int) -> ExcCodes | None:
    """Count a client request and apply the unit's comm faults: no reply, or an exception."""
    gate.requests += 1
    if gate.offline:
        raise NoSuchIdException(f"unit {unit_id} offline")  # with ignore_missing_devices: no reply
    return ExcCodes(gate.exception_code) if gate.exception_code else None


def _reg_block(addresses: Iterable[tuple[int, int]]) -> list[SimData]:
    """One contiguous block of registers (value 0) spanning all (start, end) ranges.

    Gaps inside the span are valid registers, as on most meters, so a poll plan that
    bridges a small gap reads zeros instead of an exception.
    """
    spans = list(addresses)
    if not spans:
        return [SimData(address=0, count=1, datatype=DataType.INVALID)]
    lo = min(a for a, _ in spans)
    hi = max(b for _, b in spans)
    return [SimData(address=lo, count=hi - lo, values=0, datatype=DataType.REGISTERS)]


def _bit_block(addresses: Iterable[int]) -> list[SimData]:
    addrs = sorted(set(addresses))
    if not addrs:
        return [SimData(address=0, count=1, values=False, datatype=DataType.BITS)]
    return [SimData(address=0, count=addrs[-1] + 1, values=False, datatype=DataType.BITS)]


def simulated_identification(rmap: RegisterMap, unit_id: int) -> dict[str, str]:
    """The invented identification strings a simulated meter holds (serial from map and unit)."""
    out: dict[str, str] = {}
    for spec in rmap.text:
        text = (
            f"SIM-{rmap.id.split('-')[0].upper()}-{unit_id:03d}" if spec.key == "serial" else "1.0"
        )
        out[spec.key] = text[: 2 * spec.count]
    return out


def _with_text(block: list[SimData], rmap: RegisterMap, kind: str, unit_id: int) -> list[SimData]:
    """The register block with the map's text registers of ``kind`` filled in."""
    texts = [t for t in rmap.text if t.kind == kind]
    if not texts:
        return block
    lo, n = block[0].address, block[0].count
    words = [0] * n
    ident = simulated_identification(rmap, unit_id)
    for t in texts:
        words[t.address - lo : t.end - lo] = encode_text(t, ident[t.key])
    return [SimData(address=lo, values=words, datatype=DataType.REGISTERS)]


def meter_device(unit_id: int, rmap: RegisterMap, gate: UnitGate) -> SimDevice:
    """A read-only meter: the map's holding and input registers (with its identification
    strings), no coils."""

    async def action(fc, _start, _address, _count, _regs, set_values):
        if set_values is not None and fc in READ_FC:
            return None  # the bench's own register update, not a client request
        if (refused := _gate_answer(gate, unit_id)) is not None:
            return refused
        if fc in (FC_COIL, FC_DISCRETE) or fc in WRITE_FC:
            return ExcCodes.ILLEGAL_ADDRESS  # measurement registers are read-only
        return None

    spans = [(r.address, r.end, r.kind) for r in rmap.registers]
    spans += [(t.address, t.end, t.kind) for t in rmap.text]
    holding = _reg_block((a, e) for a, e, k in spans if k == "holding")
    inputs = _reg_block((a, e) for a, e, k in spans if k == "input")
    return SimDevice(
        id=unit_id,
        simdata=(
            _bit_block([]),
            _bit_block([]),
            _with_text(holding, rmap, "holding", unit_id),
            _with_text(inputs, rmap, "input", unit_id),
        ),
        action=action,
    )


def plc_device(
    unit_id: int,
    coils: Iterable[int],
    discretes: Iterable[int],
    on_coil_write: Callable[[int, bool], bool],
    gate: UnitGate | None = None,
) -> SimDevice:
    """The PLC: coils (commands, coil status points) and discrete inputs (status points).

    ``on_coil_write(address, value)`` returns False for a coil no switch is commanded by;
    such a write is refused with exception 2 and changes nothing. ``gate`` injects the same
    comm faults as a meter's (offline, exception); an offline PLC executes no command.
    """
    gate = gate if gate is not None else UnitGate()

    async def action(fc, _start, address, _count, _regs, set_values):
        if set_values is not None and fc in READ_FC:
            return None  # the bench's own update
        if (refused := _gate_answer(gate, unit_id)) is not None:
            return refused
        if fc in (FC_HOLDING, FC_INPUT, 6, 16):
            return ExcCodes.ILLEGAL_ADDRESS
        if fc in COIL_WRITE_FC and set_values is not None:
            values = list(set_values)
            for n, v in enumerate(values):
                if not on_coil_write(address + n, bool(v)):
                    return ExcCodes.ILLEGAL_ADDRESS
        return None

    return SimDevice(
        id=unit_id,
        simdata=(_bit_block(coils), _bit_block(discretes), _reg_block([]), _reg_block([])),
        action=action,
    )


class DelayFront:
    """A TCP front for one port that relays MBAP frames to the pymodbus server behind it.

    Replies of units whose gate has ``delay_s`` go out that much later (each on its own
    task, so the server and other units are never held up); offline units get no reply.
    Requests reach the back end one at a time (pymodbus answers only the first of pipelined
    requests in one segment).
    """

    def __init__(self, host: str, port: int, backend: tuple[str, int], gates: dict[int, UnitGate]):
        self.host, self.port, self.backend, self.gates = host, port, backend, gates
        self._server: asyncio.Server | None = None
        self._tasks: set[asyncio.Task] = set()

    async def start(self) -> int:
        try:
            self._server = await asyncio.start_server(self._client, self.host, self.port)
        except OSError as exc:
            raise BenchwalkError(
                f"cannot listen on {self.host}:{self.port}: {exc.strerror}; free the port or use --free-ports"
            ) from None
        self.port = self._server.sockets[0].getsockname()[1]
        return self.port

    @property
    def server(self) -> asyncio.Server | None:
        return self._server

    async def stop(self) -> None:
        if self._server:
            self._server.close()
            for t in list(self._tasks):
                t.cancel()
            with contextlib.suppress(Exception):
                await asyncio.wait_for(self._server.wait_closed(), 2.0)

    @staticmethod
    async def _frame(reader: asyncio.StreamReader) -> bytes:
        head = await reader.readexactly(7)
        length = int.from_bytes(head[4:6], "big")
        return head + await reader.readexactly(max(length - 1, 0))

    async def _send_later(self, writer: asyncio.StreamWriter, data: bytes, delay: float) -> None:
        await asyncio.sleep(delay)
        if not writer.is_closing():
            writer.write(data)
            with contextlib.suppress(ConnectionError):
                await writer.drain()

    async def _client(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        task = asyncio.current_task()
        if task:
            self._tasks.add(task)
        b_reader = b_writer = None
        try:
            b_reader, b_writer = await asyncio.open_connection(*self.backend)
            while True:
                req = await self._frame(reader)
                gate = self.gates.get(req[6], UnitGate())
                if gate.offline:
                    gate.requests += 1
                    continue
                b_writer.write(req)
                await b_writer.drain()
                reply = await asyncio.wait_for(self._frame(b_reader), 5.0)
                if gate.delay_s > 0:
                    t = asyncio.create_task(self._send_later(writer, reply, gate.delay_s))
                    self._tasks.add(t)
                    t.add_done_callback(self._tasks.discard)
                else:
                    writer.write(reply)
                    await writer.drain()
        except (asyncio.IncompleteReadError, ConnectionError, TimeoutError, asyncio.CancelledError):
            pass
        finally:
            for w in (writer, b_writer):
                if w is not None:
                    w.close()
            if task:
                self._tasks.discard(task)


@dataclass(frozen=True)
class SeenWrite:
    """One write request as a simulated server received it, before any device saw it."""

    time_utc: str
    port: int | str  # TCP port, or serial device path
    unit: int
    function_code: int
    address: int
    values: tuple[int, ...]


OnWrite = Callable[[SeenWrite], None]


def _write_tracer(where: int | str, on_write: OnWrite | None):
    """A pymodbus ``trace_pdu`` that reports every received write request, then passes it on."""
    if on_write is None:
        return None

    def trace(sending: bool, pdu):
        if not sending and pdu.function_code in ANY_WRITE_FC:
            values = tuple(int(v) for v in (pdu.bits or pdu.registers or ()))
            on_write(
                SeenWrite(
                    datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ"),
                    where,
                    pdu.dev_id,
                    pdu.function_code,
                    int(getattr(pdu, "address", 0) or 0),
                    values,
                )
            )
        return pdu

    return trace


async def start_tcp(
    devices: list[SimDevice], host: str, port: int, on_write: OnWrite | None = None
) -> tuple[ModbusTcpServer, int]:
    """Serve the devices on host:port (0 = any free port); returns the server and its port.

    ``on_write`` hears of every write request the server receives (FC 5, 6, 15, 16, 22, 23),
    whether or not a device accepts it.
    """
    holder: dict[str, int] = {}
    tracer = _write_tracer(
        0,
        None
        if on_write is None
        else lambda w: on_write(dataclasses.replace(w, port=holder.get("port", port))),
    )
    server = ModbusTcpServer(
        devices,
        address=(host, port),
        ignore_missing_devices=True,
        trace_pdu=tracer,
        identity=SIM_IDENTITY,
    )
    try:
        await server.serve_forever(background=True)
    except RuntimeError:
        raise BenchwalkError(
            f"cannot listen on {host}:{port} (in use or not a local address); free the port or use --free-ports"
        ) from None
    sockets = getattr(server.transport, "sockets", None) or ()
    bound = int(sockets[0].getsockname()[1]) if sockets else port
    holder["port"] = bound
    return server, bound


async def start_rtu(
    devices: list[SimDevice],
    device: str,
    baudrate: int = 19200,
    parity: str = "N",
    stopbits: int = 1,
    bytesize: int = 8,
    on_write: OnWrite | None = None,
) -> ModbusSerialServer:
    """Serve the devices as RTU slaves on a serial port path (a real port or a pty)."""
    server = ModbusSerialServer(
        devices,
        identity=SIM_IDENTITY,
        framer=FramerType.RTU,
        port=device,
        baudrate=baudrate,
        parity=parity,
        stopbits=stopbits,
        bytesize=bytesize,
        ignore_missing_devices=True,
        trace_pdu=_write_tracer(device, on_write),
    )
    try:
        await server.serve_forever(background=True)
    except RuntimeError:
        raise BenchwalkError(
            f"cannot open serial port {device}; check the path and permissions"
        ) from None
    return server


async def stop_server(server) -> None:
    with contextlib.suppress(Exception):
        await asyncio.wait_for(server.shutdown(), 3.0)
