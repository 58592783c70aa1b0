"""The poller against real pymodbus servers on loopback sockets and a real pseudo-terminal.

Register contents are encoded with ``meas.modbus.codec.encode`` and then read back through the
whole stack (client, plan, decode, scaling). Float values are chosen exactly representable
in IEEE 754-2008 binary32 (dyadic rationals with <= 24 significant bits) so equality is exact.
"""

from __future__ import annotations

import math
import random
import statistics
import time

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from support.modbus_helpers import (
    MeterServer,
    PtyLink,
    SilentServer,
    encoded,
    float_map,
    free_port,
    make_map,
    make_profile,
    plc,
    rtu_meter,
    rtu_server,
    spec,
    switch,
    tcp_meter,
    wait_until,
)

from meas.errors import BenchwalkError
from meas.modbus.codec import DecodeError, decode
from meas.modbus.decode import RequestDecoder
from meas.modbus.hardening import require_supported_pymodbus
from meas.modbus.link import backoff_delay
from meas.modbus.plan import ReadRequest
from meas.poll.cycle import Poller
from meas.scaling import to_primary
from meas.snapshot import CommState, Quality

# exactly representable in binary32 (IEEE 754-2008): 230 = 0x43660000, 5.25, 1207.5,
# -256, 63/64, 50 -> every one survives float32 encoding unchanged
EXACT = {"v_ln.A": 230.0, "i.A": 5.25, "p.T": 1207.5, "q.T": -256.0, "pf.T": 0.984375, "f.T": 50.0}


def int_map(map_id: str = "i32le") -> object:
    """int32 holding registers, low word first, fixed scaling (a common meter layout)."""
    return make_map(
        map_id,
        [
            spec("v_ln.A", 1000, "int32", "holding", word_order="little", scale=0.01),
            spec("i.A", 1002, "int32", "holding", word_order="little", scale=0.0001),
            spec("p.T", 1004, "int32", "holding", word_order="little", scale=0.01),
            spec("pf.T", 1010, "int16", "holding", scale=0.0001),
            spec("f.T", 1011, "uint16", "holding", scale=0.001),
        ],
    )


async def test_tcp_meter_values_exact_in_engineering_units():
    fmap, imap = float_map(), int_map()
    async with MeterServer(units=(1, 2)) as srv:
        await srv.load(1, fmap, EXACT)
        # raw integers chosen so raw * scale is the value below (scale/offset per meas.modbus.codec)
        await srv.load(
            2,
            imap,
            {"v_ln.A": 230.12, "i.A": 4.9876, "p.T": -1234.56, "pf.T": -0.9876, "f.T": 49.987},
        )
        prof = make_profile(
            [fmap, imap],
            [tcp_meter("M1", srv.port, 1, "f32"), tcp_meter("M2", srv.port, 2, "i32le")],
        )
        poller = Poller(prof)
        try:
            await poller.start()
            snap = await poller.poll_once()
        finally:
            await poller.close()
    b1 = snap.meters["M1"]
    assert dict(b1.values) == EXACT
    assert set(b1.quality.values()) == {Quality.OK} and b1.state is CommState.OK
    b2 = snap.meters["M2"]
    # int32 23012 * 0.01 etc.; approx only for the binary representation of the scale factors
    assert b2.values["v_ln.A"] == pytest.approx(230.12, rel=1e-12)
    assert b2.values["i.A"] == pytest.approx(4.9876, rel=1e-12)
    assert b2.values["p.T"] == pytest.approx(-1234.56, rel=1e-12)
    assert b2.values["pf.T"] == pytest.approx(-0.9876, rel=1e-12)
    assert b2.values["f.T"] == pytest.approx(49.987, rel=1e-12)
    assert b2.state is CommState.OK
    assert snap.seq == 1 and snap.time_utc.tzinfo is not None and snap.cycle_s > 0
    assert b1.latency_s > 0 and b1.last_good_utc == snap.time_utc


