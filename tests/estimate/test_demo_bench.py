"""The estimator on the demo bench with a true network that is not the nameplate model.

Readings: tests/support/estimate_bench.py (the simulated bench's load flow and meter emulation,
every model parameter drawn within its tolerance, meter gains within their classes, seeded).
The expected outcomes are the estimator's contract (issue 11), not numbers from a source: the
right meter and cause, or coverage saying beforehand that it cannot be seen.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from support.estimate_bench import as_built, capture, demo, meter_gains, sequence_states

from meas.checks import CheckEngine
from meas.estimate import Estimator
from meas.results import Status
from meas.sim.faults import parse_fault

SEED = 5


@pytest.fixture(scope="module")
def bench():
    prof = demo()
    return prof, as_built(prof, SEED), meter_gains(prof, SEED), dict(sequence_states(prof))


def test_vt_ratio_on_the_lone_lateral_meter_is_named_in_the_first_step_that_loads_the_lateral(
    bench,
) -> None:
    prof, true, gains, steps = bench
    est = Estimator(prof)
    rng = np.random.default_rng(1)
    order = list(steps)
    first = order.index("pick-up-lateral")  # the first step with SW3 closed
    for sid in order[:first]:
        e = est.run([capture(true, steps[sid], (parse_fault("vt-ratio:M5:1.1"),), rng, gains)])
        assert not e.findings, sid  # M5's bus is dead before: nothing to see, nothing blamed
    e = est.run(
        [capture(true, steps["pick-up-lateral"], (parse_fault("vt-ratio:M5:1.1"),), rng, gains)]
    )
    assert len(e.findings) == 1
    f = e.findings[0]
    assert f.meters == ("M5",)
    assert f.cause.startswith("vt_ratio:")
    assert float(f.cause.split(":")[1]) == pytest.approx(1.1, abs=0.01)
    assert "VT ratio" in f.sentence and f.figure > f.limit


def test_clean_capture_passes_and_says_what_it_cannot_verify(bench) -> None:
    prof, true, gains, steps = bench
    e = Estimator(prof).run(
        [capture(true, steps["reactor-in"], (), np.random.default_rng(2), gains)]
    )
    assert e.converged and not e.findings
    assert e.chi2_ok
    # the tie is open: nothing predicts M4's current, so its CT ratio is unverified, not passed
    cov = e.coverage_of("M4", "ct_ratio")
    assert cov is not None and not cov.detectable
    assert any(u.meter == "M4" and "current" in u.quantity for u in e.unverified)
    m5 = e.coverage_of("M5", "vt_ratio")
    assert m5 is not None and m5.detectable and 0 < m5.min_factor < 0.05
    assert "detectable beyond ±" in m5.reason
    # with the tie carrying load bank 2, M4's CT ratio becomes detectable
    e2 = Estimator(prof).run(
        [capture(true, steps["transfer-lb2"], (), np.random.default_rng(3), gains)]
    )
    c2 = e2.coverage_of("M4", "ct_ratio")
    assert c2 is not None and c2.detectable


def test_identification_does_not_depend_on_profile_order(bench) -> None:
    prof, true, gains, steps = bench
    flipped = dataclasses.replace(prof, meters=tuple(reversed(prof.meters)))
    for fault, sid in (("ct-reversed:M7:B", "reactor-in"), ("ct-ratio:M8:0.8", "load-bank-2")):
        caps = capture(true, steps[sid], (parse_fault(fault),), np.random.default_rng(4), gains)
        a = Estimator(prof).run([caps])
        b = Estimator(flipped).run([caps])
        assert [(f.meters, f.cause) for f in a.findings] == [
            (f.meters, f.cause) for f in b.findings
        ]
        assert a.findings and a.findings[0].meters == (parse_fault(fault).meter,)


def test_joint_session_shares_gains_across_steps(bench) -> None:
    prof, true, gains, steps = bench
    rng = np.random.default_rng(6)
    caps = [
        capture(true, steps[s], (), rng, gains) for s in ("load-bank-2", "reactor-in", "close-tie")
    ]
    e = Estimator(prof).run(caps)
    assert e.converged and e.steps == 3 and not e.findings
    # three configurations: M4's CT ratio is covered by the meshed step
    c = e.coverage_of("M4", "ct_ratio")
    assert c is not None and c.detectable
    # each estimated gain within its prior's 4 sigma of the drawn truth (gains within class)
    for g in e.gains:
        true_gain = gains[g.meter][0 if g.kind == "voltage" else 1]
        assert abs(g.value - true_gain) < 4 * g.prior_std, g


def test_branch_without_model_data_makes_its_readings_unverified(bench) -> None:
    prof, true, gains, steps = bench
    cut = tuple(
        dataclasses.replace(b, model=None) if b.id in ("L3", "LD3") else b for b in prof.branches
    )
    e = Estimator(dataclasses.replace(prof, branches=cut)).run(
        [capture(true, steps["load-bank-2"], (), np.random.default_rng(7), gains)]
    )
    assert e.converged
    m3 = [u for u in e.unverified if u.meter == "M3"]
    assert m3 and "L3" in m3[0].reason and "\n" not in m3[0].reason


def test_a_fit_that_does_not_converge_says_so(bench) -> None:
    prof, true, gains, steps = bench
    caps = capture(true, steps["reactor-in"], (), np.random.default_rng(8), gains)
    e = Estimator(prof, max_iter=0).run([caps])
    assert not e.converged
    assert "did not converge" in e.why and "0 iterations" in e.why
    assert not e.findings
    assert {u.meter for u in e.unverified} >= {"M1", "M2", "M8"}


def test_check_family_names_the_meter_and_leaves_the_rest_honest(bench) -> None:
    prof, true, gains, steps = bench
    snaps = capture(
        true,
        steps["pick-up-lateral"],
        (parse_fault("vt-ratio:M5:1.1"),),
        np.random.default_rng(9),
        gains,
    )
    res = [
        r for r in CheckEngine(prof).run(snaps[-1], snaps[:-1]) if r.check == "network.model_fit"
    ]
    by = {r.subject: r for r in res}
    assert by["M5"].status is Status.FAIL and by["M5"].cause.startswith("vt_ratio:1.1")
    assert by["M5"].residual > 1.0
    assert all(r.status is not Status.FAIL for s, r in by.items() if s != "M5")
    # LB2 is open: M5 measures no current, and M4 (tie open) has nothing to predict its current
    assert by["M4"].status is Status.NA and by["M4"].cause == "unverified"
    clean = capture(true, steps["reactor-in"], (), np.random.default_rng(10), gains)
    res2 = {
        r.subject: r
        for r in CheckEngine(prof).run(clean[-1], clean[:-1])
        if r.check == "network.model_fit"
    }
    assert res2["bench"].status is Status.PASS
    assert res2["M8"].status is Status.PASS and res2["M8"].residual < 1.0


def test_unknown_switch_state_leaves_the_step_unchecked(bench) -> None:
    prof, true, gains, steps = bench
    snaps = capture(true, steps["reactor-in"], (), np.random.default_rng(11), gains)
    blind = [dataclasses.replace(s, switches={**s.switches, "SW3": "unknown"}) for s in snaps]
    e = Estimator(prof).run([blind])
    assert not e.converged and "SW3" in e.why and "unknown" in e.why
    assert not e.findings
