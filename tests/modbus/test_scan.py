"""The scan against the simulated demo bench (real Modbus servers on loopback): it finds the
unit ids that answer, including the three behind one gateway port, with their device
identification, leaves out the ids nobody answers for, and writes a profile skeleton that the loader reads."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

from meas.modbus.scan import scan
from meas.model import TcpTransport
from meas.profile import check_profile, load_profile
from meas.profile.skeleton import skeleton

sim_bench = pytest.importorskip("meas.sim.bench")
sim_faults = pytest.importorskip("meas.sim.faults")

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"


def _by_port(profile):
    out: dict[int, list[int]] = {}
    for m in profile.meters:
        if isinstance(m.transport, TcpTransport):
            out.setdefault(m.transport.port, []).append(m.unit_id)
    return out


async def test_scan_finds_the_gateway_units_and_their_identification(tmp_path):
    demo = load_profile(DEMO)
    bench = sim_bench.SimulatedBench(demo, port_map="free", seed=3)
    bound = await bench.start()
    try:
        ports = _by_port(bound)
        gateway, units = max(ports.items(), key=lambda kv: len(kv[1]))
        assert len(units) >= 3  # the demo profile puts M2, M3 and M4 behind one port
        found = await scan(TcpTransport("127.0.0.1", gateway), range(1, 9), timeout_s=0.3)
        assert [u.unit_id for u in found] == sorted(units)
        for u in found:
            # what meas/sim/server.py gives every simulated unit (invented names)
            assert u.identification["vendor"] == "benchwalk simulated bench"
            assert u.identification["product_code"] == "BW-SIM"
        # the skeleton: one meter per unit found, on this endpoint; it parses as TOML and the
        # loader's only complaint is the register map a person has to fill in
        text = skeleton(TcpTransport("127.0.0.1", gateway), found)
        data = tomllib.loads(text)
        assert [m["unit_id"] for m in data["meter"]] == sorted(units)
        assert {m["tcp"]["port"] for m in data["meter"]} == {gateway}
        path = tmp_path / "skeleton.toml"
        path.write_text(text)
        profile, problems = check_profile(path)
        assert profile is None and problems
        assert all("register" in p.message for p in problems), [str(p) for p in problems]
    finally:
        await bench.stop()


async def test_scan_of_a_closed_port_is_one_line(tmp_path):
    import socket

    from meas.errors import BenchwalkError

    with socket.socket() as s:  # a port nobody listens on: bound, never listening
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
        with pytest.raises(BenchwalkError, match="cannot connect"):
            await scan(TcpTransport("127.0.0.1", port), [1], timeout_s=0.2)


def test_text_registers_round_trip_both_byte_orders():
    from meas.modbus.codec import DecodeError, text_to_words, words_to_text

    # "SN" = 0x53 0x4E: the first character in the high byte (common practice for text blocks)
    assert text_to_words("SN", 1) == [0x534E]
    assert text_to_words("SN", 1, "little") == [0x4E53]
    words = text_to_words("KH-0042", 8)
    assert len(words) == 8 and words[-1] == 0  # NUL padded
    assert words_to_text(words) == "KH-0042"
    assert words_to_text(text_to_words("KH-0042", 4, "little"), "little") == "KH-0042"
    with pytest.raises(DecodeError):
        text_to_words("seventeen letters", 8)


async def test_scan_reads_a_text_register_of_each_unit():
    from pymodbus.simulator import DataType, SimData, SimDevice

    from meas.modbus.codec import text_to_words
    from meas.modbus.scan import TextRegister

    server_mod = pytest.importorskip("meas.sim.server")

    def device(unit: int, serial: str) -> SimDevice:
        holding = [
            SimData(address=5000, values=text_to_words(serial, 8), datatype=DataType.REGISTERS)
        ]
        bits = [SimData(address=0, count=1, values=False, datatype=DataType.BITS)]
        return SimDevice(id=unit, simdata=(bits, bits, holding, holding))

    server, port = await server_mod.start_tcp(
        [device(7, "KH-0007"), device(9, "KH-0009")], "127.0.0.1", 0
    )
    try:
        found = await scan(
            TcpTransport("127.0.0.1", port),
            range(5, 11),
            timeout_s=0.3,
            texts=[TextRegister("serial", 5000, 8)],
        )
        assert [(u.unit_id, u.text) for u in found] == [
            (7, {"serial": "KH-0007"}),
            (9, {"serial": "KH-0009"}),
        ]
    finally:
        await server.shutdown()
