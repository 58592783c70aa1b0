"""A Modbus TCP server written by hand that misbehaves on command, per unit id.

Framing per the Modbus Messaging on TCP/IP Implementation Guide V1.0b, section 3.1.3 (MBAP
header: transaction id 2 bytes, protocol id 2 bytes = 0, length 2 bytes = unit id + PDU,
unit id 1 byte) and PDUs per the Modbus Application Protocol Specification V1.1b3, section 6
(FC 1/2 bit reads, 3/4 register reads, 5/6 single writes, 15/16 multiple writes) and section 7
(exception response: function code + 0x80, one exception code byte).

``HostileServer.set(unit, mode, **kw)`` picks what a unit does with each request:
``ok``, ``silent``, ``late`` (``delay_s``), ``exception`` (``code``), ``close`` and the
malformed answers ``bad_length``, ``bad_count``, ``bad_fc``, ``bad_tid``, ``bad_unit``,
``truncated``, ``garbage``. Every request is recorded in ``requests``.

Run as a script it serves in its own process (for soak tests) and takes one command a line
on stdin: ``mode <unit> <mode> [arg]``, ``words <unit> <address> <w,w,...>``, ``quit``.
It prints ``port <n>`` once listening::

    python tests/support/hostile_server.py --units 1-8
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import random
import struct
import sys
from dataclasses import dataclass, field

LOOPBACK = "127.0.0.1"
MODES = (
    "ok",
    "silent",
    "late",
    "exception",
    "close",
    "bad_length",
    "bad_count",
    "bad_fc",
    "bad_tid",
    "bad_unit",
    "truncated",
    "garbage",
)
MALFORMED = ("bad_length", "bad_count", "bad_fc", "bad_tid", "bad_unit", "truncated", "garbage")
# Modbus Application Protocol V1.1b3 section 7: the exception codes a device may answer
EXCEPTION_CODES = (0x01, 0x02, 0x03, 0x04, 0x05, 0x06, 0x08, 0x0A, 0x0B)
REGISTERS = 2048  # words per unit, shared by holding and input (FC 3 and 4)
BITS = 256  # coils and discrete inputs per unit


@dataclass(frozen=True)
class Request:
    unit: int
    function_code: int
    address: int
    count: int
    tid: int
    values: tuple = ()  # written values (FC 5, 6, 15, 16)


@dataclass
class Behaviour:
    mode: str = "ok"
    delay_s: float = 0.0
    code: int = 0x04


@dataclass
class HostileServer:
    """Raw asyncio Modbus TCP server on loopback; ``port`` 0 = let the OS choose."""

    units: tuple[int, ...] = (1,)
    port: int = 0
    seed: int = 1
    requests: list[Request] = field(default_factory=list)
    behaviour: dict[int, Behaviour] = field(default_factory=dict)
    words: dict[int, list[int]] = field(default_factory=dict)
    bits: dict[int, list[bool]] = field(default_factory=dict)
    record: bool = True  # a soak turns this off to keep the server's memory flat
    connections: int = 0  # accepted so far
    _server: asyncio.Server | None = None
    _writers: set[asyncio.StreamWriter] = field(default_factory=set)
    _late: set[asyncio.Task] = field(default_factory=set)

    def __post_init__(self) -> None:
        self._rng = random.Random(self.seed)
        for u in self.units:
            self.behaviour.setdefault(u, Behaviour())
            self.words.setdefault(u, [0] * REGISTERS)
            self.bits.setdefault(u, [False] * BITS)

    # ------------------------------------------------------------ control

    def set(self, unit: int, mode: str, *, delay_s: float = 0.0, code: int = 0x04) -> None:
        if mode not in MODES:
            raise ValueError(f"unknown mode {mode!r}; one of {', '.join(MODES)}")
        self.behaviour[unit] = Behaviour(mode, delay_s, code)

    def load(self, unit: int, address: int, words: list[int]) -> None:
        self.words[unit][address : address + len(words)] = [w & 0xFFFF for w in words]

    def requests_for(self, unit: int) -> list[Request]:
        return [r for r in self.requests if r.unit == unit]

    async def start(self) -> HostileServer:
        self._server = await asyncio.start_server(self._handle, LOOPBACK, self.port)
        self.port = self._server.sockets[0].getsockname()[1]
        return self

    async def stop(self) -> None:
        for t in list(self._late):
            t.cancel()
        for w in list(self._writers):
            w.close()
        if self._server is not None:
            self._server.close()
            with contextlib.suppress(Exception):
                await asyncio.wait_for(self._server.wait_closed(), 1.0)
            self._server = None

    async def __aenter__(self) -> HostileServer:
        return await self.start()

    async def __aexit__(self, *exc) -> None:
        await self.stop()

    # ------------------------------------------------------------ protocol

    async def _handle(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        self.connections += 1
        self._writers.add(writer)
        try:
            while True:
                head = await reader.readexactly(7)
                tid, pid, length, unit = struct.unpack(">HHHB", head)
                if length < 2 or length > 254:  # not a Modbus TCP frame: drop the connection
                    break
                pdu = await reader.readexactly(length - 1)
                if pid != 0:
                    continue
                if not self._answer(writer, tid, unit, pdu):
                    break
        except (asyncio.IncompleteReadError, ConnectionError):
            pass
        finally:
            self._writers.discard(writer)
            writer.close()

    def _answer(self, writer: asyncio.StreamWriter, tid: int, unit: int, pdu: bytes) -> bool:
        """Answer one request as the unit's behaviour says; False = close the connection."""
        fc = pdu[0]
        req = _parse(unit, tid, pdu)
        if self.record:
            self.requests.append(req)
        b = self.behaviour.get(unit)
        if b is None:  # unknown unit: a gateway's "target device failed to respond" (0x0B)
            writer.write(_mbap(tid, unit, bytes([fc | 0x80, 0x0B])))
            return True
        if b.mode == "silent":
            return True
        if b.mode == "close":
            return False
        if b.mode == "exception":
            writer.write(_mbap(tid, unit, bytes([fc | 0x80, b.code])))
            return True
        body = self._reply_pdu(req)
        frame = _mbap(tid, unit, body)
        if b.mode == "late":
            task = asyncio.get_running_loop().create_task(self._send_late(writer, frame, b.delay_s))
            self._late.add(task)
            task.add_done_callback(self._late.discard)
            return True
        writer.write(self._spoil(b.mode, frame, tid, unit, body))
        return True

    async def _send_late(self, writer: asyncio.StreamWriter, frame: bytes, delay_s: float) -> None:
        await asyncio.sleep(delay_s)  # the device's own slowness, not test synchronisation
        if not writer.is_closing():
            writer.write(frame)

    def _reply_pdu(self, req: Request) -> bytes:
        fc, unit = req.function_code, req.unit
        if fc in (3, 4):
            if req.count < 1 or req.count > 125 or req.address + req.count > REGISTERS:
                return bytes([fc | 0x80, 0x02 if req.count <= 125 else 0x03])
            regs = self.words[unit][req.address : req.address + req.count]
            return struct.pack(f">BB{req.count}H", fc, 2 * req.count, *regs)
        if fc in (1, 2):
            if req.count < 1 or req.count > 2000 or req.address + req.count > BITS:
                return bytes([fc | 0x80, 0x02])
            bits = self.bits[unit][req.address : req.address + req.count]
            packed = bytearray((req.count + 7) // 8)
            for i, on in enumerate(bits):  # LSB of the first byte = first bit (V1.1b3 6.1)
                if on:
                    packed[i // 8] |= 1 << (i % 8)
            return bytes([fc, len(packed)]) + bytes(packed)
        if fc == 5:
            self.bits[unit][req.address] = bool(req.values[0])
            return bytes([fc]) + struct.pack(">HH", req.address, 0xFF00 if req.values[0] else 0)
        if fc == 6:
            self.words[unit][req.address] = req.values[0]
            return bytes([fc]) + struct.pack(">HH", req.address, req.values[0])
        if fc in (15, 16):
            target = self.bits[unit] if fc == 15 else self.words[unit]
            target[req.address : req.address + len(req.values)] = list(req.values)
            return bytes([fc]) + struct.pack(">HH", req.address, req.count)
        return bytes([fc | 0x80, 0x01])  # ILLEGAL FUNCTION

    def _spoil(self, mode: str, frame: bytes, tid: int, unit: int, body: bytes) -> bytes:
        if mode == "bad_length":  # MBAP length claims 4 bytes more than follow
            return frame[:4] + struct.pack(">H", len(body) + 1 + 4) + frame[6:]
        if mode == "bad_count":  # byte count 2 more than the register data sent
            return _mbap(tid, unit, body[:1] + bytes([(body[1] + 2) & 0xFF]) + body[2:])
        if mode == "bad_fc":  # a well formed answer of the other register read (3 <-> 4)
            other = {3: 4, 4: 3, 1: 2, 2: 1}.get(body[0], body[0])
            return _mbap(tid, unit, bytes([other]) + body[1:])
        if mode == "bad_tid":
            return _mbap((tid + 1) & 0xFFFF, unit, body)
        if mode == "bad_unit":
            return _mbap(tid, (unit + 1) & 0xFF, body)
        if mode == "truncated":
            return frame[: max(4, len(frame) // 2)]
        if mode == "garbage":
            return bytes(self._rng.randrange(256) for _ in range(len(frame)))
        return frame


def _mbap(tid: int, unit: int, pdu: bytes) -> bytes:
    return struct.pack(">HHHB", tid, 0, len(pdu) + 1, unit) + pdu


def _parse(unit: int, tid: int, pdu: bytes) -> Request:
    fc = pdu[0]
    address = count = 0
    values: tuple = ()
    if len(pdu) >= 5:
        address, second = struct.unpack_from(">HH", pdu, 1)
        if fc in (1, 2, 3, 4, 15, 16):
            count = second
        if fc == 5:
            count, values = 1, (second == 0xFF00,)
        elif fc == 6:
            count, values = 1, (second,)
        elif fc == 16 and len(pdu) >= 6 + 2 * count:
            values = struct.unpack_from(f">{count}H", pdu, 6)
        elif fc == 15 and len(pdu) >= 6:
            raw = pdu[6:]
            values = tuple(
                bool(raw[i // 8] >> (i % 8) & 1) for i in range(min(count, 8 * len(raw)))
            )
    return Request(unit, fc, address, count, tid, values)


# ---------------------------------------------------------------- separate process


def _units(spec: str) -> tuple[int, ...]:
    lo, _, hi = spec.partition("-")
    return tuple(range(int(lo), int(hi or lo) + 1))


async def _serve_stdin(server: HostileServer) -> None:
    loop = asyncio.get_running_loop()
    while True:
        line = await loop.run_in_executor(None, sys.stdin.readline)
        parts = line.split()
        if not parts or parts[0] == "quit":
            return
        if parts[0] == "mode":
            unit, mode = int(parts[1]), parts[2]
            arg = float(parts[3]) if len(parts) > 3 else 0.0
            server.set(unit, mode, delay_s=arg, code=int(arg) or 0x04)
        elif parts[0] == "words":
            server.load(int(parts[1]), int(parts[2]), [int(w) for w in parts[3].split(",")])
        print("ack", flush=True)


async def _main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--units", default="1", help="unit ids, e.g. 1-8")
    ap.add_argument("--port", type=int, default=0)
    args = ap.parse_args(argv)
    server = await HostileServer(units=_units(args.units), port=args.port, record=False).start()
    print(f"port {server.port}", flush=True)
    try:
        await _serve_stdin(server)
    finally:
        await server.stop()


if __name__ == "__main__":
    asyncio.run(_main())
