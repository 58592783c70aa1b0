"""Checks stand down when a reading they depend on is in doubt, and hold while readings settle.

A frozen, stale or offline meter makes every check that reads it say something about the
meter, not about the bench: "CB1 reports open but M1 measures 26.5 A" blames a switch for
what is a frozen M1. So once a meter's readings are in doubt, the failing and warning results
of checks on the meter itself, its bus, its branch and the switches of that branch stand
down (n/a, with the reason), and the quality finding on the meter is what the step reports.

While the readings settle after switching nothing is judged yet: failing and warning
results are shown held, never as a failure with a culprit (``hold_while_settling``).

These rewrite the walk's picture and its review only; the journal keeps every check result
exactly as the check engine gave it, so an offline re-check still reproduces them.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence

from ..model import Profile
from ..results import CheckResult, Status
from ..snapshot import CommState, Quality, Snapshot
from .ports import CheckFn

# a failing result of one of these puts the subject meter's readings in doubt
DOUBT_CHECKS = {"quality.frozen": "frozen", "quality.comm": "not communicating"}

_JUDGED = (Status.FAIL, Status.WARN)


def doubtful_meters(
    results: Iterable[CheckResult], snapshot: Snapshot | None = None
) -> dict[str, str]:
    """Meter id -> why its readings are in doubt (``"M1 frozen"``), from the quality findings
    among ``results`` and the snapshot's own communication state."""
    out: dict[str, str] = {}
    for r in results:
        if r.check in DOUBT_CHECKS and r.status is Status.FAIL:
            out.setdefault(r.subject, f"{r.subject} {DOUBT_CHECKS[r.check]}")
    if snapshot is not None:
        for mid, block in snapshot.meters.items():
            if block.state in (CommState.FAILING, CommState.OFFLINE):
                out.setdefault(mid, f"{mid} offline")
            elif any(q is Quality.STALE for q in block.quality.values()):
                out.setdefault(mid, f"{mid} stale")
    return out


def dependents(profile: Profile, meter_id: str) -> set[str]:
    """The subjects whose checks read ``meter_id``: the meter, its bus, its branch and the
    switches on that branch."""
    try:
        m = profile.meter(meter_id)
    except KeyError:
        return {meter_id}
    out = {m.id, m.bus}
    if m.branch:
        out.add(m.branch)
        out.update(sw.id for sw in profile.switches if sw.branch == m.branch)
    return out


def stand_down(
    profile: Profile, results: Sequence[CheckResult], doubtful: Mapping[str, str]
) -> list[CheckResult]:
    """``results`` with every failing or warning check that reads a doubtful meter stood down
    (n/a, the reason in its message); the quality findings themselves stay."""
    if not doubtful:
        return list(results)
    why: dict[str, list[str]] = {}
    for mid, reason in doubtful.items():
        for subject in dependents(profile, mid):
            why.setdefault(subject, []).append(reason)
    out = []
    for r in results:
        reasons = why.get(r.subject)
        if reasons and r.status in _JUDGED and r.check not in DOUBT_CHECKS:
            text = ", ".join(sorted(set(reasons)))
            r = CheckResult(
                r.check,
                r.subject,
                Status.NA,
                unit=r.unit,
                message=f"stood down: {text}; judged again once its readings are good",
                cause="stood_down",
            )
        out.append(r)
    return out


def hold_while_settling(results: Sequence[CheckResult], progress: float) -> list[CheckResult]:
    """Failing and warning results held (n/a, "settling") while the readings still move."""
    pct = int(round(100 * min(max(progress, 0.0), 1.0)))
    return [
        CheckResult(
            r.check,
            r.subject,
            Status.NA,
            unit=r.unit,
            message=f"held: the readings are settling ({pct} %); judged once they are steady",
            cause="settling",
        )
        if r.status in _JUDGED
        else r
        for r in results
    ]


def review_quality(
    profile: Profile,
    checks: CheckFn,
    snapshot: Snapshot,
    step_history: list[Snapshot],
    review: list[CheckResult],
) -> tuple[list[CheckResult], dict[str, str]]:
    """The step's review with a quality finding carried in even with few captures, and the
    checks that read a doubtful meter stood down; also the doubtful meters.

    The captures' own frozen check reads only the steady stretch, often shorter than the
    frozen check needs; a frozen meter does not move through the switching transient either,
    so the checks run once more on every snapshot of the step (``step_history``) and only
    their quality findings are taken. The journal keeps the captures' results as they were.
    """
    found = [
        r
        for r in checks(snapshot, step_history)
        if r.check in DOUBT_CHECKS and r.status is Status.FAIL
    ]
    if found:
        keys = {(r.check, r.subject) for r in found}
        review = [r for r in review if (r.check, r.subject) not in keys] + found
    doubtful = doubtful_meters(review, snapshot)
    return stand_down(profile, review, doubtful), doubtful
