"""The simulated bench's ``offset`` fault: one reading off by a constant, nothing else changed.

Expected values are the fault's own definition (docs/faults.md): the amount, in the reading's
primary unit, is added to that one reported value after noise and derivation; the reading's
register resolution is the only other difference the poller sees.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from meas.errors import BenchwalkError
from meas.profile import load_profile
from meas.quantities import all_keys
from meas.sim.faults import Fault, offset_of, parse_fault, validate_faults
from meas.sim.meters import snapshot_from_sim

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"


@pytest.fixture(scope="module")
def profile():
    return load_profile(DEMO)


def test_offset_parses_with_its_key_and_amount() -> None:
    f = parse_fault("offset:M3:i.B:+2.5")
    assert f == Fault("offset", "M3", "i.B:+2.5")
    assert offset_of(f) == ("i.B", 2.5)
    assert parse_fault(f.text) == f  # the text round-trips
    assert offset_of(parse_fault("offset:M8:p.T:-3e3")) == ("p.T", -3000.0)


@pytest.mark.parametrize(
    ("text", "says"),
    [
        ("offset:M3", "write offset:METER:KEY:AMOUNT"),
        ("offset:M3:i.B", "write offset:METER:KEY:AMOUNT"),
        ("offset:M3:i.B:1:2", "write offset:METER:KEY:AMOUNT"),
        ("offset:M3:x.B:1", "is not a reading key"),
        ("offset:M3:i.B:abc", "is not a number"),
        ("offset:M3:i.B:inf", "finite number"),
    ],
)
def test_offset_errors_are_one_clear_line(text: str, says: str) -> None:
    with pytest.raises(BenchwalkError) as err:
        parse_fault(text)
    assert says in str(err.value) and "\n" not in str(err.value) and text in str(err.value)


def test_offset_on_a_reading_the_map_lacks_is_refused(profile) -> None:
    meter, key = next(
        (m, k)
        for m in profile.meters
        for k in all_keys()
        if k not in {r.key for r in profile.maps[m.map_id].registers}
    )
    with pytest.raises(BenchwalkError, match=rf"{meter.id}'s register map has no {key}"):
        validate_faults(profile, [parse_fault(f"offset:{meter.id}:{key}:1")])


@pytest.mark.parametrize(("meter", "key", "amount"), [("M3", "i.B", 2.5), ("M8", "p.T", -3000.0)])
def test_offset_moves_one_reading_only(profile, meter: str, key: str, amount: float) -> None:
    states = {s.id: s.normal for s in profile.switches}
    fault = parse_fault(f"offset:{meter}:{key}:{amount}")
    validate_faults(profile, [fault])
    ok = snapshot_from_sim(profile, states, (), np.random.default_rng(1), 0, noise=False)
    bad = snapshot_from_sim(profile, states, (fault,), np.random.default_rng(1), 0, noise=False)
    a, b = ok.meters[meter].values, bad.meters[meter].values
    assert b[key] - a[key] == pytest.approx(amount, abs=0.02)  # register resolution at most
    assert {k for k in a if b[k] != a[k]} == {key}  # nothing else, not even p.T's sum
    assert all(ok.meters[m].values == bad.meters[m].values for m in ok.meters if m != meter)
