"""Which unit ids answer on one endpoint or serial line, and what they say they are.

For a new panel: each unit id in turn is asked to read one holding register; any reply, an
exception reply included, means the unit id is there, silence until the timeout means it is
not. A unit that is there is then asked for its basic device identification (function 43 /
MEI type 14, Modbus Application Protocol V1.1b3 6.21: vendor name, product code, revision).
Only reads are sent: a scan never writes to a device.
"""

from __future__ import annotations

import asyncio
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

from pymodbus.client import ModbusBaseClient
from pymodbus.exceptions import ModbusException
from pymodbus.pdu import ExceptionResponse, ModbusPDU
from pymodbus.pdu.mei_message import ReadDeviceInformationResponse

from ..errors import BenchwalkError
from ..model import Transport
from .codec import words_to_text
from .hardening import harden, require_supported_pymodbus, tame_pymodbus_logging
from .link import make_client

# exception codes that mean "no such unit here": gateway path unavailable (10) and gateway
# target failed to respond (11), V1.1b3 section 7; and server device failure (4), which some
# gateways (and pymodbus 3.16's simulator, for an unknown unit id) answer instead
ABSENT = frozenset({0x04, 0x0A, 0x0B})

# basic identification objects (V1.1b3 table 6.21): object id -> name
BASIC_OBJECTS = {0x00: "vendor", 0x01: "product_code", 0x02: "revision"}
REGULAR_OBJECTS = {0x03: "vendor_url", 0x04: "product_name", 0x05: "model_name"}


@dataclass(frozen=True)
class UnitFound:
    """A unit id that answered, how, and its identification (empty when it offers none)."""

    unit_id: int
    answered: str  # to the register read: "registers" or "exception <code>"
    identification: dict[str, str] = field(default_factory=dict)
    text: dict[str, str] = field(default_factory=dict)  # asked-for text registers, by name


def _ident(rr: ReadDeviceInformationResponse) -> dict[str, str]:
    names = BASIC_OBJECTS | REGULAR_OBJECTS
    out = {}
    for oid, value in (rr.information or {}).items():
        raw = value[0] if isinstance(value, list) and value else value
        text = raw.decode("utf-8", "replace") if isinstance(raw, bytes) else str(raw)
        out[names.get(oid, f"object_{oid:#04x}")] = text.strip("\x00 ").strip()
    return out


async def _ask(coro: object, timeout_s: float) -> ModbusPDU | None:
    try:
        async with asyncio.timeout(timeout_s * 1.5):
            return await coro  # type: ignore[misc]
    except (TimeoutError, ModbusException, ConnectionError, OSError):
        return None


@dataclass(frozen=True)
class TextRegister:
    """A block of holding registers holding text (a serial number, a model name)."""

    name: str
    address: int
    count: int
    byte_order: str = "big"


async def read_text(
    c: ModbusBaseClient, unit_id: int, reg: TextRegister, timeout_s: float
) -> str | None:
    rr = await _ask(
        c.read_holding_registers(reg.address, count=reg.count, device_id=unit_id), timeout_s
    )
    if rr is None or rr.isError() or len(rr.registers) != reg.count:
        return None
    return words_to_text(rr.registers, reg.byte_order)


async def probe_unit(
    c: ModbusBaseClient, unit_id: int, timeout_s: float, texts: Sequence[TextRegister] = ()
) -> UnitFound | None:
    """One unit id: a one-register read says whether it is there (any reply, an exception
    included; silence means no), then its identification is asked for.

    Presence is never judged by the identification request alone: a gateway (and pymodbus's
    own server) may answer it for every unit id behind it."""
    rr = await _ask(c.read_holding_registers(0, count=1, device_id=unit_id), timeout_s)
    if rr is None or (isinstance(rr, ExceptionResponse) and rr.exception_code in ABSENT):
        return None
    answered = (
        f"exception {rr.exception_code}" if isinstance(rr, ExceptionResponse) else "registers"
    )
    info = await _ask(
        c.read_device_information(read_code=1, object_id=0, device_id=unit_id), timeout_s
    )
    text = {}
    for reg in texts:
        value = await read_text(c, unit_id, reg, timeout_s)
        if value is not None:
            text[reg.name] = value
    ident = _ident(info) if isinstance(info, ReadDeviceInformationResponse) else {}
    return UnitFound(unit_id, answered, ident, text)


async def scan(
    transport: Transport,
    unit_ids: Iterable[int],
    timeout_s: float = 0.3,
    texts: Sequence[TextRegister] = (),
) -> list[UnitFound]:
    """Every unit id of ``unit_ids`` that answers on ``transport``, in order (one at a time:
    a gateway or an RS-485 line carries one request at a time)."""
    require_supported_pymodbus()
    tame_pymodbus_logging()
    client = make_client(transport, timeout_s)
    harden(client)
    try:
        try:
            async with asyncio.timeout(max(1.0, 4 * timeout_s)):
                ok = await client.connect()
        except TimeoutError:
            ok = False
        if not ok:
            raise BenchwalkError(
                f"{transport.endpoint}: cannot connect; check the address, port or serial device"
            )
        found = []
        for unit in unit_ids:
            if not 0 <= unit <= 247:
                raise BenchwalkError(f"unit id {unit} is outside 0..247 (Modbus serial line)")
            hit = await probe_unit(client, unit, timeout_s, texts)
            if hit is not None:
                found.append(hit)
        return found
    finally:
        client.close()
