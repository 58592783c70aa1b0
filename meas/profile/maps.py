"""``[maps.ID]``: register maps, their defaults and each quantity's register."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

from .. import quantities
from ..register_map import (
    APPARENT_POWER,
    DATA_TYPES,
    IDENT_KEYS,
    ORDERS,
    REGISTER_COUNT,
    REGISTER_KINDS,
    TEXT_TYPES,
    RegisterMap,
    RegisterSpec,
    TextSpec,
)
from .map_csv import csv_registers
from .scanner import Key
from .tables import Doc, Table, show, suggest, typename, within

# reads a companion file named in the profile: (name, text), or None with the problem recorded
CompanionReader = Callable[[Key, str], tuple[str, str] | None]

__all__ = ["MAX_ADDRESS", "read_maps"]

MAX_ADDRESS = 65535  # the last Modbus register or coil address

_REG_FIELDS = ("kind", "type", "word_order", "byte_order", "scale", "offset", "unit")


def _register_fields(t: Table, inherited: dict[str, Any]) -> dict[str, Any]:
    """kind/type/orders/scale/offset/unit from one inline table, over ``inherited`` values."""
    out = dict(inherited)
    if t.has("kind"):
        out["kind"] = t.choice("kind", REGISTER_KINDS, None, what="register kind")
    if t.has("type"):
        out["type"] = t.choice("type", DATA_TYPES + TEXT_TYPES, None, what="data type")
    for key in ("word_order", "byte_order"):
        if t.has(key):
            out[key] = t.choice(key, ORDERS, None, what=key.replace("_", " "))
    if t.has("scale"):
        out["scale"] = t.get(
            "scale", "number", None, check=lambda v: None if v != 0 else "must not be 0"
        )
    if t.has("offset"):
        out["offset"] = t.get("offset", "number", None)
    if t.has("unit"):
        out["unit"] = t.get("unit", "str", None)
    return out


def read_maps(
    doc: Doc, root: Table, companion: CompanionReader | None = None
) -> dict[str, RegisterMap]:
    """``[maps.ID]`` tables: each map's defaults and registers (from ``registers`` and/or a
    ``csv`` file, meas.profile.map_csv), overlaps reported."""
    m = root.table("maps")
    maps: dict[str, RegisterMap] = {}
    if m is None:
        if "maps" not in root.data:
            doc.add(("maps",), "missing required [maps.ID] table: meters need a register map")
        return maps
    for map_id in m.data:
        mt = m.table(map_id)
        if mt is None:
            continue
        description = mt.get("description", "str", "")
        apparent = mt.choice(
            "apparent_power",
            APPARENT_POWER,
            "arithmetic",
            what="apparent power definition",
        )
        max_read = mt.get("max_read", "int", 125, check=within(1, 125))
        dt = mt.table("defaults")
        inherited: dict[str, Any] = {
            "kind": "holding",
            "word_order": "big",
            "byte_order": "big",
            "scale": 1.0,
            "offset": 0.0,
        }
        if dt is not None:
            inherited = _register_fields(dt, inherited)
            dt.finish()
        csv_name = mt.get("csv", "str", None)
        rt = mt.table("registers", required=csv_name is None)
        specs: list[tuple[RegisterSpec, Key]] = []
        texts: list[tuple[TextSpec, Key]] = []

        if csv_name is not None and companion is not None:
            found = companion(mt.at("csv"), csv_name)
            if found is not None:
                cdoc, rows = csv_registers(found[0], found[1], doc.problems)
                ct = Table(cdoc, rows, ())
                for qkey in rows:
                    _take(cdoc, ct, qkey, inherited, specs, texts)
        if rt is not None:
            if not rt.data and not specs and not texts:
                doc.add(rt.path, "a map needs at least one register")
            for qkey in rt.data:
                _take(doc, rt, qkey, inherited, specs, texts)
            rt.finish()
        mt.finish()
        _overlaps(doc, [*specs, *texts])
        maps[map_id] = RegisterMap(
            map_id,
            tuple(s for s, _ in specs),
            description,
            apparent,
            max_read,
            tuple(s for s, _ in texts),
        )
    m.finish()
    return maps


def _take(
    doc: Doc,
    table: Table,
    qkey: str,
    inherited: dict[str, Any],
    specs: list[tuple[RegisterSpec, Key]],
    texts: list[tuple[TextSpec, Key]],
) -> None:
    """One row of a map: an identification key is a text register, anything else a quantity."""
    if qkey in IDENT_KEYS:
        text = _text_register(doc, table, qkey, inherited)
        if text is not None:
            texts.append((text, table.at(qkey)))
        return
    spec = _register(doc, table, qkey, inherited)
    if spec is not None:
        specs.append((spec, table.at(qkey)))


def _entry(doc: Doc, value: object, path: Key, example: str) -> Table | None:
    """A register entry as a table, or one line saying what it should look like."""
    if not isinstance(value, dict):
        doc.add(
            path, f"expected an inline table like {example}, got {typename(value)} {show(value)}"
        )
        return None
    return Table(doc, value, path)


def _register(doc: Doc, rt: Table, qkey: str, inherited: dict[str, Any]) -> RegisterSpec | None:
    path = rt.at(qkey)
    rt.seen.add(qkey)
    if not quantities.is_valid_key(qkey):
        q, phase = quantities.split_key(qkey)
        if q in quantities.QUANTITIES:
            phases = ", ".join(quantities.QUANTITIES[q].phases)
            doc.add(path, f"{qkey!r} is not a quantity key: {q} has phases {phases}")
        else:
            doc.add(
                path,
                f"{qkey!r} is not a quantity key{suggest(qkey, (*quantities.all_keys(), *IDENT_KEYS))} (see meas.quantities: e.g. 'p.A', 'v_ll.BC', 'f.T'; text registers identify the device: {', '.join(IDENT_KEYS)})",
            )
        return None
    value = rt.data[qkey]
    if isinstance(value, int) and not isinstance(value, bool):
        value = {"address": value}  # "p.A" = 20 is shorthand for { address = 20 }
    t = _entry(doc, value, path, "{ address = 0 }")
    if t is None:
        return None
    address = t.get("address", "int", None, required=True, check=within(0, MAX_ADDRESS))
    fields = _register_fields(t, inherited)
    if fields.get("type") in TEXT_TYPES:
        t.seen.add("count")  # one line for a string quantity: the type error below
    t.finish()
    unit = fields.get("unit")
    expected_unit = quantities.unit_of(qkey)
    if unit is not None and unit != expected_unit:
        doc.add(
            t.at("unit") if t.has("unit") else path,
            f"unit {unit!r} differs from the unit of {qkey} ({expected_unit!r}): values are kept in SI units, so set scale to convert and give unit = {expected_unit!r}",
        )
        return None
    if "type" not in fields:
        doc.add(path, "no data type: give type here or in the map's defaults")
        return None
    if fields["type"] in TEXT_TYPES:
        doc.add(
            t.at("type") if t.has("type") else path,
            f"{qkey} is a measured quantity, and a string register holds text: strings identify "
            f"the device ({', '.join(IDENT_KEYS)}); give {qkey} a numeric type",
        )
        return None
    if address is None or any(fields.get(k) is None for k in _REG_FIELDS if k != "unit"):
        return None
    count = REGISTER_COUNT[fields["type"]]
    last = address + count - 1
    if last > MAX_ADDRESS:
        doc.add(
            t.at("address"),
            f"{fields['type']} at {address} needs registers {address}..{last}, past {MAX_ADDRESS}",
        )
        return None
    return RegisterSpec(
        key=qkey,
        kind=fields["kind"],
        address=address,
        dtype=fields["type"],
        word_order=fields["word_order"],
        byte_order=fields["byte_order"],
        scale=fields["scale"],
        offset=fields["offset"],
        unit=expected_unit,
    )


def _text_register(doc: Doc, rt: Table, key: str, inherited: dict[str, Any]) -> TextSpec | None:
    """An identification key: ``{ address, type = "string", count }`` (count in registers)."""
    path = rt.at(key)
    rt.seen.add(key)
    value = rt.data[key]
    t = _entry(doc, value, path, '{ address = 0, type = "string", count = 8 }')
    if t is None:
        return None
    address = t.get("address", "int", None, required=True, check=within(0, MAX_ADDRESS))
    count = t.get("count", "int", None, check=within(1, 125))
    kind = t.choice("kind", REGISTER_KINDS, inherited["kind"], what="register kind")
    byte_order = t.choice("byte_order", ORDERS, inherited["byte_order"], what="byte order")
    dtype = t.choice("type", DATA_TYPES + TEXT_TYPES, None, what="data type")
    t.finish()
    if dtype is not None and dtype not in TEXT_TYPES:
        doc.add(t.at("type"), f'{key} identifies the device and is text: give type = "string"')
        return None
    if dtype is None:
        doc.add(
            path, f'{key} is text: give type = "string" and count (registers, two characters each)'
        )
        return None
    if count is None:
        if not t.has("count"):
            doc.add(
                path, f"{key}: a string register needs count, in registers (two characters each)"
            )
        return None
    if address is None or kind is None or byte_order is None:
        return None
    if address + count - 1 > MAX_ADDRESS:
        doc.add(
            t.at("address"),
            f"string at {address} needs registers {address}..{address + count - 1}, past {MAX_ADDRESS}",
        )
        return None
    return TextSpec(key, kind, address, count, byte_order)  # type: ignore[arg-type]


def _overlaps(doc: Doc, specs: Sequence[tuple[RegisterSpec | TextSpec, Key]]) -> None:
    """Two quantities sharing a register of the same kind is a map typo."""
    for kind in REGISTER_KINDS:
        same = sorted(
            (s for s in specs if s[0].kind == kind), key=lambda s: (s[0].address, s[0].end)
        )
        reach: tuple[RegisterSpec | TextSpec, Key] | None = None
        for spec, path in same:
            if reach is not None and spec.address < reach[0].end:
                prev = reach[0]
                doc.add(
                    path,
                    f"{kind} registers {spec.address}..{spec.end - 1} overlap {prev.key!r} at {prev.address}..{prev.end - 1}",
                )
            if reach is None or spec.end > reach[0].end:
                reach = (spec, path)
