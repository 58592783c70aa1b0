"""network.model_fit: every meter checked against the network model, or said to be unverified.

Runs ``meas.estimate`` on the snapshot together with the earlier snapshots of the same switch
state the engine was given (the steady window during a capture, so the offline re-check
replays exactly the same input). One result per meter and one for the bench:
- a meter named by the estimator fails with its cause ("M5: voltages 1.100 ± 0.002 of what the
  network implies: the VT ratio looks set wrong by a factor 1.10");
- a meter this configuration cannot check (its VT or CT ratio undetectable, or a tie with
  another meter) is n/a with cause ``unverified`` and the reason: never a pass;
- while a fault is named, the other meters are n/a (``unverified``): the one fit of the
  snapshot is disturbed by it;
- otherwise it passes, the figure being its largest gain deviation in class standard
  uncertainties (limit: the identification threshold; beyond it, a warning);
- identification is the estimator's linearized one (``Estimator(exact=False)``): a wiring fault
  is named on its meter as ``wiring`` and the per-phase wiring checks give its kind;
- the bench row carries the fit's χ² against its 99 % quantile, and fails with the sentence
  when two meters cannot be told apart (the fault is certain, the meter is not).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from ...errors import BenchwalkError
from ...estimate import RATIO_KINDS, THRESHOLD, Estimate, Estimator
from ...snapshot import Snapshot
from ..base import FAIL, NA, PASS, WARN, Buckets, fmt, na, result
from ..layout import Layout

CHECK = "network.model_fit"
WINDOW = 4  # snapshots per estimate: this one and up to three earlier of the same state


class ModelFit:
    """The estimator for one profile, run on each snapshot with its steady history."""

    def __init__(self, lay: Layout):
        self.ids = [m.id for m in lay.meters]
        self.est: Estimator | None = None
        self.why = ""
        if not any(b.model is not None for b in lay.profile.branches):
            self.why = "the profile has no network model (no branch has a model table)"
            return
        try:
            # linearized identification: one fit per snapshot (the exact refits of a session
            # estimate cost seconds per faulty snapshot); of the coverage, the ratio kinds
            # alone: they decide which readings are unverified, the rest is the console's
            self.est = Estimator(lay.profile, exact=False, coverage=RATIO_KINDS)
        except BenchwalkError as exc:
            self.why = f"the network model cannot be built: {exc}"

    def run(self, snapshot: Snapshot, history: Sequence[Snapshot], bk: Buckets) -> None:
        if self.est is None:
            for mid in self.ids:
                bk[NA].append(na(CHECK, mid, self.why))
            return
        state = dict(snapshot.switches)
        same = [h for h in history if dict(h.switches) == state][-(WINDOW - 1) :]
        e: Estimate | None = None
        try:
            e = self.est.run([[*same, snapshot]])
            why = e.why
        except (BenchwalkError, ArithmeticError, ValueError, IndexError) as exc:
            why = f"the estimate failed: {exc}"
        if e is None or not e.converged:
            for mid in self.ids:
                bk[NA].append(na(CHECK, mid, f"not checked against the model: {why}"))
            return
        self._bench(e, bk)
        self._meters(e, bk)

    def _bench(self, e: Estimate, bk: Buckets) -> None:
        ties = [f for f in e.findings if f.ambiguous]
        if ties:
            f = ties[0]
            bk[FAIL].append(
                result(CHECK, "bench", FAIL, f.figure, f.limit, "1", f.sentence, f.cause)
            )
            return
        if e.chi2_ok:
            code = PASS
            msg = f"readings fit the network model: chi-square {fmt(e.chi2, '')} for {e.dof} degrees of freedom"
        elif e.findings:
            code = WARN
            msg = (
                f"readings disagree with the network model (chi-square {fmt(e.chi2, '')} > "
                f"{fmt(e.chi2_limit, '')}): see the meter named"
            )
        else:
            code = WARN
            msg = (
                f"readings disagree with the network model beyond their uncertainty (chi-square "
                f"{fmt(e.chi2, '')} > {fmt(e.chi2_limit, '')}) but no single meter explains it: "
                "check model parameters and tolerances"
            )
        bk[code].append(result(CHECK, "bench", code, e.chi2, e.chi2_limit, "1", msg))

    def _meters(self, e: Estimate, bk: Buckets) -> None:
        named = {f.meters[0]: f for f in e.findings if not f.ambiguous}
        tied = {m for f in e.findings if f.ambiguous for m in f.meters}
        unverified: dict[str, list[str]] = {}
        for u in e.unverified:
            unverified.setdefault(u.meter, []).append(u.reason)
        for mid in self.ids:
            f = named.get(mid)
            if f is not None:
                bk[FAIL].append(
                    result(CHECK, mid, FAIL, f.figure, f.limit, "1", f.sentence, f.cause)
                )
            elif mid in tied:
                bk[NA].append(
                    result(
                        CHECK,
                        mid,
                        NA,
                        math.nan,
                        math.nan,
                        "1",
                        f"unverified: {mid} is in a tie "
                        "the bench cannot resolve (see the bench row)",
                        "unverified",
                    )
                )
            elif named:
                who = ", ".join(sorted(named))
                msg = f"unverified: this snapshot's fit is disturbed by the fault named on {who}"
                bk[NA].append(result(CHECK, mid, NA, math.nan, math.nan, "1", msg, "unverified"))
            elif mid not in e.meters:
                bk[NA].append(na(CHECK, mid, "no live readings in this configuration"))
            elif mid in unverified:
                msg = "unverified: " + "; ".join(unverified[mid])
                bk[NA].append(result(CHECK, mid, NA, math.nan, math.nan, "1", msg, "unverified"))
            else:
                dev = 0.0
                parts = []
                for g in e.gains:
                    if g.meter == mid and g.prior_std > 0:
                        dev = max(dev, abs(g.value - 1.0) / g.prior_std)
                        parts.append(f"{g.kind} gain {g.value:.4f}")
                if dev > THRESHOLD:
                    msg = f"{mid}: a gain lies beyond its class ({', '.join(parts)})"
                    bk[WARN].append(result(CHECK, mid, WARN, dev, THRESHOLD, "1", msg, "gain"))
                else:
                    msg = f"{mid} agrees with the network model ({', '.join(parts)})"
                    bk[PASS].append(result(CHECK, mid, PASS, dev, THRESHOLD, "1", msg))
