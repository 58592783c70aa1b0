"""The simulated bench over real Modbus on loopback: pymodbus servers, the real Poller, a pty.

Every test starts the demo bench on ports the OS hands out and queries it with real clients
(the project's ``Poller`` or a bare pymodbus client), waiting on conditions with deadlines.
"""

from __future__ import annotations

import asyncio
import contextlib
import dataclasses
import math
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from pymodbus.client import AsyncModbusTcpClient
from pymodbus.exceptions import ModbusException, ModbusIOException
from support.modbus_helpers import PtyLink, wait_until

from meas.errors import BenchwalkError
from meas.modbus.codec import decode
from meas.model import RtuTransport
from meas.poll.cycle import Poller
from meas.profile import load_profile
from meas.scaling import to_primary
from meas.sim.bench import SimulatedBench
from meas.sim.faults import parse_fault
from meas.sim.meters import class_limit, register_roundtrip
from meas.sim.readings import ideal_readings
from meas.snapshot import CommState, Quality

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "profiles_demo" / "feeder_bench.toml"
ENERGY = ("e_imp.T", "e_exp.T")


@pytest.fixture(scope="module")
def profile():
    return load_profile(DEMO)


async def started(profile, faults=(), **kw):
    kw.setdefault("noise", False)
    bench = SimulatedBench(profile, [parse_fault(f) for f in faults], port_map="free", **kw)
    return bench, await bench.start()


def client_for(transport, timeout=1.0):
    return AsyncModbusTcpClient(
        transport.host, port=transport.port, timeout=timeout, retries=0, reconnect_delay=0
    )


def expected_primary(profile, bench, meter_id):
    """What the poller must decode: the bench's written values through the registers, to primary."""
    meter = profile.meter(meter_id)
    back = register_roundtrip(profile.maps[meter.map_id], bench.values[meter_id])
    return {k: to_primary(meter, k, v) for k, v in back.items()}


async def test_every_server_binds_loopback_only(profile):
    bench, bound = await started(profile, ["slow:M5:0.2"])  # a delaying front as well
    try:
        addrs = bench.listening()
        # one listener per endpoint: 6 meter ports (M2-M4 share one) + the PLC, + the back end of M5
        assert len(addrs) == 8
        assert {h for h, _ in addrs} == {"127.0.0.1"}
        assert {m.transport.host for m in bound.meters} == {"127.0.0.1"}
        ports = {m.id: m.transport.port for m in bound.meters}
        assert ports["M2"] == ports["M3"] == ports["M4"]  # the gateway of the demo profile
        assert len({ports[m] for m in ("M1", "M2", "M5", "M6", "M7", "M8")}) == 6
    finally:
        await bench.stop()


async def test_poller_reads_exactly_what_the_bench_wrote(profile):
    bench, bound = await started(profile)
    poller = Poller(bound)
    try:
        snap = await poller.poll_once()
        for m in profile.meters:
            block = snap.meters[m.id]
            assert block.state is CommState.OK, (m.id, block.error)
            want = expected_primary(profile, bench, m.id)
            for k, v in want.items():
                if k in ENERGY:  # counters move between the read and now: 1 update = 50 ms of P
                    assert block.values[k] == pytest.approx(
                        v, abs=abs(bench.values[m.id]["p.T"]) * 0.2 / 3600 + 1e-3
                    )
                else:
                    assert block.values[k] == v, (m.id, k)  # noise off: bit-identical
        # and the bench wrote what the load flow says (float32 maps: within float32 rounding)
        ideal = ideal_readings(profile, bench.switch_states()).meters["M1"]
        assert snap.meters["M1"].get("p.T") == pytest.approx(ideal["p.T"], rel=1e-6)
        assert dict(snap.switches) == {s.id: s.normal for s in profile.switches}
    finally:
        await poller.close()
        await bench.stop()


