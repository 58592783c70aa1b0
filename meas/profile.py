"""Read a bench profile (TOML) and validate it into ``meas.model``, reporting every problem.

A technician fixes a profile faster from a full list than from one error per run, so the
loader keeps going after a problem and raises one ``ProfileError`` with all of them, each
as ``file:line: key.path: what is wrong``. tomllib gives values but no positions, so a small
scanner walks the source text once and maps every key path to the line that defines it.
A profile is data only: nothing in it is executed or imported.
"""

from __future__ import annotations

import bisect
import difflib
import hashlib
import math
import re
import tomllib
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

from . import quantities
from .errors import Problem, ProfileError
from .model import (
    REGISTER_COUNT,
    AccuracyClasses,
    Bench,
    Branch,
    Bus,
    CapturePolicy,
    CheckSettings,
    Control,
    Meter,
    Plc,
    PollSettings,
    Profile,
    RegisterMap,
    RegisterSpec,
    RtuTransport,
    SettleCriterion,
    StatusPoint,
    Step,
    Switch,
    TcpTransport,
    Transport,
    Zone,
)

__all__ = [
    "load_profile",
    "lint_profile",
    "check_profile",
    "locate_keys",
    "format_path",
    "companion_path",
]

Key = tuple[str | int, ...]

DATA_TYPES = tuple(REGISTER_COUNT)
ORDERS = ("big", "little")
REGISTER_KINDS = ("holding", "input")
BRANCH_KINDS = ("source", "line", "transformer", "load", "shunt")
TWO_ENDED = ("line", "transformer")
STEP_KINDS = ("manual", "remote", "capture", "hold", "note")
SWITCH_STATES = ("open", "closed")
# Class designations as printed on meters (IEC 62053-21/-22/-24 style, common practice).
ACCURACY_CLASSES = ("0.1S", "0.2S", "0.5S", "1S", "0.1", "0.2", "0.5", "1", "2", "3")
MAX_ADDRESS = 65535
MAX_DEPTH = 32  # nesting levels of tables and arrays; real profiles use about 5

# ----------------------------------------------------------------------------- key locator

_BARE = re.compile(r"[A-Za-z0-9_-]+")
_SCALAR = re.compile(r"[^,\]}\n\r#]*")
_GAP = re.compile(r"(?:[ \t]|#[^\n]*)*")
_GAP_NL = re.compile(r"(?:[ \t\r\n]|#[^\n]*)*")
_STRINGS = (  # TOML 1.0 string forms; multi-line ones may end with up to two extra quotes
    re.compile(r'"""(?:[^"\\]|\\.|"(?!""))*"""(?:"{1,2}(?!"))?', re.S),
    re.compile(r"'''(?:[^']|'(?!''))*'''(?:'{1,2}(?!'))?", re.S),
    re.compile(r'"(?:[^"\\\n]|\\.)*"'),
    re.compile(r"'[^'\n]*'"),
)


def printable(text: str) -> str:
    """Control and other unprintable characters as escapes, so a problem stays one line."""
    if text.isprintable():
        return text
    return "".join(
        c if c.isprintable() else c.encode("unicode_escape", "backslashreplace").decode("ascii")
        for c in text
    )


