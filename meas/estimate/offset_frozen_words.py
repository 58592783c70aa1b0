"""What the offset and frozen causes say: the finding's sentence and the coverage rows.

The statistics and refits are ``meas.estimate.offset_frozen``'s; this module only words them,
in the reading's own unit, and says per meter and reading what this configuration can detect:
the smallest detectable offset, (4 + 0.84) / sqrt(b̃ᵀΩ̃b̃) (Baarda's minimal detectable bias
idea, as for the ratios), and for a meter measured in two steps or more whether freezing in
its first step would show.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from ..quantities import unit_of
from .core import FArray, StepModel
from .diagnose import (
    CRITICAL,
    POWER_Z,
    THRESHOLD,
    TIE_RHO,
    Tests,
    meters_tied,
    weighted_residuals,
)
from .offset_frozen import OFFSET_QUANTITIES, Detail, More, more_tests
from .results import Coverage
from .solver import Fit

if TYPE_CHECKING:
    from .build import Problem
    from .identify import Trial


def _ordinal(n: int) -> str:
    tail = "th" if 10 <= n % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{n}{tail}"


def sentence(top: Trial, pr: Problem) -> tuple[str, str]:
    """(cause tag, sentence) of a named offset or frozen meter."""
    d = top.detail
    assert isinstance(d, Detail)
    m = top.meter
    if top.kind == "offset":
        unit = unit_of(d.key)
        return (
            f"offset:{d.key}:{d.amount:+.4g}",
            f"{m}: {d.key} reads {d.amount:+.3g} ± {d.u:.2g} {unit} off what the network "
            f"implies, the same in {'every step' if d.first > 1 else 'this step'}: the reading "
            "looks offset (a zero error, a wrong CT or VT burden or a faulty transducer are "
            "common causes)",
        )
    first = pr.captures[d.first] + 1 if d.first < len(pr.captures) else d.first + 1
    rep = pr.captures[d.repeats] + 1 if d.repeats < len(pr.captures) else d.repeats + 1
    change = f"{d.amount:+.3g} {unit_of(d.key)} in {d.key}" if d.key else "a change"
    return (
        f"frozen:{first}",
        f"{m}: its readings did not change from the {_ordinal(first)} captured step on (they "
        f"repeat the {_ordinal(rep)}'s) while the network implies a change of {change}: the "
        "meter looks frozen",
    )


# ---------------------------------------------------------------------------- coverage


def coverage(
    fit: Fit, steps: Sequence[StepModel], keys: Sequence[Sequence[Sequence[str]]], ts: Tests
) -> tuple[Coverage, ...]:
    """Per meter and reading, the smallest detectable offset; per meter measured in two steps
    or more, whether freezing from its first step would show."""
    mo = more_tests(fit, steps, keys, ts)
    out = []
    present: dict[str, list[int]] = {}
    for k, st in enumerate(steps):
        for mt in st.meters:
            present.setdefault(mt.name, []).append(k)
    ties = _tied_all(mo, ts)
    for h, hy in enumerate(mo.hyps):
        if hy.kind != "offset":
            continue
        name = f"{hy.meter} offset of {hy.arg}"
        qh = float(mo.q[h, h])
        if qh <= CRITICAL * max(float(mo.bb[h]), 1e-300):
            out.append(
                Coverage(
                    hy.meter,
                    f"offset:{hy.arg}",
                    False,
                    math.nan,
                    f"{name}: no other reading predicts it",
                )
            )
            continue
        tied = ties[h]
        if tied:
            out.append(
                Coverage(
                    hy.meter,
                    f"offset:{hy.arg}",
                    False,
                    math.nan,
                    f"{name}: cannot be told apart from {' or '.join(tied)} on this bench",
                )
            )
            continue
        mdb = (THRESHOLD + POWER_Z) / math.sqrt(qh)
        out.append(
            Coverage(
                hy.meter,
                f"offset:{hy.arg}",
                True,
                math.nan,
                f"{name}: detectable beyond ±{mdb:.3g} {unit_of(hy.arg)}",
            )
        )
    _, j = weighted_residuals(fit)
    for m, ks in sorted(present.items()):
        if len(ks) < 2:
            continue
        s = _frozen_strength(fit, steps, keys, j, m, ks)
        if s < THRESHOLD + POWER_Z:
            out.append(
                Coverage(
                    m,
                    "frozen",
                    False,
                    math.nan,
                    f"{m} frozen meter: these steps change its readings too little",
                )
            )
        else:
            out.append(
                Coverage(
                    m, "frozen", True, math.nan, f"{m} frozen meter: detectable (strength {s:.0f})"
                )
            )
    return tuple(out)


def _tied_all(mo: More, ts: Tests) -> list[list[str]]:
    """Per offset/frozen hypothesis, the other meters with a hypothesis (of either family) it
    cannot be told apart from (|ρ| >= TIE_RHO, as ``More.rho``), sorted: all rows at once."""
    if not mo.hyps:
        return []
    meters = sorted({g.meter for g in mo.hyps} | {g.meter for g in ts.hyps})
    at = {m: i for i, m in enumerate(meters)}
    mine = np.array([at[g.meter] for g in mo.hyps])
    theirs = np.array([at[g.meter] for g in ts.hyps], dtype=np.int64)
    d2 = np.maximum(np.diag(mo.q), 1e-300)
    d1 = np.maximum(ts.qd, 1e-300) if ts.hyps else np.zeros(0)
    with np.errstate(invalid="ignore"):
        own = np.abs(mo.q) / np.sqrt(np.outer(d2, d2)) >= TIE_RHO
        other = np.abs(mo.cross) / np.sqrt(np.outer(d2, d1)) >= TIE_RHO
    return meters_tied(np.hstack([own, other]), mine, np.r_[mine, theirs], meters)


def _frozen_strength(
    fit: Fit,
    steps: Sequence[StepModel],
    keys: Sequence[Sequence[Sequence[str]]],
    j: FArray,
    meter: str,
    ks: list[int],
) -> float:
    """sqrt(b̃ᵀΩ̃b̃) of 'froze in its first step': what the later steps should have changed."""
    starts = np.cumsum([0] + [len(ev.r) for ev in fit.evals])
    k0 = ks[0]
    mi0 = [mt.name for mt in steps[k0].meters].index(meter)
    h0 = dict(zip(keys[k0][mi0], fit.evals[k0].h[fit.evals[k0].meter_rows[mi0]], strict=True))
    b = np.zeros(j.shape[0])
    for k in ks[1:]:
        mi = [mt.name for mt in steps[k].meters].index(meter)
        sl = fit.evals[k].meter_rows[mi]
        sig = steps[k].meters[mi].sigma
        for n, key in enumerate(keys[k][mi]):
            if key.split(".")[0] in OFFSET_QUANTITIES and key in h0:
                b[int(starts[k]) + sl.start + n] = (h0[key] - float(fit.evals[k].h[sl][n])) / float(
                    sig[n]
                )
    ub = j.T @ b
    return math.sqrt(max(float(b @ b - ub @ fit.ginv @ ub), 0.0))
