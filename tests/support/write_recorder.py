"""A recording front for any Modbus TCP server: every request a client sends is logged from the wire.

``WriteRecorder(backend)`` listens on 127.0.0.1 (a port from the OS) and relays bytes both ways,
unchanged, to the real server behind it. It parses the client's byte stream as MBAP frames
(Modbus Messaging on TCP/IP Implementation Guide V1.0b: transaction id, protocol id, length,
unit id, then the PDU) and records each request's unit, function code, start address and the
values of write requests. Nothing between the client and the server sees it, so what it
records is what went over the socket, whatever the client or the server thinks they did.

``recording_profile(profile, bench)`` puts one recorder in front of every endpoint a started
``SimulatedBench`` serves and returns the profile pointing at the recorders.
"""

from __future__ import annotations

import asyncio
import contextlib
import dataclasses
import struct
from dataclasses import dataclass, field

from meas.model import Profile, TcpTransport

LOOPBACK = "127.0.0.1"
# function codes that change a device, Modbus Application Protocol V1.1b3 section 6:
# 5 write single coil, 6 write single register, 15 write multiple coils,
# 16 write multiple registers, 22 mask write register, 23 read/write multiple registers
WRITE_FC = frozenset({5, 6, 15, 16, 22, 23})
READ_FC = frozenset({1, 2, 3, 4})


@dataclass(frozen=True)
class Request:
    """One client request as seen on the wire."""

    port: int  # the recorder's port, i.e. which endpoint
    unit: int
    function_code: int
    address: int | None
    values: tuple[int, ...] = ()  # written values (coils as 0/1), writes only

    @property
    def is_write(self) -> bool:
        return self.function_code in WRITE_FC


def _bits(data: bytes, count: int) -> tuple[int, ...]:
    """Coil values packed LSB first, Modbus Application Protocol V1.1b3 6.11."""
    return tuple((data[i // 8] >> (i % 8)) & 1 for i in range(min(count, 8 * len(data))))


def parse_pdu(pdu: bytes) -> tuple[int, int | None, tuple[int, ...]]:
    """(function code, start address, written values) of a request PDU; tolerant of junk."""
    if not pdu:
        return -1, None, ()
    fc = pdu[0]
    address = struct.unpack(">H", pdu[1:3])[0] if len(pdu) >= 3 else None
    values: tuple[int, ...] = ()
    if fc == 5 and len(pdu) >= 5:
        values = (1 if pdu[3:5] == b"\xff\x00" else 0,)  # 0xFF00 = ON, 0x0000 = OFF (6.5)
    elif fc == 6 and len(pdu) >= 5:
        values = (struct.unpack(">H", pdu[3:5])[0],)
    elif fc == 15 and len(pdu) >= 6:
        values = _bits(pdu[6:], struct.unpack(">H", pdu[3:5])[0])
    elif fc == 16 and len(pdu) >= 6:
        n = struct.unpack(">H", pdu[3:5])[0]
        body = pdu[6 : 6 + 2 * n]
        values = struct.unpack(f">{len(body) // 2}H", body[: len(body) // 2 * 2])
    elif fc == 22 and len(pdu) >= 7:
        values = struct.unpack(">HH", pdu[3:7])  # AND mask, OR mask
    elif fc == 23 and len(pdu) >= 10:
        address = struct.unpack(">H", pdu[5:7])[0]  # the write start address
        n = struct.unpack(">H", pdu[7:9])[0]
        body = pdu[10 : 10 + 2 * n]
        values = struct.unpack(f">{len(body) // 2}H", body[: len(body) // 2 * 2])
    return fc, address, values


@dataclass
class WriteRecorder:
    backend: tuple[str, int]
    requests: list[Request] = field(default_factory=list)
    port: int = 0
    _server: asyncio.Server | None = None
    _tasks: set[asyncio.Task] = field(default_factory=set)

    @property
    def writes(self) -> list[Request]:
        return [r for r in self.requests if r.is_write]

    async def start(self) -> WriteRecorder:
        self._server = await asyncio.start_server(self._client, LOOPBACK, 0)
        self.port = self._server.sockets[0].getsockname()[1]
        return self

    async def stop(self) -> None:
        if self._server is not None:
            self._server.close()
            for t in list(self._tasks):
                t.cancel()
            with contextlib.suppress(Exception):
                await asyncio.wait_for(self._server.wait_closed(), 2.0)
            self._server = None

    async def __aenter__(self) -> WriteRecorder:
        return await self.start()

    async def __aexit__(self, *exc) -> None:
        await self.stop()

    def _record(self, buffer: bytearray) -> None:
        while len(buffer) >= 7:
            length = struct.unpack(">H", buffer[4:6])[0]
            if len(buffer) < 6 + length:
                return
            unit = buffer[6]
            fc, address, values = parse_pdu(bytes(buffer[7 : 6 + length]))
            self.requests.append(
                Request(self.port, unit, fc, address, values if fc in WRITE_FC else ())
            )
            del buffer[: 6 + max(length, 1)]

    async def _pump(
        self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter, record: bool
    ) -> None:
        buffer = bytearray()
        try:
            while data := await reader.read(4096):
                if record:
                    buffer += data
                    self._record(buffer)
                writer.write(data)
                await writer.drain()
        except (ConnectionError, asyncio.CancelledError):
            pass
        finally:
            writer.close()

    async def _client(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        task = asyncio.current_task()
        if task:
            self._tasks.add(task)
        try:
            b_reader, b_writer = await asyncio.open_connection(*self.backend)
        except OSError:
            writer.close()
            return
        try:
            await asyncio.gather(
                self._pump(reader, b_writer, True), self._pump(b_reader, writer, False)
            )
        except asyncio.CancelledError:
            writer.close()
            b_writer.close()
        finally:
            if task:
                self._tasks.discard(task)


async def recording_profile(
    profile: Profile, bound: Profile
) -> tuple[Profile, list[WriteRecorder]]:
    """Recorders in front of every TCP endpoint of ``bound`` (a started bench's profile).

    Returns a copy of ``profile`` whose meters and PLCs talk to the recorders instead.
    """
    recorders: dict[tuple[str, int], WriteRecorder] = {}
    for item in (*bound.meters, *bound.plcs):
        tr = item.transport
        if isinstance(tr, TcpTransport) and (tr.host, tr.port) not in recorders:
            recorders[(tr.host, tr.port)] = await WriteRecorder((tr.host, tr.port)).start()

    def moved(item):
        tr = item.transport
        if not isinstance(tr, TcpTransport):
            return item
        return dataclasses.replace(
            item, transport=TcpTransport(LOOPBACK, recorders[(tr.host, tr.port)].port)
        )

    out = dataclasses.replace(
        bound,
        control=profile.control,
        meters=tuple(moved(m) for m in bound.meters),
        plcs=tuple(moved(p) for p in bound.plcs),
    )
    return out, list(recorders.values())
