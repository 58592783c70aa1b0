"""Two more named causes on the demo bench: one reading offset by a constant, a meter frozen.

The true network is the demo with every model parameter drawn within its tolerance and meter
gains within their classes (tests/support/estimate_bench.py, seeded); the offset comes from the
simulated bench's ``offset`` fault, a frozen meter repeats the registers of its last poll in the
step it froze in (what ``frozen`` does on the simulated bench). The expected outcomes are the
estimator's contract: the right meter with the right cause, or coverage saying beforehand that
it cannot be seen there; never a wrong meter, never two; nothing named on a clean bench. No
source number is involved: the injected offset is the reference for the estimated one.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from support.estimate_bench import as_built, capture, demo, meter_gains, sequence_states

from meas.estimate import Estimate, Estimator
from meas.sim.faults import offset_of, parse_fault
from meas.snapshot import Snapshot

SEED = 5
SESSION = ("load-bank-2", "reactor-in", "close-tie", "transfer-lb2")


@pytest.fixture(scope="module")
def bench():
    prof = demo()
    return prof, as_built(prof, SEED), meter_gains(prof, SEED), dict(sequence_states(prof))


def _session(bench, meter: str | None, k0: int, seed: int, sids=SESSION) -> list[list[Snapshot]]:
    """Captures of ``sids``; ``meter`` frozen after step ``k0``: its registers keep the values
    of that step's last poll in every later step."""
    prof, true, gains, steps = bench
    rng = np.random.default_rng(seed)
    caps = [capture(true, steps[s], (), rng, gains) for s in sids]
    if meter is not None:
        held = caps[k0][-1].meters[meter]
        for k in range(k0 + 1, len(caps)):
            caps[k] = [dataclasses.replace(s, meters={**s.meters, meter: held}) for s in caps[k]]
    return caps


def _offset_finding(e: Estimate, text: str) -> None:
    f = parse_fault(text)
    key, amount = offset_of(f)
    where = (text, [x.sentence for x in e.findings])
    assert len(e.findings) == 1, where
    x = e.findings[0]
    assert x.meters == (f.meter,), where
    tag, k, value = x.cause.split(":")
    assert (tag, k) == ("offset", key), where
    # the injected amount within the estimate's 4 sigma (and a sentence that says so in words)
    u = float(x.sentence.split(" ± ")[1].split()[0])
    assert abs(float(value) - amount) <= max(4 * u, 0.01 * abs(amount)), where
    assert "looks offset" in x.sentence and key in x.sentence and x.figure > x.limit


@pytest.mark.parametrize(
    ("text", "sid"),
    [
        ("offset:M3:i.B:+3", "transfer-lb2"),
        ("offset:M8:p.T:-3000", "reactor-in"),
        ("offset:M1:v_ln.A:+5", "pick-up-lateral"),
    ],
)
def test_an_offset_on_one_reading_is_named_on_its_meter(bench, text: str, sid: str) -> None:
    prof, true, gains, steps = bench
    f = parse_fault(text)
    key, amount = offset_of(f)
    est = Estimator(prof)
    clean = est.run([capture(true, steps[sid], (), np.random.default_rng(21), gains)])
    assert clean.converged and not clean.findings
    cov = clean.coverage_of(f.meter, f"offset:{key}")
    assert cov is not None and cov.detectable, cov
    # said beforehand: the smallest detectable offset is well below the injected one
    assert "detectable beyond ±" in cov.reason
    smallest = float(cov.reason.split("±")[1].split()[0])
    assert smallest < abs(amount) / 2
    e = est.run([capture(true, steps[sid], (f,), np.random.default_rng(22), gains)])
    _offset_finding(e, text)


def test_an_offset_over_a_session_is_one_amount_in_every_step(bench) -> None:
    prof, true, gains, steps = bench
    text = "offset:M7:q.T:+800"
    rng = np.random.default_rng(31)
    caps = [capture(true, steps[s], (parse_fault(text),), rng, gains) for s in SESSION[:3]]
    e = Estimator(prof).run(caps)
    _offset_finding(e, text)
    assert "every step" in e.findings[0].sentence