def format_path(path: Key) -> str:
    """``("meter", 2, "tcp", "port")`` -> ``meter[2].tcp.port``; keys with dots are quoted."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            text = (
                part if _BARE.fullmatch(part) else '"' + printable(part).replace('"', '\\"') + '"'
            )
            out += ("." if out else "") + text
    return out


class _Scanner:
    """Walks valid TOML text and records the line of every table header, key and array item."""

    def __init__(self, text: str):
        self.s = text
        self.n = len(text)
        self.i = 0
        self.lines: dict[Key, int] = {}
        self._newlines = [m.start() for m in re.finditer("\n", text)]
        self._aot: dict[Key, int] = {}  # array-of-tables path -> index of its latest element

    def _record(self, path: Key, pos: int) -> None:
        self.lines.setdefault(path, bisect.bisect_left(self._newlines, pos) + 1)

    def run(self) -> dict[Key, int]:
        table: Key = ()
        while True:
            self._skip(newlines=True)
            if self.i >= self.n:
                break
            before = self.i
            if self.s[self.i] == "[":
                aot = self.s.startswith("[[", self.i)
                self.i += 2 if aot else 1
                self._skip()
                parts = self._key()
                self._skip()
                self.i += 2 if aot else 1
                table = self._header(parts, aot, before)
            else:
                parts = self._key()
                self._skip()
                if self.i < self.n and self.s[self.i] == "=":
                    self.i += 1
                self._skip()
                path = self._record_key(table, parts, before)
                self._value(path)
            if self.i <= before:  # never loop on text the scanner does not understand
                self.i = before + 1
        return self.lines

    def _header(self, parts: list[str], aot: bool, pos: int) -> Key:
        resolved: Key = ()
        for k, part in enumerate(parts):
            resolved += (part,)
            if aot and k == len(parts) - 1:
                self._record(resolved, pos)
                idx = self._aot.get(resolved, -1) + 1
                self._aot[resolved] = idx
                resolved += (idx,)
            elif resolved in self._aot:
                resolved += (self._aot[resolved],)
            self._record(resolved, pos)
        return resolved

    def _record_key(self, base: Key, parts: list[str], pos: int) -> Key:
        path = base
        for part in parts:
            path += (part,)
            self._record(path, pos)
        return path

    def _skip(self, newlines: bool = False) -> None:
        self.i = (_GAP_NL if newlines else _GAP).match(self.s, self.i).end()

    def _key(self) -> list[str]:
        parts: list[str] = []
        while self.i < self.n:
            self._skip()
            c = self.s[self.i] if self.i < self.n else ""
            if c and c in "\"'":
                start = self.i
                self._string()
                raw = self.s[start : self.i]
                if raw[0] == "'" or "\\" not in raw:
                    parts.append(raw[1:-1])
                else:  # escapes: let tomllib decode them exactly
                    try:
                        parts.append(tomllib.loads("k = " + raw)["k"])
                    except tomllib.TOMLDecodeError:
                        parts.append(raw[1:-1])
            else:
                m = _BARE.match(self.s, self.i)
                if not m:
                    break
                parts.append(m.group())
                self.i = m.end()
            self._skip()
            if self.i < self.n and self.s[self.i] == ".":
                self.i += 1
                continue
            break
        return parts

    def _string(self) -> None:
        for pattern in _STRINGS:
            m = pattern.match(self.s, self.i)
            if m:
                self.i = m.end()
                return
        self.i += 1  # unterminated: tomllib has already rejected such text

    def _value(self, path: Key) -> None:
        if self.i >= self.n:
            return
        c = self.s[self.i]
        if c == "{":
            self.i += 1
            while self.i < self.n:
                self._skip(newlines=True)
                if self.i >= self.n:
                    return
                before = self.i
                if self.s[self.i] == "}":
                    self.i += 1
                    return
                if self.s[self.i] == ",":
                    self.i += 1
                    continue
                parts = self._key()
                self._skip()
                if self.i < self.n and self.s[self.i] == "=":
                    self.i += 1
                self._skip()
                self._value(self._record_key(path, parts, before))
                if self.i <= before:
                    self.i = before + 1
        elif c == "[":
            self.i += 1
            idx = 0
            while self.i < self.n:
                self._skip(newlines=True)
                if self.i >= self.n:
                    return
                before = self.i
                if self.s[self.i] == "]":
                    self.i += 1
                    return
                if self.s[self.i] == ",":
                    idx += 1
                    self.i += 1
                    continue
                self._record(path + (idx,), self.i)
                self._value(path + (idx,))
                if self.i <= before:
                    self.i = before + 1
        elif c in "\"'":
            self._string()
        else:
            self.i = _SCALAR.match(self.s, self.i).end()


def locate_keys(text: str) -> dict[Key, int]:
    """Line (1-based) of every key path in valid TOML text; array items get their index."""
    return _Scanner(text).run()


# ----------------------------------------------------------------------------- reading helpers


class _Doc:
    """One source file (profile or companion): its name, key lines and the shared problem list."""

    def __init__(self, file: str, lines: dict[Key, int], problems: list[Problem]):
        self.file = file
        self.lines = lines
        self.problems = problems

    def line(self, path: Key) -> int | None:
        for n in range(len(path), 0, -1):
            found = self.lines.get(path[:n])
            if found is not None:
                return found
        return None

    def add(self, path: Key, message: str) -> None:
        self.problems.append(Problem(self.file, self.line(path), format_path(path), message))


_MISSING: Any = object()


def _typename(v: Any) -> str:
    if isinstance(v, bool):
        return "a boolean"
    if isinstance(v, int):
        return "an integer"
    if isinstance(v, float):
        return "a number"
    if isinstance(v, str):
        return "a string"
    if isinstance(v, dict):
        return "a table"
    if isinstance(v, list):
        return "an array"
    return "a date/time"


def _show(v: Any) -> str:
    text = repr(v) if isinstance(v, str) else str(v).lower() if isinstance(v, bool) else str(v)
    return text if len(text) <= 40 else text[:37] + "..."


def _suggest(word: str, options: Iterable[str]) -> str:
    close = difflib.get_close_matches(word, list(options), n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


_EXPECT = {
    "str": "a string",
    "int": "an integer",
    "number": "a number",
    "bool": "true or false",
    "table": "a table",
    "array": "an array",
}


def _type_ok(v: Any, kind: str) -> bool:
    if kind == "str":
        return isinstance(v, str)
    if kind == "int":
        return isinstance(v, int) and not isinstance(v, bool)
    if kind == "number":
        return isinstance(v, int | float) and not isinstance(v, bool)
    if kind == "bool":
        return isinstance(v, bool)
    if kind == "table":
        return isinstance(v, dict)
    if kind == "array":
        return isinstance(v, list)
    return True


class _Table:
    """A table being read: typed getters that report problems, then unknown-key detection."""

    def __init__(self, doc: _Doc, data: dict[str, Any], path: Key):
        self.doc = doc
        self.data = data
        self.path = path
        self.seen: set[str] = set()
        self.skip = False  # a duplicate or id-less table: reported once, its keys not checked

    def at(self, key: str | int) -> Key:
        return self.path + (key,)

    def has(self, key: str) -> bool:
        return key in self.data

    def raw(self, key: str, default: Any = None) -> Any:
        self.seen.add(key)
        return self.data.get(key, default)

    def get(
        self,
        key: str,
        kind: str,
        default: Any = None,
        *,
        required: bool = False,
        check: Callable[[Any], str | None] | None = None,
    ) -> Any:
        """The value if present and valid, else ``default`` (with a problem recorded)."""
        self.seen.add(key)
        if key not in self.data:
            if required:
                self.doc.add(self.path, f"missing required key {key!r}")
            return default
        v = self.data[key]
        if not _type_ok(v, kind):
            self.doc.add(self.at(key), f"expected {_EXPECT[kind]}, got {_typename(v)} {_show(v)}")
            return default
        if kind == "number":
            if not math.isfinite(v):
                self.doc.add(self.at(key), f"must be a finite number, got {v}")
                return default
            v = float(v)
        if check is not None:
            msg = check(v)
            if msg:
                self.doc.add(self.at(key), msg)
                return default
        return v

    def choice(
        self,
        key: str,
        options: tuple[str, ...],
        default: Any = None,
        *,
        required: bool = False,
        what: str = "value",
        invalid: Any = _MISSING,
    ) -> Any:
        """One of ``options``; ``default`` when absent, ``invalid`` (default: ``default``) when wrong."""
        bad = default if invalid is _MISSING else invalid
        if key not in self.data:
            self.get(key, "str", None, required=required)
            return default
        v = self.get(key, "str", _MISSING)
        if v is _MISSING:
            return bad
        if v not in options:
            listed = ", ".join(repr(o) for o in options)
            self.doc.add(
                self.at(key),
                f"unknown {what} {v!r}; expected one of {listed}{_suggest(v, options)}",
            )
            return bad
        return v

    def table(self, key: str, *, required: bool = False) -> _Table | None:
        v = self.get(key, "table", None, required=required)
        return None if v is None else _Table(self.doc, v, self.at(key))

    def finish(self) -> None:
        """Report keys nobody asked for: typo protection."""
        if self.skip:
            return
        known = sorted(self.seen)
        for k in self.data:
            if k not in self.seen:
                self.doc.add(self.at(k), f"unknown key {k!r}{_suggest(k, known)}")


def _positive(v: float) -> str | None:
    return None if v > 0 else f"must be greater than 0, got {_show(v)}"


def _at_least(lo: int) -> Callable[[Any], str | None]:
    return lambda v: None if v >= lo else f"must be at least {lo}, got {_show(v)}"


def _within(lo: float, hi: float) -> Callable[[Any], str | None]:
    return lambda v: None if lo <= v <= hi else f"{_show(v)} is outside {lo}..{hi}"


def _fraction(v: float) -> str | None:
    return None if 0 < v <= 1 else f"must be a fraction in (0, 1], got {_show(v)}"


def _array_of_tables(doc: _Doc, root: _Table, key: str) -> list[_Table]:
    """``[[key]]`` tables; anything else in the array is reported and skipped."""
    if isinstance(root.data.get(key), dict):
        root.seen.add(key)
        doc.add((key,), f"expected an array of tables: write each one as [[{key}]], not [{key}]")
        return []
    items = root.get(key, "array", [])
    out = []
    for i, item in enumerate(items):
        if isinstance(item, dict):
            out.append(_Table(doc, item, (key, i)))
        else:
            doc.add((key, i), f"expected a table ([[{key}]]), got {_typename(item)} {_show(item)}")
    return out


def _ids(tables: list[_Table], what: str) -> dict[str, _Table]:
    """Each table's ``id`` (required string), reporting duplicates."""
    seen: dict[str, _Table] = {}
    for t in tables:
        ident = t.get(
            "id",
            "str",
            None,
            required=True,
            check=lambda v: None if v.strip() else "must not be empty",
        )
        if ident is None:
            t.skip = True
            continue
        if ident in seen:
            t.skip = True
            first = seen[ident].doc.line(seen[ident].path)
            where = f" (first at line {first})" if first else ""
            t.doc.add(t.at("id"), f"duplicate {what} id {ident!r}{where}")
            continue
        seen[ident] = t
    return seen


