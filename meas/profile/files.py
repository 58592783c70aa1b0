"""Read a bench profile (TOML) and validate it into ``meas.model``, reporting every problem.

The loader keeps going after a problem and raises one ``ProfileError`` with all of them, each
as ``file:line: key.path: what is wrong``, sorted by file and line. This module reads the
files (the profile and its ``[sequence] file`` companion) and runs the section parsers in
order. A profile is data only: nothing in it is executed or imported.
"""

from __future__ import annotations

import hashlib
import re
import tomllib
from pathlib import Path
from typing import Any

from ..errors import Problem, ProfileError
from ..model import Profile, SourceFile
from .cover import read_cover
from .devices import read_meters, read_plcs, read_switches
from .maps import read_maps
from .network import read_branches, read_buses
from .scanner import Key, locate_keys
from .settings import read_bench, read_checks, read_control, read_poll, read_sim
from .steps import read_steps
from .tables import Doc, Table, array_of_tables, format_path, printable

__all__ = ["MAX_DEPTH", "check_profile", "companion_path", "lint_profile", "load_profile"]

MAX_DEPTH = 32  # nesting levels of tables and arrays; real profiles use about 5


def _read_file(
    path: Path, problems: list[Problem], ref: tuple[Doc, Key] | None = None
) -> tuple[bytes, str, Doc, dict[str, Any]] | None:
    """Bytes, text, locator and parsed data of one file, or None with the reason recorded."""
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
    doc = Doc(file, {}, problems)
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
    return raw, text, doc, data


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


_TOP = (  # the top-level keys the loader reads; any other is reported as unknown
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
    "report",
)


def check_profile(path: str | Path) -> tuple[Profile | None, list[Problem]]:
    """The profile and no problems, or None and every problem found (sorted by file, line)."""
    problems: list[Problem] = []
    p = Path(path)
    read = _read_file(p, problems)
    if read is None:
        return None, problems
    raw, text, doc, data = read
    digest = hashlib.sha256(raw)
    sources = [SourceFile(p.name, text)]
    root = Table(doc, data, ())
    bench = read_bench(doc, root)
    control = read_control(root)
    poll = read_poll(root)
    checks = read_checks(root)
    sim = read_sim(root)

    def map_file(key: Key, name: str) -> tuple[str, str] | None:
        """A file the profile names (a CSV register map): kept in sources and the digest."""
        where = companion_path(p, name)
        if where is None:
            doc.add(
                key, f"{printable(name)!r} is not inside the profile's folder; give a relative path"
            )
            return None
        try:
            raw_csv = where.read_bytes()
            text_csv = raw_csv.decode("utf-8-sig")
        except (OSError, UnicodeDecodeError) as exc:
            doc.add(
                key, f"{printable(name)}: cannot be read ({getattr(exc, 'strerror', None) or exc})"
            )
            return None
        digest.update(raw_csv)
        sources.append(SourceFile(Path(name).as_posix(), text_csv))
        return Path(name).as_posix(), text_csv

    maps = read_maps(doc, root, map_file)
    buses = read_buses(doc, root, bench.zones)
    branches, partial = read_branches(doc, root, buses)
    plcs = read_plcs(doc, root)
    switches = read_switches(doc, root, branches, plcs)
    meters = read_meters(doc, root, maps, buses, branches, partial)
    cover = read_cover(root)
    step_tables = array_of_tables(doc, root, "step")
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
                companion = _read_file(where, problems, ref=(doc, ("sequence", "file")))
            if companion is not None:
                craw, ctext, cdoc, cdata = companion
                digest.update(craw)
                sources.append(SourceFile(Path(file).as_posix(), ctext))
                croot = Table(cdoc, cdata, ())
                step_tables = array_of_tables(cdoc, croot, "step")
                croot.finish()
    steps = read_steps(step_tables, switches)
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
        bench=bench,
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
        sources=tuple(sources),
        cover=cover,
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
