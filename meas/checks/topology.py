"""Which branches are in service, which buses are live, which buses are fully metered.

Built once per profile; ``state(switches)`` answers for one snapshot's switch positions
(memoized, since a bench sits in few configurations). Whether a branch conducts and a bus is
live is ``meas.network.topology``'s rule; a switch of unknown state makes a bus's liveness
None when counting the switch closed and counting it open disagree.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..model import Profile
from ..network.topology import branch_conducts, energization


@dataclass(frozen=True)
class BusState:
    bus: str
    live: bool | None  # None = depends on a switch whose state is unknown
    in_service: tuple[str, ...]  # branches at the bus that may carry current
    metered: tuple[tuple[int, str], ...]  # (meter index, branch) measuring at this bus
    unmetered: tuple[str, ...]  # in-service branches with no meter at this bus
    unknown: tuple[str, ...]  # switches of unknown state on branches at this bus


@dataclass(frozen=True)
class TopoState:
    buses: dict[str, BusState]
    branch_on: dict[str, bool | None]  # branch -> in service (None = unknown)


class Topology:
    def __init__(self, profile: Profile):
        self.profile = profile
        self.switch_of: dict[str, list[str]] = {}
        for s in profile.switches:
            self.switch_of.setdefault(s.branch, []).append(s.id)
        self.meters_at: dict[str, list[tuple[int, str]]] = {b.id: [] for b in profile.buses}
        for i, m in enumerate(profile.meters):
            if m.branch is not None:
                self.meters_at.setdefault(m.bus, []).append((i, m.branch))
        self.branches_at: dict[str, list[str]] = {b.id: [] for b in profile.buses}
        for br in profile.branches:
            for bus in br.buses:
                self.branches_at.setdefault(bus, []).append(br.id)
        self._memo: dict[tuple, TopoState] = {}

    def state(self, switches: dict[str, str]) -> TopoState:
        key = tuple(sorted(switches.items()))
        hit = self._memo.get(key)
        if hit is not None:
            return hit
        branch_on = branch_conducts(self.profile, switches)
        hi = energization(self.profile, branch_on, unknown_conducts=True)
        lo = energization(self.profile, branch_on, unknown_conducts=False)
        buses = {}
        for b in self.profile.buses:
            live = True if b.id in lo else (False if b.id not in hi else None)
            at = self.branches_at.get(b.id, [])
            in_service = tuple(br for br in at if branch_on[br] is not False)
            metered_br = {br for _, br in self.meters_at.get(b.id, [])}
            unmetered = tuple(br for br in in_service if br not in metered_br)
            unknown = tuple(
                s
                for br in at
                for s in self.switch_of.get(br, [])
                if switches.get(s, "unknown") not in ("open", "closed")
            )
            buses[b.id] = BusState(
                b.id, live, in_service, tuple(self.meters_at.get(b.id, [])), unmetered, unknown
            )
        st = TopoState(buses, branch_on)
        if len(self._memo) < 256:
            self._memo[key] = st
        return st
