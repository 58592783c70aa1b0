"""The fault matrix of test_fault_matrix.py on the second, meshed bench (tests/support/meshed_bench).

A ring with a Dyn11 transformer and a lone meter on each side of it (MT, ML): redundancy comes
from the model and from the other meters' flows, not from twin meters. For each meter and each
of VT ratio 0.9 and 1.1, CT ratio 0.8, a reversed CT per phase and a swapped pair of current
inputs, in two configurations (ring closed with the transformer and its LV load in; ring open
at QA, so MA's line carries nothing): the fault is named on the right meter with the right
cause, or the coverage of a clean capture of the same configuration said beforehand that this
bench cannot see it there; never a wrong meter, never two meters. The as-built model is drawn
within tolerance from each seed (tests/support/estimate_bench.py). The contract is issue 11's;
no source number is involved.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from support.estimate_bench import (
    as_built,
    assert_named_or_uncovered,
    capture,
    fault_matrix,
    meter_gains,
    sequence_states,
)
from support.meshed_bench import HV_METER, LV_METER, meshed_bench

from meas.estimate import Estimator
from meas.sim.faults import parse_fault

pytestmark = pytest.mark.long  # minutes: pytest -m long (DEVELOPERS.md)

STEPS = ("lv-load", "open-ring-a")
SOAK = os.environ.get("BENCHWALK_SOAK") == "1"
# the whole matrix (45 faults) per seed with BENCHWALK_SOAK=1; by default every third, the
# starting point rotated by the seed so that two seeds cover two thirds of it
EVERY = 1 if SOAK else 3
SEEDS = (1, 2, 3) if SOAK else (1, 2)


@pytest.mark.slow
@pytest.mark.parametrize("seed", SEEDS)
def test_fault_matrix_on_the_meshed_bench(seed: int) -> None:
    prof, _ = meshed_bench()
    true, gains = as_built(prof, seed), meter_gains(prof, seed)
    states = dict(sequence_states(prof))
    est = Estimator(prof)
    rng = np.random.default_rng(seed)
    coverage = {sid: est.run([capture(true, states[sid], (), rng, gains)]) for sid in STEPS}
    for sid, e in coverage.items():
        assert e.converged and not e.findings and e.chi2_ok, (seed, sid)
    # the lone meters on each side of the transformer are covered for a VT ratio error
    for m in (HV_METER, LV_METER):
        cov = coverage["lv-load"].coverage_of(m, "vt_ratio")
        assert cov is not None and cov.detectable, (seed, m)
    named = 0
    matrix = fault_matrix([m.id for m in prof.meters])
    for text in matrix[(seed - 1) % EVERY :: EVERY]:
        f = parse_fault(text)
        for sid in STEPS:
            e = est.run([capture(true, states[sid], (f,), rng, gains)])
            named += assert_named_or_uncovered(e, f, coverage[sid], (seed, text, sid))
    assert named >= 0.8 * 2 * len(matrix[(seed - 1) % EVERY :: EVERY])  # most are visible
