"""The switch-status rule: which switches differ from what a step expects, and how to say it.

``unknown`` (the PLC did not answer) proves nothing: a switch without a status point is taken
on the technician's word, and a status that was not read is told apart from one read in the
wrong state.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from ..model import Profile


def mismatches(
    profile: Profile, expected: Mapping[str, str], actual: Mapping[str, str]
) -> list[str]:
    """Switch ids whose status differs from the expectation (unverifiable ones excluded)."""
    out = []
    for sid, want in expected.items():
        sw = profile.switch(sid)
        got = actual.get(sid, "unknown")
        if sw.status is None and got == "unknown":
            continue  # no status point: cannot be verified, the technician's word stands
        if got != want:
            out.append(sid)
    return out


def unread(actual: Mapping[str, str], switch_ids: Sequence[str]) -> bool:
    """True when none of these statuses was read (the PLC did not answer), as opposed to
    read in the wrong state."""
    return all(actual.get(s, "unknown") == "unknown" for s in switch_ids)


def mismatch_text(
    expected: Mapping[str, str], actual: Mapping[str, str], bad: Sequence[str]
) -> str:
    return ", ".join(
        f"{s} not read, expected {expected[s]}"
        if actual.get(s, "unknown") == "unknown"
        else f"{s} is {actual[s]}, expected {expected[s]}"
        for s in bad
    )
