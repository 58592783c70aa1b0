"""Text registers (type "string"): the codec both ways, and one read from the simulated bench.

Packing: two ASCII characters per register, the first in the high byte ("AB" -> 0x4142),
NUL-padded, trailing NULs and spaces stripped on reading: common practice in Modbus device maps.
The loopback test reads a demo meter's serial number from a real pymodbus server on 127.0.0.1.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from pymodbus.client import AsyncModbusTcpClient

from meas.modbus.codec import DecodeError, decode_text, encode_text
from meas.modbus.decode import identification
from meas.modbus.plan import plan_profile
from meas.model import TcpTransport
from meas.profile import load_profile
from meas.register_map import TextSpec

sim_bench = pytest.importorskip("meas.sim.bench")
sim_server = pytest.importorskip("meas.sim.server")

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"
SERIAL = TextSpec("serial", "holding", 100, 4)


def test_text_packs_two_characters_per_register_high_byte_first():
    # "AB" -> 0x41 0x42 in one register, high byte first (common practice)
    assert encode_text(SERIAL, "ABC") == [0x4142, 0x4300, 0x0000, 0x0000]
    assert decode_text(SERIAL, [0x4142, 0x4300, 0x0000, 0x0000]) == "ABC"


@pytest.mark.parametrize("text", ["SN-1234", "12345678", "X", ""])
def test_text_round_trip(text):
    assert decode_text(SERIAL, encode_text(SERIAL, text)) == text


def test_padding_is_stripped_and_byte_order_little_swaps_each_register():
    assert decode_text(SERIAL, [0x4142, 0x2020, 0x2020, 0x0000]) == "AB"  # space padding
    little = TextSpec("serial", "holding", 100, 2, byte_order="little")
    assert encode_text(little, "ABCD") == [0x4241, 0x4443]
    assert decode_text(little, [0x4241, 0x4443]) == "ABCD"


def test_text_that_does_not_fit_or_is_not_ascii_is_refused():
    with pytest.raises(DecodeError, match="needs 5 registers, 4 given"):
        encode_text(SERIAL, "123456789")
    with pytest.raises(DecodeError, match="not ASCII"):
        encode_text(SERIAL, "Zähler")
    with pytest.raises(DecodeError, match="needs 4 registers, got 3"):
        decode_text(SERIAL, [0, 0, 0])


def test_text_registers_are_not_polled_as_readings():
    demo = load_profile(DEMO)
    plans = plan_profile(demo)
    for meter in demo.meters:
        rmap = demo.meter_map(meter.id)
        assert rmap.text and rmap.text[0].key == "serial"  # every demo map has one
        reads = plans[meter.id].requests
        covered = {(r.kind, a) for r in reads for a in range(r.address, r.end)}
        for t in rmap.text:
            assert not any((t.kind, a) in covered for a in range(t.address, t.end))


async def test_serial_number_read_over_loopback_from_the_simulated_meter():
    demo = load_profile(DEMO)
    bench = sim_bench.SimulatedBench(demo, port_map="free", seed=3)
    bound = await bench.start()
    try:
        meter = bound.meters[0]
        rmap = bound.meter_map(meter.id)
        spec = rmap.text[0]
        assert isinstance(meter.transport, TcpTransport)
        client = AsyncModbusTcpClient("127.0.0.1", port=meter.transport.port, timeout=2)
        assert await client.connect()
        try:
            read = (
                client.read_input_registers
                if spec.kind == "input"
                else client.read_holding_registers
            )
            rr = await read(spec.address, count=spec.count, device_id=meter.unit_id)
            assert not rr.isError()
        finally:
            client.close()
        got = identification(rmap, {spec.kind: (spec.address, rr.registers)})
        assert got == {"serial": sim_server.simulated_identification(rmap, meter.unit_id)["serial"]}
        assert got["serial"].startswith("SIM-")  # invented by meas/sim/server.py
    finally:
        await bench.stop()


async def test_poller_reads_every_meters_identification_once():
    from meas.poll.cycle import Poller

    demo = load_profile(DEMO)
    faults = [pytest.importorskip("meas.sim.faults").parse_fault("offline:M6")]
    bench = sim_bench.SimulatedBench(demo, faults, port_map="free", seed=3)
    bound = await bench.start()
    poller = Poller(bound)
    try:
        await poller.start()
        ident = await poller.identify()
        expected = {
            m.id: sim_server.simulated_identification(bound.meter_map(m.id), m.unit_id)
            for m in bound.meters
            if m.id != "M6"  # offline: no answer, so no identification (and no error)
        }
        assert ident == expected
        assert all(v["serial"].startswith("SIM-") for v in ident.values())
    finally:
        await poller.close()
        await bench.stop()


async def test_a_session_journals_the_identification_beside_not_among_the_readings(tmp_path):
    """The journal keeps text in one ``meters_identified`` event per session start (exported
    with the dataset's events table); the numeric readings table never holds a serial."""
    from meas.journal.read import JournalView
    from meas.session import Session

    s = await Session.new(
        DEMO, "T. Tester", session_id="ident", simulate=True, seed=2, sessions_dir=tmp_path
    )
    path = s.journal.path
    await s.close()
    events = [e for e in JournalView(path).events() if e.kind == "meters_identified"]
    assert len(events) == 1
    data = json.loads(events[0].data)  # the journal keeps event data as a JSON object
    demo = load_profile(DEMO)
    assert data == {
        m.id: sim_server.simulated_identification(demo.meter_map(m.id), m.unit_id)
        for m in demo.meters
    }