async def test_gateway_units_share_one_connection():
    fmap = float_map()
    async with MeterServer(units=(1, 2, 3)) as srv:
        for u in (1, 2, 3):
            await srv.load(
                u, fmap, {k: v * u for k, v in EXACT.items() if k != "pf.T"} | {"pf.T": 0.5}
            )
        prof = make_profile([fmap], [tcp_meter(f"M{u}", srv.port, u) for u in (1, 2, 3)])
        poller = Poller(prof)
        try:
            snaps = [await poller.poll_once() for _ in range(3)]
            assert len(poller.endpoint_clients) == 1
            link = next(iter(poller.endpoint_clients.values()))
            assert link.connects == 1
            assert len(srv.server.active_connections) == 1  # one TCP connection for three units
        finally:
            await poller.close()
    for u in (1, 2, 3):
        assert snaps[-1].meters[f"M{u}"].values["v_ln.A"] == 230.0 * u
        assert snaps[-1].meters[f"M{u}"].state is CommState.OK


async def test_dead_unit_behind_gateway_is_backed_off_and_spares_neighbours():
    fmap = float_map()
    timeout = 0.2
    async with MeterServer(units=(1, 2, 3), silent={2}) as srv:
        for u in (1, 2, 3):
            await srv.load(u, fmap, EXACT)
        prof = make_profile(
            [fmap],
            [tcp_meter(f"M{u}", srv.port, u, timeout_s=timeout, retries=1) for u in (1, 2, 3)],
        )
        poller = Poller(prof)
        try:
            await poller.start()
            first = await poller.poll_once()
            later = [await poller.poll_once() for _ in range(8)]
            link = next(iter(poller.endpoint_clients.values()))
            assert link.connects == 1  # the dead unit never dropped the shared link
        finally:
            await poller.close()
    assert set(first.meters["M2"].quality.values()) == {Quality.TIMEOUT}
    assert first.meters["M2"].state is CommState.FAILING
    # budget of the dead unit: timeout x (retries + 1), plus the two live units' reads
    assert first.cycle_s < timeout * 2 + 0.5
    assert any(set(s.meters["M2"].quality.values()) == {Quality.OFFLINE} for s in later)
    for s in [first, *later]:
        assert s.meters["M1"].state is CommState.OK and s.meters["M3"].state is CommState.OK
    # backed off: most later cycles do not wait on the dead unit at all
    assert statistics.median(s.cycle_s for s in later) < timeout / 2
    assert later[-1].meters["M2"].error_count == 9
    assert poller.meter_status()["M2"].last_error


async def test_meter_that_never_answers_does_not_stall_the_others():
    fmap = float_map()
    timeout = 0.25
    async with SilentServer() as dead, MeterServer() as srv:
        await srv.load(1, fmap, EXACT)
        prof = make_profile(
            [fmap],
            [tcp_meter("DEAD", dead.port, 1, timeout_s=timeout), tcp_meter("LIVE", srv.port, 1)],
        )
        poller = Poller(prof)
        try:
            t0 = time.monotonic()
            snap = await poller.poll_once()
            elapsed = time.monotonic() - t0
        finally:
            await poller.close()
    assert set(snap.meters["DEAD"].quality.values()) == {Quality.TIMEOUT}
    assert all(math.isnan(v) for v in snap.meters["DEAD"].values.values())
    assert dict(snap.meters["LIVE"].values) == EXACT
    assert elapsed < timeout + 0.4  # endpoints run concurrently: one timeout, not a sum


async def test_exception_02_gives_exception_quality_with_code():
    # a register beyond what the device serves -> Modbus exception 0x02 ILLEGAL DATA ADDRESS
    # (Modbus Application Protocol Specification V1.1b3, section 7)
    regmap = make_map("ex", [spec("v_ln.A", 0), spec("f.T", 2), spec("e_imp.T", 150, "float64")])
    async with MeterServer(registers=100) as srv:
        await srv.load(1, regmap, {"v_ln.A": 230.0, "f.T": 50.0})
        poller = Poller(make_profile([regmap], [tcp_meter("M1", srv.port, 1, map_id="ex")]))
        try:
            snap = await poller.poll_once()
        finally:
            await poller.close()
    b = snap.meters["M1"]
    assert b.quality["e_imp.T"] is Quality.EXCEPTION and b.exception_code == 2
    assert math.isnan(b.values["e_imp.T"])
    assert b.quality["v_ln.A"] is Quality.OK and b.values["v_ln.A"] == 230.0
    assert b.state is CommState.DEGRADED
    assert "0x02" in b.error


