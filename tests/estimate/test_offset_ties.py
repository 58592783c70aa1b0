"""The offset coverage names ties from all rows at once; it must say what ``More.rho`` says
hypothesis by hypothesis (|ρ| >= TIE_RHO with a hypothesis of another meter, either family).

Random signature matrices with exact copies (ρ = ±1) stand in for benches whose readings
cannot be told apart; the reference is the per-hypothesis definition, not a stored answer.
"""

from __future__ import annotations

import numpy as np

from meas.estimate.diagnose import TIE_RHO, Hypothesis
from meas.estimate.diagnose import Tests as HypothesisTests
from meas.estimate.offset_frozen import More
from meas.estimate.offset_frozen_words import _tied_all


def _one_by_one(mo: More, ts: HypothesisTests, h: int) -> list[str]:
    own, other = mo.rho(h, ts)
    meter = mo.hyps[h].meter
    out = {g.meter for g, r in zip(mo.hyps, own, strict=True) if g.meter != meter and r >= TIE_RHO}
    out |= {
        g.meter for g, r in zip(ts.hyps, other, strict=True) if g.meter != meter and r >= TIE_RHO
    }
    return sorted(out)


def test_ties_of_all_rows_at_once_are_those_of_each_row():
    rng = np.random.default_rng(0)
    tied_rows = 0
    for _ in range(200):
        h2, h1 = int(rng.integers(1, 12)), int(rng.integers(0, 8))
        b2, b1 = rng.normal(size=(h2, 4)), rng.normal(size=(h1, 4))
        for i in range(h2):
            if rng.random() < 0.3:
                b2[i] = b2[rng.integers(h2)] * rng.choice([-1.0, 1.0])
        for i in range(h1):
            if rng.random() < 0.3:
                b1[i] = b2[rng.integers(h2)]
        meters = [f"M{k}" for k in range(5)]
        mo = More(
            [Hypothesis(meters[rng.integers(5)], "offset", "i.A") for _ in range(h2)],
            np.zeros(h2),
            np.zeros(h2),
            b2 @ b2.T,
            (b2 @ b1.T).reshape(h2, h1),
            np.ones(h2),
            {},
        )
        q1 = (b1 @ b1.T).reshape(h1, h1)
        ts = HypothesisTests(
            [Hypothesis(meters[rng.integers(5)], "ct_ratio", "") for _ in range(h1)],
            np.zeros(h1),
            np.zeros(h1),
            np.diag(q1).copy(),
            np.ones(h1),
            {},
            q_whole=q1,
        )
        got = _tied_all(mo, ts)
        for h in range(h2):
            want = _one_by_one(mo, ts, h)
            assert got[h] == want
            tied_rows += bool(want)
    assert tied_rows > 100  # the draw does make ties
