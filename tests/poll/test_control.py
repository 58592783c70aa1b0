"""Guarded switch control against a real pymodbus PLC server that records every write.

The server's action hook sees each write before it is applied (FC 5/6/15/16), so "no write
reached the device" is observed on the device side, not inferred from our own code.
"""

from __future__ import annotations

import pathlib
import re
import time

import pytest
from support.modbus_helpers import MeterServer, Write, make_profile, plc, switch

from meas.errors import BenchwalkError
from meas.model import SWITCH_STATES, Control
from meas.poll.control import ControlRefused, SwitchControl
from meas.poll.cycle import Poller

ROOT = pathlib.Path(__file__).resolve().parents[2]


def _profile(port: int, enabled: bool = True, verify_s: float = 1.0):
    sws = [
        switch("CB1", "PLC1", 0, command_coil=3, operation="remote"),
        switch("SW3", "PLC1", 2, operation="manual"),
        switch("NOCOIL", "PLC1", 5, operation="remote"),
        switch("BLIND", "PLC1", None, command_coil=6, operation="remote"),
    ]
    return make_profile(
        [],
        [],
        plcs=[plc("PLC1", port)],
        switches=sws,
        control=Control(enabled=enabled, verify_timeout_s=verify_s),
    )


async def _run(srv: MeterServer, prof, coro_fn):
    poller = Poller(prof)
    try:
        await poller.start()
        snap = await poller.poll_once()  # the link works: reads go through
        assert snap.switches["CB1"] in SWITCH_STATES
        return await coro_fn(SwitchControl(prof, poller))
    finally:
        await poller.close()


async def test_control_disabled_refuses_and_writes_nothing():
    async with MeterServer(follow={3: 0}) as srv:

        async def go(ctl):
            with pytest.raises(ControlRefused, match="control is disabled"):
                await ctl.operate("CB1", "closed", confirmed_by="A. Tech")

        await _run(srv, _profile(srv.port, enabled=False), go)
        assert srv.writes == []
        assert await srv.get_bits(1, "coil", 3) == [False]


@pytest.mark.parametrize(
    "switch_id,state,who,why",
    [
        ("SW3", "open", "A. Tech", "operated by hand"),
        ("NOCOIL", "open", "A. Tech", "no PLC command coil"),
        ("BLIND", "open", "A. Tech", "no status point"),
        ("CB1", "open", "", "confirming technician"),
        ("CB1", "open", "   ", "confirming technician"),
        ("CB1", "half", "A. Tech", "cannot command state"),
        ("NOPE", "open", "A. Tech", "no such switch"),
    ],
)
async def test_guards_refuse_with_a_clear_sentence(switch_id, state, who, why):
    async with MeterServer() as srv:

        async def go(ctl):
            with pytest.raises(ControlRefused, match=why) as info:
                await ctl.operate(switch_id, state, confirmed_by=who)
            assert "\n" not in str(info.value) and isinstance(info.value, BenchwalkError)

        await _run(srv, _profile(srv.port), go)
        assert srv.writes == []


async def test_allowed_command_writes_exactly_one_coil_and_verifies_status():
    async with MeterServer(follow={3: 0}, follow_delay_s=0.1) as srv:

        async def go(ctl):
            return await ctl.operate("CB1", "closed", confirmed_by="A. Tech")

        result = await _run(srv, _profile(srv.port), go)
        assert srv.writes == [Write(unit=1, function_code=5, address=3, values=[True])]
    assert result.ok and result.final_status == "closed" and result.intended == "closed"
    assert result.elapsed_s >= 0.1  # the status followed only after the mechanism time
    assert result.confirmed_by == "A. Tech"


async def test_open_command_writes_false():
    async with MeterServer(follow={3: 0}) as srv:
        await srv.set_bits(1, "discrete", 0, [True])
        await srv.set_bits(1, "coil", 3, [True])
        result = await _run(
            srv, _profile(srv.port), lambda ctl: ctl.operate("CB1", "open", confirmed_by="B")
        )
        assert srv.writes == [Write(unit=1, function_code=5, address=3, values=[False])]
    assert result.ok and result.final_status == "open"


async def test_status_not_following_reports_failure_after_timeout():
    async with MeterServer(follow={}) as srv:  # the breaker never moves
        t0 = time.monotonic()
        result = await _run(
            srv,
            _profile(srv.port, verify_s=0.3),
            lambda ctl: ctl.operate("CB1", "closed", confirmed_by="A. Tech"),
        )
        assert len(srv.writes) == 1 and srv.writes[0].address == 3
    assert not result.ok and result.final_status == "open"
    assert "still reads open after 0.3 s" in result.message
    assert 0.3 <= result.elapsed_s < 0.3 + 0.5 and time.monotonic() - t0 < 3


async def test_unreachable_plc_is_a_one_line_error_not_a_write():
    from support.modbus_helpers import free_port

    prof = _profile(free_port())
    poller = Poller(prof)
    try:
        with pytest.raises(BenchwalkError, match="not reachable"):
            await SwitchControl(prof, poller).operate("CB1", "closed", confirmed_by="A. Tech")
    finally:
        await poller.close()


def test_control_is_the_only_module_that_writes_to_a_device():
    pattern = re.compile(r"\bwrite_(coil|coils|register|registers)\s*\(|readwrite_registers\s*\(")
    offenders = []
    for pkg in ("meas", "tui"):
        for path in (ROOT / pkg).rglob("*.py"):
            if path.relative_to(ROOT).as_posix() == "meas/poll/control.py":
                continue
            if pattern.search(path.read_text(encoding="utf-8")):
                offenders.append(str(path.relative_to(ROOT)))
    assert offenders == []
    control_src = (ROOT / "meas/poll/control.py").read_text()
    assert pattern.search(control_src)  # the pattern does find writes


@pytest.mark.parametrize("enabled", [True, False])
def test_refusal_of_a_strange_switch_id_stays_one_line(enabled):
    """Ids arrive from keyboards and scripts; a control character must not split the message."""
    ctl = SwitchControl(_profile(1502, enabled=enabled), poller=None)
    with pytest.raises(ControlRefused) as err:
        ctl.check("CB1\n: injected", "closed", "A. Tech")
    assert "\n" not in str(err.value) and "'CB1\\n: injected'" in str(err.value)