async def test_dropped_connection_reconnects_and_carries_on():
    fmap = float_map()
    port = free_port()
    srv = MeterServer(port=port)
    await srv.start()
    await srv.load(1, fmap, EXACT)
    prof = make_profile([fmap], [tcp_meter("M1", port, 1)])
    poller = Poller(prof)
    try:
        assert (await poller.poll_once()).meters["M1"].state is CommState.OK
        await srv.stop()  # the meter goes away mid-session
        link = next(iter(poller.endpoint_clients.values()))
        await wait_until(lambda: not link.connected, timeout=3)
        down = await poller.poll_once()
        assert down.meters["M1"].state is CommState.OFFLINE
        assert set(down.meters["M1"].quality.values()) == {Quality.OFFLINE}
        await srv.start()  # same port, same data
        t0 = time.monotonic()
        snap = down
        while snap.meters["M1"].state is not CommState.OK:
            assert time.monotonic() - t0 < 5.0, "no recovery within 5 s"
            snap = await poller.poll_once()
        recovery = time.monotonic() - t0
        print(f"recovery after restart: {recovery * 1000:.0f} ms")
        assert dict(snap.meters["M1"].values) == EXACT
        assert link.connects == 2
        # bounded by one backoff step (initial 0.2 s, max 1.0 s in make_profile) plus a cycle
        assert recovery < 1.0 * 1.2 + 0.5
    finally:
        await poller.close()
        await srv.stop()


async def test_nan_inf_and_impossible_values_are_decode_quality():
    fmap = float_map()
    async with MeterServer() as srv:
        await srv.load(1, fmap, EXACT)
        # IEEE 754-2008 binary32: quiet NaN 0x7FC00000, +Inf 0x7F800000
        await srv.set_words(1, "input", 0, [0x7FC0, 0x0000])  # v_ln.A
        await srv.set_words(1, "input", 10, [0x7F80, 0x0000])  # f.T
        await srv.set_words(1, "input", 2, [0xC0A8, 0x0000])  # i.A = -5.25: a negative rms current
        poller = Poller(make_profile([fmap], [tcp_meter("M1", srv.port)]))
        try:
            b = (await poller.poll_once()).meters["M1"]
        finally:
            await poller.close()
    for k in ("v_ln.A", "f.T", "i.A"):
        assert b.quality[k] is Quality.DECODE and math.isnan(b.values[k]), k
    assert b.quality["p.T"] is Quality.OK and b.values["p.T"] == 1207.5
    assert b.state is CommState.DEGRADED


async def test_secondary_values_scaled_by_ct_and_vt_ratio():
    # primary = secondary x ratio; power scales with CT x VT (common practice, IEC 61869 ratios)
    regmap = float_map("sec", ("v_ln.A", "v_ll.AB", "i.A", "p.T", "q.T", "pf.T", "f.T"))
    sec = {
        "v_ln.A": 57.75,
        "v_ll.AB": 100.0,
        "i.A": 0.5,
        "p.T": 25.0,
        "q.T": -4.0,
        "pf.T": 0.75,
        "f.T": 50.0,
    }
    async with MeterServer() as srv:
        await srv.load(1, regmap, sec)
        meter = tcp_meter(
            "M3", srv.port, 1, map_id="sec", reports="secondary", ct_ratio=10.0, vt_ratio=4.0
        )
        poller = Poller(make_profile([regmap], [meter]))
        try:
            b = (await poller.poll_once()).meters["M3"]
        finally:
            await poller.close()
    assert b.values["v_ln.A"] == 231.0 and b.values["v_ll.AB"] == 400.0
    assert b.values["i.A"] == 5.0
    assert b.values["p.T"] == 1000.0 and b.values["q.T"] == -160.0
    assert b.values["pf.T"] == 0.75 and b.values["f.T"] == 50.0


