"""The typed table reader every section parser uses, and its small validators.

A technician fixes a profile faster from a full list than from one error per run, so reading
never stops at a problem: each getter records it against the key's line in the shared list
and returns a default, and ``Table.finish`` reports the keys nobody asked for (typos).
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable, Iterable
from typing import Any

from ..errors import Problem
from .scanner import BARE_KEY, Key

__all__ = [
    "Doc",
    "Table",
    "array_of_tables",
    "at_least",
    "format_path",
    "fraction",
    "ids",
    "not_empty",
    "positive",
    "printable",
    "ref",
    "show",
    "suggest",
    "typename",
    "within",
]


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
                part
                if BARE_KEY.fullmatch(part)
                else '"' + printable(part).replace('"', '\\"') + '"'
            )
            out += ("." if out else "") + text
    return out


class Doc:
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


def typename(v: Any) -> str:
    """A TOML value's type in the words of the TOML spec, for "expected X, got Y" messages."""
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


def show(v: Any) -> str:
    """A value as the profile spells it, cut short so a problem stays one line."""
    text = repr(v) if isinstance(v, str) else str(v).lower() if isinstance(v, bool) else str(v)
    return text if len(text) <= 40 else text[:37] + "..."


def suggest(word: str, options: Iterable[str]) -> str:
    """``; did you mean 'x'?`` for a near miss, else nothing."""
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


class Table:
    """A table being read: typed getters that report problems, then unknown-key detection."""

    def __init__(self, doc: Doc, data: dict[str, Any], path: Key):
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
            self.doc.add(self.at(key), f"expected {_EXPECT[kind]}, got {typename(v)} {show(v)}")
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
                f"unknown {what} {v!r}; expected one of {listed}{suggest(v, options)}",
            )
            return bad
        return v

    def table(self, key: str, *, required: bool = False) -> Table | None:
        v = self.get(key, "table", None, required=required)
        return None if v is None else Table(self.doc, v, self.at(key))

    def finish(self) -> None:
        """Report keys nobody asked for: typo protection."""
        if self.skip:
            return
        known = sorted(self.seen)
        for k in self.data:
            if k not in self.seen:
                self.doc.add(self.at(k), f"unknown key {k!r}{suggest(k, known)}")


# Validators for ``Table.get(check=...)``: None when the value is fine, else the problem.


def positive(v: float) -> str | None:
    return None if v > 0 else f"must be greater than 0, got {show(v)}"


def at_least(lo: int) -> Callable[[Any], str | None]:
    return lambda v: None if v >= lo else f"must be at least {lo}, got {show(v)}"


def within(lo: float, hi: float) -> Callable[[Any], str | None]:
    return lambda v: None if lo <= v <= hi else f"{show(v)} is outside {lo}..{hi}"


def fraction(v: float) -> str | None:
    return None if 0 < v <= 1 else f"must be a fraction in (0, 1], got {show(v)}"


def not_empty(v: str) -> str | None:
    return None if v.strip() else "must not be empty"


def array_of_tables(doc: Doc, root: Table, key: str) -> list[Table]:
    """``[[key]]`` tables; anything else in the array is reported and skipped."""
    if isinstance(root.data.get(key), dict):
        root.seen.add(key)
        doc.add((key,), f"expected an array of tables: write each one as [[{key}]], not [{key}]")
        return []
    items = root.get(key, "array", [])
    out = []
    for i, item in enumerate(items):
        if isinstance(item, dict):
            out.append(Table(doc, item, (key, i)))
        else:
            doc.add((key, i), f"expected a table ([[{key}]]), got {typename(item)} {show(item)}")
    return out


def ids(tables: list[Table], what: str) -> dict[str, Table]:
    """Each table's ``id`` (required string), reporting duplicates."""
    seen: dict[str, Table] = {}
    for t in tables:
        ident = t.get("id", "str", None, required=True, check=not_empty)
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


def ref(
    t: Table, key: str, known: Iterable[str], what: str, *, required: bool = True
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
        t.doc.add(t.at(key), f"unknown {what} {v!r}{suggest(v, known)} ({_plural(what)}: {listed})")
        return None
    return v