async def test_noisy_values_over_modbus_stay_inside_the_noise_bound(profile):
    bench, bound = await started(profile, noise=True, seed=11)
    poller = Poller(bound)
    try:
        ideal = ideal_readings(profile, bench.switch_states()).meters
        for _ in range(5):
            snap = await poller.poll_once()
            for m in profile.meters:
                lim_v, lim_i = class_limit(m.classes.v), class_limit(m.classes.i)
                rmap = profile.maps[m.map_id]
                for ph in "ABC":
                    res_v = (
                        rmap.spec(f"v_ln.{ph}").scale * m.vt_ratio
                        if m.reports == "secondary"
                        else 1e-4
                    )
                    v = snap.meters[m.id].get(f"v_ln.{ph}")
                    assert (
                        abs(v - ideal[m.id][f"v_ln.{ph}"])
                        <= 0.5 * lim_v * ideal[m.id][f"v_ln.{ph}"] + res_v
                    )
                    i_true = ideal[m.id][f"i.{ph}"]
                    assert (
                        abs(snap.meters[m.id].get(f"i.{ph}") - i_true)
                        <= 0.5 * lim_i * i_true + 0.01
                    )
            n = len(bench.update_times)
            await wait_until(lambda n=n: len(bench.update_times) > n, timeout=2.0)  # fresh noise
    finally:
        await poller.close()
        await bench.stop()


@pytest.mark.slow
async def test_comm_faults_seen_by_the_poller(profile):
    bench, bound = await started(profile, ["slow:M2:1.5", "exception:M3:4", "offline:M6"])
    poller = Poller(bound)
    try:
        snap = await poller.poll_once()
        m2, m3, m4, m6 = (snap.meters[k] for k in ("M2", "M3", "M4", "M6"))
        assert set(m6.quality.values()) == {Quality.TIMEOUT}  # no answer within its 0.5 s timeout
        assert set(m2.quality.values()) == {Quality.TIMEOUT}  # 1.5 s is later than 0.5 s
        assert m3.exception_code == 4 and set(m3.quality.values()) == {Quality.EXCEPTION}
        assert m4.state is CommState.OK  # same gateway port as M2 and M3, unaffected
        assert snap.meters["M1"].state is CommState.OK
        assert bench.requests_seen("M6") >= 1  # it was asked, and kept quiet
    finally:
        await poller.close()
        await bench.stop()


@pytest.mark.slow
async def test_slow_meter_answers_late_and_delays_nobody_else(profile):
    bench, bound = await started(profile, ["slow:M2:1.5"])
    slow, fast = (
        client_for(bound.meter("M2").transport, 3.0),
        client_for(bound.meter("M3").transport),
    )
    try:
        assert await slow.connect() and await fast.connect()
        t0 = time.monotonic()
        late = asyncio.create_task(slow.read_input_registers(0, count=2, device_id=2))
        await asyncio.sleep(0)
        t1 = time.monotonic()
        rr = await fast.read_holding_registers(1000, count=2, device_id=3)
        assert not rr.isError() and time.monotonic() - t1 < 0.5
        rr = await late
        assert time.monotonic() - t0 >= 1.5
        spec = profile.maps["lumen-f32"].spec("v_ln.A")
        assert decode(spec, rr.registers) == pytest.approx(bench.values["M2"]["v_ln.A"], rel=1e-6)
    finally:
        slow.close()
        fast.close()
        await bench.stop()


async def test_offline_meter_times_out_on_a_bare_client(profile):
    bench, bound = await started(profile, ["offline:M6"])
    c = client_for(bound.meter("M6").transport, timeout=0.3)
    try:
        assert await c.connect()
        with pytest.raises(ModbusIOException):
            await c.read_holding_registers(0, count=27, device_id=1)
        bench.set_faults([])  # back online at run time
        rr = await c.read_holding_registers(0, count=27, device_id=1)
        assert not rr.isError()
    finally:
        c.close()
        await bench.stop()


async def test_frozen_meter_stops_while_switching_changes_the_others(profile):
    prof = dataclasses.replace(profile, sim={**profile.sim, "settle_s": 0.2})
    bench, bound = await started(prof)
    poller = Poller(bound)
    try:
        before = await poller.poll_once()
        bench.set_faults([parse_fault("frozen:M8")])
        bench.operate_by_hand("SW2", "open")  # B2 loses its only supply (tie open): M7, M8 go dead
        await wait_until(lambda: abs(bench.values["M7"]["p.T"]) < 1.0, timeout=5.0)
        after = await poller.poll_once()
        assert dict(after.meters["M8"].values) == pytest.approx(
            dict(before.meters["M8"].values), abs=1e-9
        )
        assert after.meters["M8"].get("p.T") > 1000.0
        assert abs(after.meters["M7"].get("p.T")) < 1.0
        assert after.switches["SW2"] == "open"
    finally:
        await poller.close()
        await bench.stop()


