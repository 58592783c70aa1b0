"""No false fails: the clean bench, with an as-built model off its nameplate, across every
combination of the demo's six switches (64 states), several model draws and noise seeds.

At least 1,000 single-snapshot estimates (the check family's smallest input) with
BENCHWALK_SOAK=1 (16 model draws); otherwise 2 draws (128), some 13 s on a loaded 2-core
machine: a ``slow`` test (``pytest -m slow``), no longer ``long``. Readings and
as-built models: tests/support/estimate_bench.py. Contract: issue 11 ("0 false fails").
"""

from __future__ import annotations

import itertools
import os

import numpy as np
import pytest
from support.estimate_bench import as_built, capture, demo, meter_gains

from meas.estimate import Estimator

DRAWS = 16 if os.environ.get("BENCHWALK_SOAK") == "1" else 2


@pytest.mark.slow
def test_no_false_fails_over_a_thousand_snapshots() -> None:
    prof = demo()
    ids = [s.id for s in prof.switches]
    combos = [
        dict(zip(ids, ("closed" if b else "open" for b in bits), strict=True))
        for bits in itertools.product((0, 1), repeat=len(ids))
    ]
    est = Estimator(prof)
    runs = 0
    for seed in range(DRAWS):
        true, gains = as_built(prof, 100 + seed), meter_gains(prof, 100 + seed)
        rng = np.random.default_rng(seed)
        for states in combos:
            e = est.run([capture(true, states, (), rng, gains, n=1)])
            assert not e.findings, (seed, states, [f.sentence for f in e.findings])
            assert e.converged, (seed, states, e.why)
            assert e.chi2_ok, (seed, states, e.chi2, e.chi2_limit)
            runs += 1
    assert runs >= 64 * DRAWS >= 128
