"""The network the meters sit on: ``[[bus]]`` buses and ``[[branch]]`` branches."""

from __future__ import annotations

from collections.abc import Iterable

from ..model import BRANCH_KINDS, TWO_ENDED, Branch, Bus, Zone
from .branch_model import branch_model
from .tables import Doc, Table, array_of_tables, ids, ref

__all__ = ["read_branches", "read_buses"]


def read_buses(doc: Doc, root: Table, zones: Iterable[Zone]) -> dict[str, Bus]:
    """``[[bus]]`` tables, each in a known zone."""
    tables = array_of_tables(doc, root, "bus")
    out = {}
    zone_ids = [z.id for z in zones]
    for ident, t in ids(tables, "bus").items():
        zone = ref(t, "zone", zone_ids, "zone")
        out[ident] = Bus(ident, zone or "", t.get("label", "str", ""))
    for t in tables:
        t.finish()
    return out


def read_branches(
    doc: Doc, root: Table, buses: dict[str, Bus]
) -> tuple[dict[str, Branch], set[str]]:
    """``[[branch]]`` tables: every branch with a valid id (so references to it resolve), and
    the ids of the incomplete ones (so meters on them are not checked against their buses)."""
    tables = array_of_tables(doc, root, "branch")
    out = {}
    partial = set()
    ideal: dict[str, str] = {}  # bus -> the ideal source on it (one per bus)
    for ident, t in ids(tables, "branch").items():
        kind = t.choice("kind", BRANCH_KINDS, None, required=True, what="branch kind")
        from_bus = ref(t, "from_bus", buses, "bus")
        to_bus = None
        if kind in TWO_ENDED:
            to_bus = ref(t, "to_bus", buses, "bus")
            if to_bus is not None and to_bus == from_bus:
                t.doc.add(
                    t.at("to_bus"),
                    f"to_bus is the same bus as from_bus ({to_bus!r}); a {kind} joins two different buses",
                )
        elif t.has("to_bus"):
            t.seen.add("to_bus")
            if kind is not None:
                t.doc.add(
                    t.at("to_bus"),
                    f"a {kind} is one-ended: remove to_bus (only line and transformer have one)",
                )
        label = t.get("label", "str", "")
        model, tolerance = branch_model(t, kind, from_bus, ideal)
        if kind is None or from_bus is None or (kind in TWO_ENDED and to_bus is None):
            partial.add(ident)
        out[ident] = Branch(ident, kind or "load", from_bus or "", to_bus, label, model, tolerance)
    for t in tables:
        t.finish()
    return out, partial
