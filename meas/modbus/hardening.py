"""The one place that reaches into pymodbus internals, for the release it was written against.

Two pymodbus 3.16 client behaviours that a hostile device turns into trouble are fixed here by
wrapping two hooks of the client's transaction manager, and the library's ERROR logging of
every timeout is quieted. Both depend on internals (``ctx.framer.handleFrame``,
``ctx.callback_disconnected``, ``ctx.response_future``) that minor releases change, so
``require_supported_pymodbus`` refuses any other release with one line instead of letting the
wrappers fail obscurely. Widen ``SUPPORTED`` only after re-running ``tests/poll/test_poller_hostile.py``
against the new release.
"""

from __future__ import annotations

import logging
import re
from dataclasses import dataclass

import pymodbus
from pymodbus.client import ModbusBaseClient
from pymodbus.exceptions import ConnectionException, ModbusIOException
from pymodbus.pdu import ModbusPDU

from ..errors import BenchwalkError

SUPPORTED = ((3, 16, 1), (3, 17, 0))  # [lowest, first unsupported), as pyproject.toml pins
_REQUIREMENT = "pymodbus[serial]>=3.16.1,<3.17"


def _release(version: str) -> tuple[int, int, int]:
    """(major, minor, patch) of a version string; a pre-release tail is ignored ("3.17.0rc1")."""
    nums = []
    for part in [*version.split("."), "0", "0"][:3]:
        digits = re.match(r"\d+", part)
        nums.append(int(digits.group()) if digits else 0)
    return nums[0], nums[1], nums[2]


def require_supported_pymodbus(version: str = pymodbus.__version__) -> None:
    """Refuse, in one line, a pymodbus release whose internals ``harden`` was not written for."""
    lowest, beyond = SUPPORTED
    if not lowest <= _release(version) < beyond:
        raise BenchwalkError(
            f"pymodbus {version} is installed but benchwalk needs {_REQUIREMENT}; "
            f"run: pip install '{_REQUIREMENT}'"
        )


def tame_pymodbus_logging(level: int = logging.CRITICAL) -> None:
    """pymodbus logs every timeout at ERROR with frame dumps; quiet it unless configured."""
    lg = logging.getLogger("pymodbus")
    if lg.level == logging.NOTSET:
        lg.setLevel(level)


@dataclass(slots=True)
class BadFrames:
    """Undecodable replies a hardened client dropped; a change during a request names it."""

    count: int = 0


def harden(client: ModbusBaseClient) -> BadFrames:
    """Fix two pymodbus 3.16 behaviours at the client -> its counter of dropped bad frames.

    An undecodable reply (say a byte count beyond the data) raises inside the protocol's
    ``data_received``: asyncio logs a traceback and closes the shared link. We drop the bytes
    instead, count them and end the request at once as a bad reply; the link stays up. And a
    connection lost mid-request leaves the request waiting its full timeout: we fail it at
    once with ``ConnectionException``.
    """
    require_supported_pymodbus()
    ctx = client.ctx
    bad = BadFrames()
    handle = ctx.framer.handleFrame
    disconnected = ctx.callback_disconnected

    def guarded_handle(data: bytes, exp_devid: int, exp_tid: int) -> tuple[int, ModbusPDU | None]:
        try:
            return handle(data, exp_devid, exp_tid)
        except ModbusIOException:
            bad.count += 1
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

    ctx.framer.handleFrame = guarded_handle  # type: ignore[method-assign]
    ctx.callback_disconnected = failing_disconnected  # type: ignore[method-assign]
    return bad