def _plural(word: str) -> str:
    return word + ("es" if word[-1] in "sh" else "s")


def _ref(
    t: _Table, key: str, known: Iterable[str], what: str, *, required: bool = True
) -> str | None:
    """A reference to another object by id; unknown ids are reported with a suggestion."""
    v = t.get(key, "str", None, required=required)
    if v is None:
        return None
    known = list(known)
    if v not in known:
        listed = (
            ", ".join(known[:12]) + (", ..." if len(known) > 12 else "")
            if known
            else "none defined"
        )
        t.doc.add(
            t.at(key), f"unknown {what} {v!r}{_suggest(v, known)} ({_plural(what)}: {listed})"
        )
        return None
    return v


# ----------------------------------------------------------------------------- sections


def _bench(doc: _Doc, root: _Table) -> tuple[dict[str, Any], list[Zone]]:
    b = root.table("bench", required=True)
    fields: dict[str, Any] = {
        "name": "",
        "frequency_hz": 50.0,
        "power_scale": 1.0,
        "s_base_va": 1.0,
        "description": "",
    }
    if b is not None:
        fields["name"] = b.get("name", "str", "", required=True)
        fields["description"] = b.get("description", "str", "")
        fields["frequency_hz"] = b.get(
            "frequency_hz", "number", 50.0, required=True, check=_positive
        )
        fields["s_base_va"] = b.get("s_base_va", "number", 1.0, required=True, check=_positive)
        fields["power_scale"] = b.get("power_scale", "number", 1.0, check=_positive)
        b.finish()
    zone_tables = _array_of_tables(doc, root, "zone")
    if not zone_tables and "zone" not in root.data:
        doc.add(
            ("zone",),
            "missing required [[zone]] table: every bench needs at least one voltage zone",
        )
    zones = []
    for ident, t in _ids(zone_tables, "zone").items():
        bench_v = t.get("bench_v_ll", "number", 1.0, required=True, check=_positive)
        net_v = t.get("network_v_ll", "number", bench_v, check=_positive)
        zones.append(Zone(ident, bench_v, net_v))
    for t in zone_tables:
        t.finish()
    return fields, zones


