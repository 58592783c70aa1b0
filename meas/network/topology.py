"""Which branches conduct and which buses are live: the one rule, for every caller.

A branch conducts when every switch on it reads closed (a branch without a switch always
does) and is out when any switch on it reads open; any other reading (``unknown``, or no
reading at all) leaves it undecided. A bus is live when a walk from a conducting source
through conducting two-ended branches (lines, transformers) reaches it. The checks ask twice,
once counting undecided branches as conducting and once as out, to tell live, dead and "depends
on an unknown switch" apart; the console draws only what is surely live; the simulator knows
every switch, so the question does not arise there.
"""

from __future__ import annotations

from collections.abc import Mapping

from ..errors import BenchwalkError
from ..model import Profile


def branch_conducts(profile: Profile, switch_states: Mapping[str, str]) -> dict[str, bool | None]:
    """Branch id -> True (conducts), False (switched out) or None (a switch state is unknown)."""
    switch_of: dict[str, list[str]] = {}
    for s in profile.switches:
        switch_of.setdefault(s.branch, []).append(s.id)
    out: dict[str, bool | None] = {}
    for br in profile.branches:
        states = [switch_states.get(s, "unknown") for s in switch_of.get(br.id, [])]
        if any(s == "open" for s in states):
            out[br.id] = False
        elif all(s == "closed" for s in states):
            out[br.id] = True
        else:
            out[br.id] = None
    return out


def energization(
    profile: Profile, conducts: Mapping[str, bool | None], *, unknown_conducts: bool
) -> dict[str, tuple[str, str | None]]:
    """Every live bus -> (the branch that feeds it, the bus it is fed from; None at a source).

    Buses come in the order a depth-first walk from the sources (in profile order) reaches
    them, so a feeding bus always comes before the buses it feeds.
    """

    def on(branch: str) -> bool:
        state = conducts[branch]
        return unknown_conducts if state is None else state

    adj: dict[str, list[tuple[str, str]]] = {b.id: [] for b in profile.buses}
    for br in profile.branches:
        if br.to_bus is not None and on(br.id):
            adj.setdefault(br.from_bus, []).append((br.to_bus, br.id))
            adj.setdefault(br.to_bus, []).append((br.from_bus, br.id))
    fed: dict[str, tuple[str, str | None]] = {}
    stack: list[str] = []
    for br in profile.branches:
        if br.kind == "source" and on(br.id) and br.from_bus not in fed:
            fed[br.from_bus] = (br.id, None)
            stack.append(br.from_bus)
    while stack:
        bus = stack.pop()
        for other, branch in adj.get(bus, ()):
            if other not in fed:
                fed[other] = (branch, bus)
                stack.append(other)
    return fed


def live_buses(
    profile: Profile, switch_states: Mapping[str, str], *, unknown_conducts: bool = False
) -> frozenset[str]:
    """Buses reached from a source; by default an unknown switch state counts as open."""
    conducts = branch_conducts(profile, switch_states)
    return frozenset(energization(profile, conducts, unknown_conducts=unknown_conducts))


def settled_states(profile: Profile, switch_states: Mapping[str, str]) -> dict[str, str]:
    """Every switch's state, the normal one where none is given; unknown ids or words raise."""
    known = {s.id for s in profile.switches}
    for sid, state in switch_states.items():
        if sid not in known:
            raise BenchwalkError(
                f"switch state given for unknown switch {sid!r}; "
                f"the profile has {', '.join(sorted(known)) or 'no switches'}"
            )
        if state not in ("open", "closed"):
            raise BenchwalkError(f"switch {sid!r}: state must be 'open' or 'closed', got {state!r}")
    return {s.id: switch_states.get(s.id, s.normal) for s in profile.switches}
