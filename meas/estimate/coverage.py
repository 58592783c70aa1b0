"""What an estimate could verify: per meter and error kind, whether this configuration can
detect it, from what size, and why not (the coverage rows and the unverified readings).

From the hypothesis statistics of ``meas.estimate.diagnose``: a ratio error is detectable
beyond the smallest gain error its prior row's Ω̃ lets show at the test threshold with 80 %
power (Baarda's minimal detectable bias idea); a wiring error needs a signature strength above
that; a hypothesis that cannot be told apart from another meter's (|ρ| at or above
``TIE_RHO``) is not detectable on this bench, and the other meters are named.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from .build import Unverified
from .core import IArray
from .diagnose import CRITICAL, POWER_Z, THRESHOLD, TIE_RHO, Tests, meters_tied
from .offset_frozen import NAMES as _MORE
from .results import Coverage
from .solver import Fit, omega_prior

RATIO_KINDS = frozenset({"vt_ratio", "ct_ratio"})  # the coverage kinds a verdict depends on
NAMES = {
    "vt_ratio": "VT ratio",
    "ct_ratio": "CT ratio",
    "ct_reversed": "reversed CT",
    "phases_swapped": "swapped current inputs",
    **_MORE,
}


def kind_of(c: Coverage) -> str:
    """The error kind of a coverage row (``ct_reversed:B`` -> ``ct_reversed``)."""
    return c.error_kind.split(":")[0]


def label(kind: str, arg: str) -> str:
    return f"{kind}:{arg}" if arg else kind


def ties(ts: Tests, rows: IArray) -> list[list[str]]:
    """Per hypothesis of ``rows``, the other meters with a hypothesis it cannot be told apart
    from."""
    if not ts.hyps:
        return []
    meters = sorted({hy.meter for hy in ts.hyps})
    mi = np.array([meters.index(hy.meter) for hy in ts.hyps])
    dq = ts.qd
    close = np.abs(ts.q_rows(rows)) >= TIE_RHO * np.sqrt(np.maximum(np.outer(dq[rows], dq), 1e-300))
    return meters_tied(close & (dq > CRITICAL * ts.bb)[None, :], mi[rows], mi, meters)


def coverage(fit: Fit, ts: Tests, kinds: frozenset[str] | None = None) -> tuple[Coverage, ...]:
    """Whether each hypothesis (of ``kinds``; None: all) could show, from what size, and why not."""
    # the array work once, then plain floats: a capture of 32 meters has 256 hypotheses
    rows = np.array(
        [h for h, hy in enumerate(ts.hyps) if kinds is None or hy.kind in kinds], np.int64
    )
    om_prior = omega_prior(fit).tolist()
    prior_std = fit.prior_std.tolist()
    tied_to = dict(zip(rows.tolist(), ties(ts, rows), strict=True)) if len(rows) else {}
    qd = ts.qd
    strengths = np.sqrt(np.maximum(qd, 0.0)).tolist()
    critical = (qd <= CRITICAL * np.maximum(ts.bb, 1e-300)).tolist()
    bb = ts.bb.tolist()
    weak = THRESHOLD + POWER_Z
    out = []
    for h in rows.tolist():
        hy = ts.hyps[h]
        tag = label(hy.kind, hy.arg)
        tied = tied_to[h]
        name = f"{hy.meter} {NAMES[hy.kind]}" + (f" {hy.arg}" if hy.arg else "")
        cannot = f"{name}: cannot be told apart from {' or '.join(tied)} on this bench"
        if hy.kind in RATIO_KINDS:
            gi = ts.gain_index[(hy.meter, "v" if hy.kind == "vt_ratio" else "i")]
            om = om_prior[gi]
            if om < CRITICAL:
                why = f"{name}: no other reading predicts it"
                out.append(Coverage(hy.meter, tag, False, math.nan, why))
                continue
            delta = weak * prior_std[gi] / math.sqrt(om)
            if tied:
                out.append(Coverage(hy.meter, tag, False, delta, cannot))
            else:
                why = f"{name}: detectable beyond ±{100 * delta:.1f} %"
                out.append(Coverage(hy.meter, tag, True, delta, why))
            continue
        strength = strengths[h]
        if critical[h] or strength < weak:
            why = (
                "too little current in these steps"
                if bb[h] < 1.0
                else "no other reading predicts it"
            )
            out.append(Coverage(hy.meter, tag, False, math.nan, f"{name}: {why}"))
        elif tied:
            out.append(Coverage(hy.meter, tag, False, math.nan, cannot))
        else:
            why = f"{name}: detectable (strength {strength:.0f})"
            out.append(Coverage(hy.meter, tag, True, math.nan, why))
    return tuple(out)


def unverified_from(cov: Sequence[Coverage]) -> tuple[Unverified, ...]:
    out = []
    for c in cov:
        if c.error_kind in RATIO_KINDS and not c.detectable:
            qty = "voltage" if c.error_kind == "vt_ratio" else "current and power"
            out.append(Unverified(c.meter, qty, c.reason))
    return tuple(out)