def _control(root: _Table) -> Control:
    t = root.table("control")
    if t is None:
        return Control()
    c = Control(
        enabled=t.get("enabled", "bool", False),
        verify_timeout_s=t.get("verify_timeout_s", "number", 3.0, check=_positive),
    )
    t.finish()
    return c


def _poll(root: _Table) -> PollSettings:
    t = root.table("poll")
    if t is None:
        return PollSettings()
    d = PollSettings()
    p = PollSettings(
        interval_s=t.get("interval_s", "number", d.interval_s, check=_positive),
        max_gap=t.get("max_gap", "int", d.max_gap, check=_at_least(0)),
        backoff_initial_s=t.get(
            "backoff_initial_s", "number", d.backoff_initial_s, check=_positive
        ),
        backoff_max_s=t.get("backoff_max_s", "number", d.backoff_max_s, check=_positive),
    )
    if p.backoff_max_s < p.backoff_initial_s:
        t.doc.add(
            t.at("backoff_max_s"),
            f"must not be less than backoff_initial_s ({p.backoff_initial_s})",
        )
    t.finish()
    return p


def _checks(root: _Table) -> CheckSettings:
    t = root.table("checks")
    if t is None:
        return CheckSettings()
    d = CheckSettings()
    overrides: dict[str, float] = {}
    o = t.table("overrides")
    if o is not None:
        for k in o.data:
            v = o.get(k, "number", None)
            if v is not None:
                overrides[k] = v
    c = CheckSettings(
        coverage_k=t.get("coverage_k", "number", d.coverage_k, check=_positive),
        warn_fraction=t.get("warn_fraction", "number", d.warn_fraction, check=_fraction),
        frequency_band_hz=t.get(
            "frequency_band_hz", "number", d.frequency_band_hz, check=_positive
        ),
        frozen_cycles=t.get("frozen_cycles", "int", d.frozen_cycles, check=_at_least(1)),
        voltage_band=t.get("voltage_band", "number", d.voltage_band, check=_fraction),
        unbalance_warn_pct=t.get(
            "unbalance_warn_pct", "number", d.unbalance_warn_pct, check=_positive
        ),
        overrides=overrides,
    )
    t.finish()
    return c


_REG_FIELDS = ("kind", "type", "word_order", "byte_order", "scale", "offset", "unit")


def _register_fields(t: _Table, inherited: dict[str, Any]) -> dict[str, Any]:
    """kind/type/orders/scale/offset/unit from one inline table, over ``inherited`` values."""
    out = dict(inherited)
    if t.has("kind"):
        out["kind"] = t.choice("kind", REGISTER_KINDS, None, what="register kind")
    if t.has("type"):
        out["type"] = t.choice("type", DATA_TYPES, None, what="data type")
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


def _maps(doc: _Doc, root: _Table) -> dict[str, RegisterMap]:
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
            ("vector", "arithmetic"),
            "arithmetic",
            what="apparent power definition",
        )
        max_read = mt.get("max_read", "int", 125, check=_within(1, 125))
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
        rt = mt.table("registers", required=True)
        specs: list[tuple[RegisterSpec, Key]] = []
        if rt is not None:
            if not rt.data:
                doc.add(rt.path, "a map needs at least one register")
            for qkey in rt.data:
                spec = _register(doc, rt, qkey, inherited)
                if spec is not None:
                    specs.append((spec, rt.at(qkey)))
            rt.finish()
        mt.finish()
        _overlaps(doc, specs)
        maps[map_id] = RegisterMap(
            map_id, tuple(s for s, _ in specs), description, apparent, max_read
        )
    m.finish()
    return maps


def _register(doc: _Doc, rt: _Table, qkey: str, inherited: dict[str, Any]) -> RegisterSpec | None:
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
                f"{qkey!r} is not a quantity key{_suggest(qkey, quantities.all_keys())} (see meas.quantities: e.g. 'p.A', 'v_ll.BC', 'f.T')",
            )
        return None
    value = rt.data[qkey]
    if isinstance(value, int) and not isinstance(value, bool):
        value = {"address": value}  # "p.A" = 20 is shorthand for { address = 20 }
    if not isinstance(value, dict):
        doc.add(
            path,
            f"expected an inline table like {{ address = 0 }}, got {_typename(value)} {_show(value)}",
        )
        return None
    t = _Table(doc, value, path)
    address = t.get("address", "int", None, required=True, check=_within(0, MAX_ADDRESS))
    fields = _register_fields(t, inherited)
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


