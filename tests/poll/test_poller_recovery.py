"""A meter that comes back is read again within about 2 s, while the healthy meters keep their
cycle; a meter dead for thousands of cycles never breaks the backoff (real loopback Modbus).

The timing figure itself is in ``benchmarks/bench_recovery.py`` (target: median and worst
under 2 s); this test prints its median and worst and asserts only a generous bound, so a
loaded CI machine does not make it flaky.
"""

from __future__ import annotations

import logging
import math
import random

import pytest
from support.modbus_helpers import float_map, free_port, make_profile, tcp_meter
from support.recovery import run_recovery

from meas.modbus.link import Backoff, backoff_delay
from meas.model import PollSettings
from meas.poll.cycle import RETURN_PROBE_MAX_S, Poller
from meas.snapshot import CommState


def test_backoff_delay_is_bounded_for_any_number_of_failures() -> None:
    """Past ~1,025 failures ``2 ** n`` no longer fits a float: the delay must stay the cap."""
    rng = random.Random(4)
    for n in (1, 2, 10, 64, 1024, 1025, 1100, 5000, 10**6, 10**12):
        d = backoff_delay(n, 0.5, 10.0, rng)
        assert math.isfinite(d) and 0.4 <= d <= 10.0
    b = Backoff(0.5, 10.0, rng)
    for i in range(5000):
        delay = b.fail(float(i))
        assert 0.0 < delay <= 10.0
    assert b.failures == 5000 and b.next_try <= 4999 + 10.0


@pytest.mark.slow
async def test_5000_consecutive_failures_of_one_meter_no_traceback_bounded_delay(caplog) -> None:
    """One meter whose port refuses every connect, 5,000 cycles in a row (a short backoff so
    every cycle tries), beside a healthy one: no exception escapes, no error is logged, the
    delay stays within the cap and the healthy meter is read every cycle."""
    from support.modbus_helpers import MeterServer
    from support.recovery import VALUES

    fmap = float_map()
    dead_port = free_port()  # nothing listens here
    async with MeterServer() as srv:
        await srv.load(1, fmap, VALUES)
        prof = make_profile(
            [fmap],
            [tcp_meter("LIVE", srv.port, 1), tcp_meter("DEAD", dead_port, 1, timeout_s=0.05)],
            poll=PollSettings(interval_s=0.0, backoff_initial_s=1e-6, backoff_max_s=2e-6),
        )
        poller = Poller(prof)
        caplog.set_level(logging.WARNING)
        try:
            await poller.start()
            dead_link = next(
                link for link in poller.endpoint_clients.values() if str(dead_port) in link.endpoint
            )
            ok = 0
            for _ in range(5000):
                snap = await poller.poll_once(deadline_s=0.0)
                # refused (offline) or, when a loaded machine runs past the cycle's deadline
                # first, unanswered (failing): either way not read, and never an exception
                dead = snap.meters["DEAD"]
                assert dead.state in (CommState.OFFLINE, CommState.FAILING)
                assert all(math.isnan(v) for v in dead.values.values())
                ok += snap.meters["LIVE"].state is CommState.OK
        finally:
            await poller.close()
    assert dead_link.backoff.failures >= 5000  # every cycle dialled and failed, none crashed
    assert dead_link.backoff.next_try - 0 > 0 and "next try in 0.0 s" in dead_link.last_error
    assert snap.meters["DEAD"].error_count == 5000
    assert ok >= 4990  # the healthy meter was read (almost) every cycle
    assert not [r for r in caplog.records if r.levelno >= logging.ERROR], caplog.text
    assert "Traceback" not in caplog.text


@pytest.mark.slow
async def test_returning_meter_is_read_again_quickly_while_healthy_meters_keep_their_cycle():
    run = await run_recovery((2.0, 4.0, 6.0))
    print(run.summary())
    print(
        f"healthy meters OK in {run.healthy_ok_fraction():.1%} of {len(run.snapshots)} cycles; "
        f"largest gap between cycles {run.largest_gap_s():.2f} s"
    )
    assert len(run.all_returns) == 6
    # the designed bound is RETURN_PROBE_MAX_S x 1.2 + one cycle (~1.7 s); generous for CI
    assert max(run.all_returns) < 2 * (RETURN_PROBE_MAX_S * 1.2 + 0.2) + 1.0
    assert run.healthy_ok_fraction() >= 0.95
    assert run.largest_gap_s() < 1.0
