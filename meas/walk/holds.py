"""Hold points: which steps one covers, and which of those did not pass.

A hold point covers the steps since the previous hold point (or the start); the signer must
acknowledge any of them that was skipped, accepted with failures or not captured.
"""

from __future__ import annotations

from collections.abc import Mapping

from ..model import Profile
from ..verdict import OUTCOME_WORDS
from .states import StepOutcome


def hold_scope(profile: Profile, index: int) -> tuple[str, ...]:
    """The step ids the hold point at ``index`` covers; () when it is not a hold point."""
    steps = profile.steps
    if index >= len(steps) or steps[index].kind != "hold":
        return ()
    start = 0
    for i in range(index - 1, -1, -1):
        if steps[i].kind == "hold":
            start = i + 1
            break
    return tuple(s.id for s in steps[start:index])


def hold_issues(
    profile: Profile, index: int, outcomes: Mapping[str, StepOutcome]
) -> tuple[str, ...]:
    """One line per covered step that did not pass: ``"radial skipped: reason"``."""
    out = []
    for sid in hold_scope(profile, index):
        o = outcomes.get(sid)
        if o is None:
            out.append(f"{sid} not captured")
        elif o.outcome != "passed":
            word = OUTCOME_WORDS[o.outcome]
            out.append(f"{sid} {word}: {o.reason}" if o.reason else f"{sid} {word}")
    return tuple(out)