def _overlaps(doc: _Doc, specs: list[tuple[RegisterSpec, Key]]) -> None:
    """Two quantities sharing a register of the same kind is a map typo."""
    for kind in REGISTER_KINDS:
        same = sorted(
            (s for s in specs if s[0].kind == kind), key=lambda s: (s[0].address, s[0].end)
        )
        reach: tuple[RegisterSpec, Key] | None = None
        for spec, path in same:
            if reach is not None and spec.address < reach[0].end:
                prev = reach[0]
                doc.add(
                    path,
                    f"{kind} registers {spec.address}..{spec.end - 1} overlap {prev.key!r} at {prev.address}..{prev.end - 1}",
                )
            if reach is None or spec.end > reach[0].end:
                reach = (spec, path)


def _transport(t: _Table, what: str) -> Transport | None:
    """Exactly one of ``tcp = {host, port}`` or ``rtu = {device, ...}``."""
    given = [k for k in ("tcp", "rtu") if t.has(k)]
    if len(given) != 1:
        msg = (
            "needs a transport: tcp = { host, port } or rtu = { device, ... }"
            if not given
            else "give only one of tcp and rtu"
        )
        t.doc.add(t.path, f"{what} {msg}")
        t.seen.update(("tcp", "rtu"))
        return None
    sub = t.table(given[0])
    if sub is None:
        return None
    if given[0] == "tcp":
        host = sub.get(
            "host",
            "str",
            None,
            required=True,
            check=lambda v: None if v.strip() else "must not be empty",
        )
        port = sub.get("port", "int", 502, check=_within(1, 65535))
        sub.finish()
        return None if host is None else TcpTransport(host, port)
    device = sub.get(
        "device",
        "str",
        None,
        required=True,
        check=lambda v: None if v.strip() else "must not be empty",
    )
    baud = sub.get("baudrate", "int", 9600, check=_positive)
    parity = sub.choice("parity", ("N", "E", "O"), "E", what="parity")
    stopbits = sub.get(
        "stopbits", "int", 1, check=lambda v: None if v in (1, 2) else f"must be 1 or 2, got {v}"
    )
    bytesize = sub.get(
        "bytesize", "int", 8, check=lambda v: None if v in (7, 8) else f"must be 7 or 8, got {v}"
    )
    sub.finish()
    return None if device is None else RtuTransport(device, baud, parity, stopbits, bytesize)


def _unit_id(t: _Table, transport: Transport | None) -> int:
    """Modbus unit id, default 1: RTU 1..247 (0 is broadcast), TCP 0..255."""
    rtu = isinstance(transport, RtuTransport)
    lo, hi = (1, 247) if rtu else (0, 255)
    value = t.get("unit_id", "int", None)
    if value is None:
        return 1
    if not lo <= value <= hi:
        t.doc.add(
            t.at("unit_id"),
            f"unit_id {value} is outside {lo}..{hi} for {'an RTU' if rtu else 'a TCP'} device",
        )
    return value


def _buses(doc: _Doc, root: _Table, zones: list[Zone]) -> dict[str, Bus]:
    tables = _array_of_tables(doc, root, "bus")
    out = {}
    zone_ids = [z.id for z in zones]
    for ident, t in _ids(tables, "bus").items():
        zone = _ref(t, "zone", zone_ids, "zone")
        out[ident] = Bus(ident, zone or "", t.get("label", "str", ""))
    for t in tables:
        t.finish()
    return out


def _branches(doc: _Doc, root: _Table, buses: dict[str, Bus]) -> tuple[dict[str, Branch], set[str]]:
    """Every branch with a valid id (so references resolve) and the ids of incomplete ones."""
    from .profile_branch_model import branch_model

    tables = _array_of_tables(doc, root, "branch")
    out = {}
    partial = set()
    ideal: dict[str, str] = {}
    for ident, t in _ids(tables, "branch").items():
        kind = t.choice("kind", BRANCH_KINDS, None, required=True, what="branch kind")
        from_bus = _ref(t, "from_bus", buses, "bus")
        to_bus = None
        if kind in TWO_ENDED:
            to_bus = _ref(t, "to_bus", buses, "bus")
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
        model = branch_model(t, kind, from_bus, ideal)
        if kind is None or from_bus is None or (kind in TWO_ENDED and to_bus is None):
            partial.add(ident)
        out[ident] = Branch(ident, kind or "load", from_bus or "", to_bus, label, model)
    for t in tables:
        t.finish()
    return out, partial


def _plcs(doc: _Doc, root: _Table) -> dict[str, Plc]:
    tables = _array_of_tables(doc, root, "plc")
    out = {}
    for ident, t in _ids(tables, "plc").items():
        transport = _transport(t, "plc")
        unit_id = _unit_id(t, transport)
        timeout = t.get("timeout_s", "number", 0.5, check=_positive)
        out[ident] = Plc(ident, transport or TcpTransport(""), unit_id, timeout)
    for t in tables:
        t.finish()
    return out