def test_a_ratio_error_stays_a_ratio_error(bench) -> None:
    """A VT ratio is a gain on all of a meter's voltages: no single-reading offset explains it
    as well, so the cause stays the ratio (issue 11's example)."""
    prof, true, gains, steps = bench
    caps = capture(
        true, steps["pick-up-lateral"], (parse_fault("vt-ratio:M5:1.1"),), np.random.default_rng(1),
        gains,
    )  # fmt: skip
    e = Estimator(prof).run([caps])
    assert [f.meters for f in e.findings] == [("M5",)]
    assert e.findings[0].cause.startswith("vt_ratio:")


def test_offset_identification_does_not_depend_on_profile_order(bench) -> None:
    prof, true, gains, steps = bench
    flipped = dataclasses.replace(prof, meters=tuple(reversed(prof.meters)))
    caps = capture(
        true, steps["close-tie"], (parse_fault("offset:M2:i.C:-2"),), np.random.default_rng(4),
        gains,
    )  # fmt: skip
    a = Estimator(prof).run([caps])
    b = Estimator(flipped).run([caps])
    assert [(f.meters, f.cause) for f in a.findings] == [(f.meters, f.cause) for f in b.findings]
    assert a.findings and a.findings[0].meters == ("M2",)


def _frozen_case(bench, meter: str, k0: int) -> None:
    prof = bench[0]
    est = Estimator(prof)
    clean = est.run(_session(bench, None, 0, seed=40 + k0))
    assert clean.converged and not clean.findings
    cov = clean.coverage_of(meter, "frozen")
    assert cov is not None
    e = est.run(_session(bench, meter, k0, seed=40 + k0))
    where = (meter, k0, [x.sentence for x in e.findings])
    assert len(e.findings) <= 1, where
    for x in e.findings:
        assert x.meters == (meter,), where  # never a wrong meter, never two
    if not cov.detectable:
        return
    assert e.findings, where
    x = e.findings[0]
    assert x.cause == f"frozen:{k0 + 2}", where  # numbered from 1: the first step that repeated
    assert "looks frozen" in x.sentence and f"from the {k0 + 2}" in x.sentence, where


def test_a_frozen_meter_is_named_across_steps(bench) -> None:
    _frozen_case(bench, "M7", 0)


@pytest.mark.slow
@pytest.mark.parametrize(("meter", "k0"), [("M3", 1), ("M4", 1), ("M5", 0), ("M8", 0), ("M2", 2)])
def test_every_kind_of_meter_frozen(bench, meter: str, k0: int) -> None:
    _frozen_case(bench, meter, k0)


@pytest.mark.parametrize("seed", [50, 51, 52])
def test_clean_sessions_name_neither_offset_nor_frozen(bench, seed: int) -> None:
    prof, _, _, steps = bench
    order = list(steps)
    sids = order[seed % 3 : seed % 3 + 4]
    e = Estimator(prof).run(_session(bench, None, 0, seed, tuple(sids)))
    assert e.converged and e.chi2_ok and not e.findings, [f.sentence for f in e.findings]
    kinds = {c.error_kind.split(":")[0] for c in e.coverage}
    assert {"offset", "frozen"} <= kinds


def test_one_capture_has_no_frozen_coverage_row(bench) -> None:
    """Within one capture the local check quality.frozen watches the polls: the estimator's
    frozen cause needs two steps, and a single capture does not claim to cover it."""
    prof, true, gains, steps = bench
    e = Estimator(prof).run(
        [capture(true, steps["reactor-in"], (), np.random.default_rng(3), gains)]
    )
    assert e.converged
    assert not [c for c in e.coverage if c.error_kind == "frozen"]
    assert [c for c in e.coverage if c.error_kind.startswith("offset:")]
