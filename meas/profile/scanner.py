"""The line of every key in a profile's TOML text.

tomllib gives values but no positions, so this small scanner walks the source text once and
maps every key path to the line that defines it; the loader's problems cite those lines.
It only runs on text tomllib has already accepted.
"""

from __future__ import annotations

import bisect
import re
import tomllib

__all__ = ["BARE_KEY", "Key", "locate_keys"]

Key = tuple[str | int, ...]

BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")  # a key TOML accepts without quotes
_SCALAR = re.compile(r"[^,\]}\n\r#]*")
_GAP = re.compile(r"(?:[ \t]|#[^\n]*)*")
_GAP_NL = re.compile(r"(?:[ \t\r\n]|#[^\n]*)*")
_STRINGS = (  # TOML 1.0 string forms; multi-line ones may end with up to two extra quotes
    re.compile(r'"""(?:[^"\\]|\\.|"(?!""))*"""(?:"{1,2}(?!"))?', re.S),
    re.compile(r"'''(?:[^']|'(?!''))*'''(?:'{1,2}(?!'))?", re.S),
    re.compile(r'"(?:[^"\\\n]|\\.)*"'),
    re.compile(r"'[^'\n]*'"),
)


def _end(pattern: re.Pattern[str], text: str, pos: int) -> int:
    """Where ``pattern`` stops matching at ``pos``; gaps and scalars may match nothing."""
    m = pattern.match(text, pos)
    return pos if m is None else m.end()


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
        self.i = _end(_GAP_NL if newlines else _GAP, self.s, self.i)

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
                m = BARE_KEY.match(self.s, self.i)
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
            self.i = _end(_SCALAR, self.s, self.i)


def locate_keys(text: str) -> dict[Key, int]:
    """Line (1-based) of every key path in valid TOML text; array items get their index."""
    return _Scanner(text).run()