def _switches(
    doc: _Doc, root: _Table, branches: dict[str, Branch], plcs: dict[str, Plc]
) -> dict[str, Switch]:
    tables = _array_of_tables(doc, root, "switch")
    out = {}
    coils: dict[tuple[str, int], str] = {}
    for ident, t in _ids(tables, "switch").items():
        branch = _ref(t, "branch", branches, "branch")
        operation = t.choice(
            "operation", ("manual", "remote"), "manual", what="operation", invalid=None
        )
        normal = t.choice("normal", SWITCH_STATES, "closed", what="switch state")
        plc = _ref(t, "plc", plcs, "plc", required=False)
        coil = t.get("command_coil", "int", None, check=_within(0, MAX_ADDRESS))
        status = None
        st = t.table("status")
        if st is not None:
            skind = st.choice(
                "kind", ("coil", "discrete"), None, required=True, what="status point kind"
            )
            saddr = st.get("address", "int", None, required=True, check=_within(0, MAX_ADDRESS))
            st.finish()
            if skind is not None and saddr is not None:
                status = StatusPoint(skind, saddr)
        if operation == "remote":
            missing = [k for k in ("plc", "command_coil") if not t.has(k)]
            if missing:
                t.doc.add(
                    t.path,
                    f'remote switch {ident!r} needs {" and ".join(missing)}; or set operation = "manual"',
                )
        elif t.has("command_coil"):
            t.doc.add(
                t.at("command_coil"),
                'command_coil on a manual switch: the tool never operates it; remove it or set operation = "remote"',
            )
        if t.has("status") and not t.has("plc"):
            t.doc.add(
                t.at("status"), "a status point needs 'plc' to say which controller reports it"
            )
        if plc is not None and coil is not None and operation == "remote":
            other = coils.setdefault((plc, coil), ident)
            if other != ident:
                t.doc.add(
                    t.at("command_coil"), f"coil {coil} of {plc} already commands switch {other!r}"
                )
        operate_time = t.get("operate_time_s", "number", 0.2, check=_positive)
        # kept even when incomplete, so steps naming it do not report it as unknown
        out[ident] = Switch(
            ident,
            branch or "",
            t.get("label", "str", ""),
            operation,
            normal,
            plc,
            coil,
            status,
            operate_time,
        )
    for t in tables:
        t.finish()
    return out


def _classes(t: _Table) -> AccuracyClasses:
    ct = t.table("classes")
    if ct is None:
        return AccuracyClasses()
    values = {}
    for key in ("p", "q", "v", "i"):
        if not ct.has(key):
            continue
        v = ct.raw(key)
        if isinstance(v, int | float) and not isinstance(v, bool):
            v = f"{v:g}"  # classes = { p = 1 } means class "1"
        if not isinstance(v, str):
            ct.doc.add(ct.at(key), f'expected a class like "0.5S", got {_typename(v)} {_show(v)}')
        elif v not in ACCURACY_CLASSES:
            ct.doc.add(
                ct.at(key),
                f"unknown accuracy class {v!r}{_suggest(v, ACCURACY_CLASSES)} (classes: {', '.join(ACCURACY_CLASSES)})",
            )
        else:
            values[key] = v
    ct.finish()
    return AccuracyClasses(**values)


def _meters(
    doc: _Doc,
    root: _Table,
    maps: dict[str, RegisterMap],
    buses: dict[str, Bus],
    branches: dict[str, Branch],
    partial: set[str],
) -> list[Meter]:
    tables = _array_of_tables(doc, root, "meter")
    out = []
    endpoints: dict[tuple[str, int], str] = {}
    for ident, t in _ids(tables, "meter").items():
        transport = _transport(t, "meter")
        unit_id = _unit_id(t, transport)
        map_id = _ref(t, "map", maps, "map")
        bus = _ref(t, "bus", buses, "bus")
        branch = _ref(t, "branch", branches, "branch", required=False)
        if (
            bus is not None
            and branch is not None
            and branch not in partial
            and bus not in branches[branch].buses
        ):
            joins = "-".join(branches[branch].buses)
            t.doc.add(
                t.at("branch"),
                f"branch {branch!r} ({joins}) does not touch the meter's bus {bus!r}",
            )
        reports = t.choice("reports", ("primary", "secondary"), "primary", what="reporting side")
        ct_ratio = t.get("ct_ratio", "number", 1.0, check=_positive)
        vt_ratio = t.get("vt_ratio", "number", 1.0, check=_positive)
        if reports == "primary":
            for key in ("ct_ratio", "vt_ratio"):
                if t.has(key) and t.data[key] != 1:
                    t.doc.add(
                        t.at(key),
                        f'{key} is applied only when reports = "secondary"; set reports or remove {key}',
                    )
        meter = Meter(
            id=ident,
            label=t.get("label", "str", ""),
            transport=transport or TcpTransport("127.0.0.1"),
            unit_id=unit_id,
            map_id=map_id or "",
            bus=bus or "",
            branch=branch,
            timeout_s=t.get("timeout_s", "number", 0.5, check=_positive),
            retries=t.get("retries", "int", 1, check=_at_least(0)),
            reports=reports,
            ct_ratio=ct_ratio,
            vt_ratio=vt_ratio,
            ct_primary_a=t.get("ct_primary_a", "number", None, check=_positive),
            classes=_classes(t),
        )
        if transport is not None:
            other = endpoints.setdefault((transport.endpoint, unit_id), ident)
            if other != ident:
                t.doc.add(
                    t.at("unit_id") if t.has("unit_id") else t.path,
                    f"meter {other!r} already answers at {transport.endpoint} unit_id {unit_id}",
                )
        out.append(meter)
    for t in tables:
        t.finish()
    return out