async def test_plc_status_points_into_snapshot_switches():
    fmap = float_map()
    async with MeterServer() as srv:
        await srv.set_bits(1, "discrete", 0, [True, False, True])
        await srv.set_bits(1, "coil", 7, [True])
        sws = [
            switch("CB1", "PLC1", 0),
            switch("SW2", "PLC1", 1),
            switch("SW3", "PLC1", 2),
            switch("K7", "PLC1", 7, kind="coil"),
            switch("MAN", None, None),
            switch("GHOST", "PLC2", 0),
        ]
        dead_port = free_port()  # nothing listens there
        prof = make_profile(
            [fmap], [], plcs=[plc("PLC1", srv.port), plc("PLC2", dead_port)], switches=sws
        )
        poller = Poller(prof)
        try:
            snap = await poller.poll_once()
            await srv.set_bits(1, "discrete", 1, [True])
            snap2 = await poller.poll_once()
        finally:
            await poller.close()
    assert dict(snap.switches) == {
        "CB1": "closed",
        "SW2": "open",
        "SW3": "closed",
        "K7": "closed",
        "MAN": "unknown",
        "GHOST": "unknown",
    }
    assert snap2.switches["SW2"] == "closed"
    assert poller.plc_status()["PLC1"].state is CommState.OK
    assert poller.plc_status()["PLC2"].state is CommState.OFFLINE


async def test_rtu_meter_over_pseudo_terminal():
    fmap = float_map()
    link = PtyLink().start()
    server = await rtu_server(link.server_path, units=(1, 5))
    try:
        for u in (1, 5):
            values = {k: v * u for k, v in EXACT.items() if k != "pf.T"} | {"pf.T": 0.5}
            for _kind, address, words in encoded(fmap, values):
                await server.async_setValues(u, 4, address, words)
        prof = make_profile(
            [fmap], [rtu_meter("R1", link.client_path, 1), rtu_meter("R5", link.client_path, 5)]
        )
        poller = Poller(prof)
        try:
            snap = await poller.poll_once()
            snap = await poller.poll_once()
            assert len(poller.endpoint_clients) == 1  # one serial port, one client
        finally:
            await poller.close()
    finally:
        await server.shutdown()
        link.close()
    assert snap.meters["R1"].values["v_ln.A"] == 230.0 and snap.meters["R1"].state is CommState.OK
    assert snap.meters["R5"].values["p.T"] == 1207.5 * 5 and snap.meters["R5"].state is CommState.OK
    assert link.bytes_relayed > 0  # the bytes really crossed the tty pair


async def test_unreachable_meter_never_raises_and_reports_offline():
    fmap = float_map()
    prof = make_profile([fmap], [tcp_meter("M1", free_port(), 1)])
    poller = Poller(prof)
    try:
        await poller.start()
        snap = await poller.poll_once()
        status = poller.meter_status()["M1"]
    finally:
        await poller.close()
    assert snap.meters["M1"].state is CommState.OFFLINE
    assert status.state is CommState.OFFLINE and "cannot connect" in status.last_error
    assert snap.meters["M1"].last_good_utc is None


async def test_run_yields_cycles_at_a_steady_rate():
    fmap = float_map()
    async with MeterServer() as srv:
        await srv.load(1, fmap, EXACT)
        poller = Poller(make_profile([fmap], [tcp_meter("M1", srv.port)]))
        snaps = []
        try:
            async for s in poller.run(interval_s=0.05):
                snaps.append(s)
                if len(snaps) == 6:
                    break
        finally:
            await poller.close()
    assert [s.seq for s in snaps] == [1, 2, 3, 4, 5, 6]
    gaps = [b.t_mono - a.t_mono for a, b in zip(snaps, snaps[1:], strict=False)]
    assert 0.04 < statistics.median(gaps) < 0.08