@pytest.mark.slow
async def test_command_coil_status_follows_after_operate_time_with_a_visible_transient(profile):
    prof = dataclasses.replace(
        profile, sim={**profile.sim, "settle_s": 0.3, "transient": "first_order"}
    )
    bench, bound = await started(prof)
    poller = Poller(bound)
    plc = client_for(bound.plcs[0].transport)
    try:
        assert await plc.connect()
        p_before = (await poller.poll_once()).meters["M1"].get("p.T")
        t0 = time.monotonic()
        rr = await plc.write_coil(0, False, device_id=1)  # CB1 command coil: False = open
        assert not rr.isError()
        seen: list[float] = []

        async def status_open():
            seen.append((await poller.poll_once()).meters["M1"].get("p.T"))
            return (await poller.read_switch("CB1")) == "open"

        while not await status_open():
            assert time.monotonic() - t0 < 3.0, "CB1 status never followed its command"
        assert time.monotonic() - t0 >= profile.switch("CB1").operate_time_s  # 0.15 s mechanism
        assert (await plc.read_coils(0, count=1, device_id=1)).bits[
            0
        ] is False  # command reads back
        deadline = time.monotonic() + 5.0
        while seen[-1] > 0.02 * p_before:
            assert time.monotonic() < deadline
            seen.append((await poller.poll_once()).meters["M1"].get("p.T"))
        between = [p for p in seen if 0.1 * p_before < p < 0.9 * p_before]
        assert between, f"no reading part-way through the transient: {seen}"
    finally:
        plc.close()
        await poller.close()
        await bench.stop()


async def test_plc_refuses_coils_that_command_nothing_and_meters_refuse_writes(profile):
    bench, bound = await started(profile)
    plc, m1 = client_for(bound.plcs[0].transport), client_for(bound.meter("M1").transport)
    try:
        assert await plc.connect() and await m1.connect()
        rr = await plc.write_coil(2, False, device_id=1)  # SW3 is manual: coil 2 commands nothing
        assert rr.isError() and rr.exception_code == 2  # Modbus V1.1b3: 02 illegal data address
        rr = await m1.write_register(0, 1234, device_id=1)
        assert rr.isError() and rr.exception_code == 2
        await wait_until(lambda: len(bench.update_times) > 3, timeout=2.0)
        assert bench.switch_states()["SW3"] == "closed"
        assert bench.plc.commands == []  # nothing reached the mechanisms
    finally:
        plc.close()
        m1.close()
        await bench.stop()


async def test_offline_plc_reports_unknown_switches_and_executes_nothing(profile):
    bench, bound = await started(profile, ["offline:PLC1"])
    poller = Poller(bound)
    plc = client_for(bound.plcs[0].transport, timeout=0.3)
    try:
        snap = await poller.poll_once()
        assert set(snap.switches.values()) == {"unknown"}  # no answer: no state can be claimed
        assert snap.meters["M1"].state is CommState.OK  # the meters keep answering
        await plc.connect()
        rr = None
        with contextlib.suppress(ModbusException):
            rr = await plc.write_coil(0, False, device_id=1)  # CB1 command coil
        assert rr is None or rr.isError()
        assert bench.plc.commands == [] and bench.switch_states()["CB1"] == "closed"
        bench.set_faults(())  # back on line: the poller reads the states again
        deadline = time.monotonic() + 3.0
        while "unknown" in (await poller.poll_once()).switches.values():
            assert time.monotonic() < deadline, "switch states never came back"
    finally:
        plc.close()
        await poller.close()
        await bench.stop()


def test_a_plc_takes_only_comm_faults(profile):
    with pytest.raises(
        BenchwalkError, match="PLC1 is a PLC; a PLC takes only exception or offline"
    ):
        SimulatedBench(profile, [parse_fault("frozen:PLC1")], port_map="free")