def _states(t: _Table, key: str, switches: dict[str, Switch]) -> dict[str, str]:
    st = t.table(key)
    if st is None:
        return {}
    out = {}
    for sw in st.data:
        state = st.choice(sw, SWITCH_STATES, None, what="switch state")
        if sw not in switches:
            st.doc.add(
                st.at(sw),
                f"unknown switch {sw!r}{_suggest(sw, switches)} (switches: {', '.join(switches) or 'none defined'})",
            )
        elif state is not None:
            out[sw] = state
    return out


def _capture(t: _Table, kind: str | None) -> CapturePolicy | None:
    if not t.has("capture"):
        return None if kind in ("note", "hold") else CapturePolicy()
    v = t.raw("capture")
    if isinstance(v, bool):
        return CapturePolicy() if v else None
    if not isinstance(v, dict):
        t.doc.add(
            t.at("capture"),
            f"expected a table {{ snapshots, interval_s, settle }} or false, got {_typename(v)} {_show(v)}",
        )
        return None
    c = _Table(t.doc, v, t.at("capture"))
    d, ds = CapturePolicy(), SettleCriterion()
    snapshots = c.get("snapshots", "int", d.snapshots, check=_at_least(1))
    interval = c.get("interval_s", "number", d.interval_s, check=_positive)
    settle = ds
    s = c.table("settle")
    if s is not None:
        settle = SettleCriterion(
            window_s=s.get("window_s", "number", ds.window_s, check=_positive),
            rel_spread=s.get("rel_spread", "number", ds.rel_spread, check=_positive),
            timeout_s=s.get("timeout_s", "number", ds.timeout_s, check=_positive),
        )
        s.finish()
    c.finish()
    return CapturePolicy(snapshots, interval, settle)


def _steps(tables: list[_Table], switches: dict[str, Switch]) -> list[Step]:
    out = []
    for ident, t in _ids(tables, "step").items():
        kind = t.choice("kind", STEP_KINDS, None, required=True, what="step kind")
        expect = _states(t, "expect", switches)
        operate = _states(t, "operate", switches)
        if kind == "remote" and not t.has("operate"):
            t.doc.add(t.path, 'a remote step needs operate = { SWITCH = "open" | "closed" }')
        if kind not in ("remote", None) and t.has("operate"):
            t.doc.add(t.at("operate"), f"only remote steps operate switches; this step is {kind!r}")
        for sw, state in operate.items():
            if switches[sw].operation == "manual":
                t.doc.add(
                    t.at("operate") + (sw,),
                    f'switch {sw!r} is manual (operation = "manual"); it cannot be operated remotely: use a manual step',
                )
            if expect.get(sw, state) != state:
                t.doc.add(
                    t.at("expect") + (sw,),
                    f"expects {sw} {expect[sw]} but the step operates it {state}",
                )
        step = Step(
            id=ident,
            title=t.get("title", "str", "", required=True),
            instruction=t.get("instruction", "str", ""),
            kind=kind or "note",
            expect=expect,
            operate=operate,
            capture=_capture(t, kind),
            gate=t.choice("gate", ("block", "allow"), "block", what="gate"),
        )
        out.append(step)
    for t in tables:
        t.finish()
    return out


# ----------------------------------------------------------------------------- files


def _read(
    path: Path, problems: list[Problem], ref: tuple[_Doc, Key] | None = None
) -> tuple[bytes, _Doc, dict[str, Any]] | None:
    """Bytes, locator and parsed data of one file, or None with the reason recorded."""
    file = printable(str(path))

    def fail(message: str, line: int | None = None) -> None:
        if ref is not None:
            ref[0].add(ref[1], f"{file}: {message}")
        else:
            problems.append(Problem(file, line, "", message))

    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        fail(
            "no such file; check the path"
            if ref is None
            else "sequence file not found; the path is relative to the profile"
        )
        return None
    except IsADirectoryError:
        fail("is a directory; give the path of a .toml file")
        return None
    except PermissionError:
        fail("cannot be read: permission denied")
        return None
    except OSError as exc:
        fail(f"cannot be read: {exc.strerror or exc}")
        return None
    doc = _Doc(file, {}, problems)
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        problems.append(
            Problem(
                file,
                raw[: exc.start].count(b"\n") + 1,
                "",
                "not UTF-8 text; save the file as UTF-8",
            )
        )
        return None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = re.search(r"\s*\(at line (\d+), column (\d+)\)$", msg)
        line = None
        if m:
            line = int(m.group(1))
            msg = f"{msg[: m.start()]} (column {m.group(2)})"
        problems.append(Problem(file, line, "", f"TOML syntax: {msg}"))
        return None
    except RecursionError:  # tomllib recurses per nesting level of arrays and inline tables
        problems.append(
            Problem(
                file,
                None,
                "",
                f"values nested too deep; a profile needs at most {MAX_DEPTH} levels",
            )
        )
        return None
    except ValueError as exc:  # e.g. an integer longer than Python converts (sys.int_info)
        why = printable(str(exc)).split(":")[0]
        problems.append(
            Problem(file, None, "", f"a value cannot be read ({why}); give realistic values")
        )
        return None
    deep = _too_deep(data)
    if deep is not None:
        problems.append(
            Problem(
                file,
                None,
                format_path(deep),
                f"nested deeper than {MAX_DEPTH} levels; a profile needs far fewer",
            )
        )
        return None
    doc.lines = locate_keys(text)
    return raw, doc, data