def test_backoff_doubles_with_jitter_and_caps():
    rng = random.Random(1)
    for n, base in [(1, 0.5), (2, 1.0), (3, 2.0), (4, 4.0)]:
        for _ in range(50):
            d = backoff_delay(n, 0.5, 10.0, rng)
            assert base * 0.8 <= d <= base * 1.2
    assert all(backoff_delay(12, 0.5, 10.0, rng) <= 10.0 for _ in range(50))
    assert len({round(backoff_delay(3, 0.5, 10.0, rng), 6) for _ in range(20)}) > 1  # jittered


def test_an_unsupported_pymodbus_is_refused_in_one_line():
    """The client hardening reaches into 3.16 internals: any other release must stop us early."""
    require_supported_pymodbus()  # the installed one (pinned in pyproject.toml) is fine
    require_supported_pymodbus("3.16.9")
    for version in ("3.16.0", "3.17.0", "3.17.0rc1", "4.0", "3.9.2"):
        with pytest.raises(BenchwalkError, match=rf"pymodbus {version} is installed") as err:
            require_supported_pymodbus(version)
        assert "\n" not in str(err.value) and ">=3.16.1,<3.17" in str(err.value)


_DTYPES = ["int16", "uint16", "int32", "uint32", "float32", "float64"]


@settings(max_examples=120, deadline=None)
@given(
    layout=st.lists(
        st.tuples(
            st.sampled_from(_DTYPES),
            st.sampled_from(["big", "little"]),
            st.sampled_from(["big", "little"]),
            st.integers(0, 3),
        ),
        min_size=1,
        max_size=6,
    ),
    words=st.lists(st.integers(0, 0xFFFF), min_size=40, max_size=40),
    scale=st.sampled_from([1.0, 0.01, 0.0001]),
    secondary=st.booleans(),
)
def test_request_decoder_matches_registers_decode(layout, words, scale, secondary):
    """The poller's one-pass decoder == meas.modbus.codec.decode then meas.scaling.to_primary."""
    keys = ["v_ln.A", "i.B", "p.T", "q.C", "pf.T", "f.T"]
    specs, addr = [], 0
    for (dtype, wo, bo, gap), key in zip(layout, keys, strict=False):
        addr += gap
        specs.append(spec(key, addr, dtype, "holding", word_order=wo, byte_order=bo, scale=scale))
        addr += specs[-1].count
    req = ReadRequest("holding", 0, addr, tuple(s.key for s in specs))
    meter = tcp_meter(
        "M", 1, reports="secondary" if secondary else "primary", ct_ratio=10.0, vt_ratio=4.0
    )
    values, quality, errors = {}, {}, []
    RequestDecoder(req, {s.key: s for s in specs}, meter).decode(
        words[:addr], values, quality, errors
    )
    for s in specs:
        try:
            ref = to_primary(meter, s.key, decode(s, words[s.address : s.end]))
        except DecodeError:
            assert quality[s.key] is Quality.DECODE
            continue
        if quality[s.key] is Quality.OK:
            assert values[s.key] == ref
        else:  # refused only as an impossible value for its quantity
            assert quality[s.key] is Quality.DECODE and any("impossible" in e for e in errors)
            assert ref < 0 or abs(ref) > 1.001


async def test_units_with_different_timeouts_keep_their_own_budget():
    fmap = float_map()
    async with MeterServer(units=(1, 2), silent={2}) as srv:
        for u in (1, 2):
            await srv.load(u, fmap, EXACT)
        prof = make_profile(
            [fmap],
            [
                tcp_meter("SLOWOK", srv.port, 1, timeout_s=2.0),
                tcp_meter("DEAD", srv.port, 2, timeout_s=0.15),
            ],
        )
        poller = Poller(prof)
        try:
            snap = await poller.poll_once()
        finally:
            await poller.close()
    assert snap.meters["SLOWOK"].state is CommState.OK
    assert set(snap.meters["DEAD"].quality.values()) == {Quality.TIMEOUT}
    assert snap.cycle_s < 0.15 + 0.5  # the dead unit's 0.15 s, not the gateway's longest 2 s