async def test_port_in_use_is_one_clear_error(profile):
    holder = await asyncio.start_server(lambda r, w: None, "127.0.0.1", 0)
    taken = holder.sockets[0].getsockname()[1]
    bench = SimulatedBench(profile, port_map={15021: taken}, noise=False)
    try:
        with pytest.raises(
            BenchwalkError, match=rf"cannot listen on 127\.0\.0\.1:{taken}.*--free-ports"
        ):
            await bench.start()
        assert bench.listening() == []  # the servers started before the failure are closed again
    finally:
        holder.close()
        await holder.wait_closed()


async def test_rtu_meter_over_a_pty_pair(profile):
    link = PtyLink().start()
    prof = dataclasses.replace(
        profile,
        meters=tuple(
            dataclasses.replace(m, transport=RtuTransport(link.client_path, 19200, "N"))
            if m.id == "M5"
            else m
            for m in profile.meters
        ),
    )
    bench, bound = await started(prof)
    poller = Poller(bound)
    try:
        # parity N: this machine's ptys refuse PARENB (tcsetattr EINVAL), a pty ignores it anyway
        await bench.serve_rtu(link.server_path, ["M5"], baudrate=19200, parity="N")
        deadline = time.monotonic() + 5.0
        while (snap := await poller.poll_once()).meters["M5"].state is not CommState.OK:
            assert time.monotonic() < deadline, snap.meters["M5"].error
        want = expected_primary(profile, bench, "M5")
        assert dict(snap.meters["M5"].values) == want  # int16/uint16 registers: exact
        assert link.bytes_relayed > 0
    finally:
        await poller.close()
        await bench.stop()
        link.close()


def test_cli_sim_prints_endpoints_and_stops_on_ctrl_c(tmp_path):
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "tui.cli",
            "sim",
            str(DEMO),
            "--free-ports",
            "--no-noise",
            "--fault",
            "ct-reversed:M3:B",
        ],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
        cwd=ROOT,
    )
    try:
        lines = []
        deadline = time.monotonic() + 20.0
        while not any(line.startswith("SIMULATION") for line in lines):
            assert time.monotonic() < deadline and proc.poll() is None, (
                proc.stderr.read() if proc.poll() is not None else lines
            )
            lines.append(proc.stdout.readline().rstrip("\n"))
        text = "\n".join(lines)
        m1 = re.search(r"meter\s+M1\s+tcp://127\.0\.0\.1:(\d+)\s+unit 1\s+Feeder head", text)
        assert m1 and re.search(r"plc\s+PLC1\s+tcp://127\.0\.0\.1:\d+\s+unit 1", text)
        assert "fault ct-reversed:M3:B" in text and "no real equipment" in text

        async def read_v():
            c = AsyncModbusTcpClient("127.0.0.1", port=int(m1.group(1)), timeout=1.0, retries=0)
            await c.connect()
            rr = await c.read_input_registers(0, count=2, device_id=1)
            c.close()
            return decode(load_profile(DEMO).maps["lumen-f32"].spec("v_ln.A"), rr.registers)

        v = asyncio.run(read_v())
        assert 200.0 < v < 260.0 and math.isfinite(v)
        proc.send_signal(signal.SIGINT)
        assert proc.wait(timeout=10) == 0
        assert "stopped" in proc.stdout.read()
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


def test_cli_sim_bad_fault_is_one_line_exit_2(capsys):
    from tui.cli import main

    assert main(["sim", str(DEMO), "--fault", "offline:M9"]) == 2
    err = capsys.readouterr().err
    assert err.strip().count("\n") == 0 and "meter 'M9' is not in" in err and "Traceback" not in err


def test_snapshot_from_sim_with_the_real_load_flow_matches_it(profile):
    from meas.sim.meters import snapshot_from_sim

    states = {s.id: s.normal for s in profile.switches}
    snap = snapshot_from_sim(profile, states, [], np.random.default_rng(0), 1, noise=False)
    ideal = ideal_readings(profile, states).meters
    assert snap.meters["M8"].get("p.T") == pytest.approx(ideal["M8"]["p.T"], rel=1e-6)  # float32
    assert snap.meters["M3"].get("i.A") == pytest.approx(
        ideal["M3"]["i.A"], abs=1e-4 * 10 / 2 + 1e-9
    )  # 0.1 mA sec x 10