def _too_deep(data: Any, limit: int | None = None) -> Key | None:
    """The first key path nested deeper than ``limit``, found without recursion; else None.

    Later stages (key locator, journal JSON, dataclass copies) recurse per level, so absurd
    nesting is refused here, before it can exhaust the stack.
    """
    limit = MAX_DEPTH if limit is None else limit
    stack: list[tuple[Any, Key]] = [(data, ())]
    while stack:
        value, path = stack.pop()
        if len(path) > limit:
            return path[: limit + 1]
        if isinstance(value, dict):
            stack.extend((v, path + (str(k),)) for k, v in value.items())
        elif isinstance(value, list):
            stack.extend((v, path + (i,)) for i, v in enumerate(value))
    return None


def companion_path(profile_path: str | Path, name: str) -> Path | None:
    """Where a companion file (``[sequence] file``) named in a profile is, or None if it is not
    a relative path inside the profile's folder.

    A profile is data that may come from anyone; its companion text is copied into the journal
    and the dataset, so it must never reach out to /etc/passwd or a neighbour's folder.
    """
    if not name or "\x00" in name or Path(name).is_absolute():
        return None
    folder = Path(profile_path).parent
    try:
        inside = (folder / name).resolve().is_relative_to(folder.resolve())
    except (OSError, RuntimeError, ValueError):  # symlink loops, unreadable folders
        return None
    return folder / name if inside else None


_TOP = (
    "bench",
    "zone",
    "control",
    "poll",
    "checks",
    "sequence",
    "sim",
    "maps",
    "bus",
    "branch",
    "plc",
    "switch",
    "meter",
    "step",
)


def check_profile(path: str | Path) -> tuple[Profile | None, list[Problem]]:
    """The profile and no problems, or None and every problem found (sorted by file, line)."""
    problems: list[Problem] = []
    p = Path(path)
    read = _read(p, problems)
    if read is None:
        return None, problems
    raw, doc, data = read
    digest = hashlib.sha256(raw)
    root = _Table(doc, data, ())
    bench_fields, zones = _bench(doc, root)
    control = _control(root)
    poll = _poll(root)
    checks = _checks(root)
    sim = root.get("sim", "table", {})
    maps = _maps(doc, root)
    buses = _buses(doc, root, zones)
    branches, partial = _branches(doc, root, buses)
    plcs = _plcs(doc, root)
    switches = _switches(doc, root, branches, plcs)
    meters = _meters(doc, root, maps, buses, branches, partial)
    step_tables = _array_of_tables(doc, root, "step")
    seq = root.table("sequence")
    if seq is not None:
        file = seq.get("file", "str", None, required=True)
        seq.finish()
        if file is not None:
            if step_tables:
                doc.add(
                    ("step",),
                    "steps are given both here and in [sequence] file; keep them in one place",
                )
            where = companion_path(p, file)
            companion = None
            if where is None:
                doc.add(
                    ("sequence", "file"),
                    f"{printable(file)!r} is not inside the profile's folder; keep the sequence file "
                    "beside the profile (or in a folder below it) and give its relative path",
                )
            else:
                companion = _read(where, problems, ref=(doc, ("sequence", "file")))
            if companion is not None:
                craw, cdoc, cdata = companion
                digest.update(craw)
                croot = _Table(cdoc, cdata, ())
                step_tables = _array_of_tables(cdoc, croot, "step")
                croot.finish()
    steps = _steps(step_tables, switches)
    root.seen.update(_TOP)
    root.finish()
    if not meters and "meter" not in data:
        doc.add(("meter",), "no [[meter]] tables: a bench needs at least one meter")
    if problems:
        order = {doc.file: 0}
        problems.sort(key=lambda q: (order.get(q.file, 1), q.line or 0))
        return None, problems
    profile = Profile(
        path=str(path),
        sha256=digest.hexdigest(),
        bench=Bench(zones=tuple(zones), **bench_fields),
        maps=maps,
        meters=tuple(meters),
        buses=tuple(buses.values()),
        branches=tuple(branches.values()),
        switches=tuple(switches.values()),
        plcs=tuple(plcs.values()),
        control=control,
        poll=poll,
        checks=checks,
        steps=tuple(steps),
        sim=dict(sim),
    )
    return profile, []


def load_profile(path: str | Path) -> Profile:
    """The validated profile; raises ``ProfileError`` listing every problem found."""
    profile, problems = check_profile(path)
    if profile is None:
        raise ProfileError(problems)
    return profile


def lint_profile(path: str | Path) -> list[Problem]:
    """Every problem in the profile (and its sequence file), in file order; [] when clean."""
    return check_profile(path)[1]
