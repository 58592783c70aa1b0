"""Read a dataset folder back: its package, every file checked against its hash, its tables.

A dataset folder may come from anyone, edited by hand or damaged in transit: every path in
its ``datapackage.json`` must stay inside the folder, and whatever is wrong is one clear line.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import BenchwalkError, ProfileError
from ..model import Profile
from .files import sha256_of
from .schema import (
    DATA_DIR,
    FORMAT_VERSION,
    MAIN_PROFILE,
    PROFILE_DIR,
    TABLES,
    arrow_schema,
    column_names,
    tables_in,
)

Package = dict[str, Any]  # datapackage.json as read: data from anyone, checked where used


@dataclass
class Dataset:
    path: Path
    meta: dict[str, Any]  # the package's "benchwalk" property
    tables: dict[str, pd.DataFrame]
    profile_files: dict[str, str] = field(default_factory=dict)  # relative path -> text

    @property
    def session(self) -> str:
        return self.meta["session"]

    @property
    def profile_path(self) -> Path:
        return self.path / PROFILE_DIR / MAIN_PROFILE

    def load_profile(self) -> Profile:
        """The bench profile from the copied files (``meas.profile.load_profile``)."""
        from ..profile import load_profile  # noqa: PLC0415 - keeps dataset import light

        inside = _member(self.path, f"{PROFILE_DIR}/{MAIN_PROFILE}")
        if inside is None:  # a symlink (or a folder) leading out of the dataset: never read
            raise bad_dataset(
                self.path, f"{PROFILE_DIR}/{MAIN_PROFILE} leads outside the dataset folder"
            )
        if not self.profile_path.is_file():
            raise BenchwalkError(
                f"{self.path}: the dataset has no {PROFILE_DIR}/{MAIN_PROFILE} to rebuild the bench from"
            )
        try:
            return load_profile(self.profile_path)
        except ProfileError as exc:  # one line here: the full list is for `benchwalk lint`
            more = (
                f" (and {len(exc.problems) - 1} more; see benchwalk lint)"
                if len(exc.problems) > 1
                else ""
            )
            raise bad_dataset(
                self.path, f"its profile does not load: {exc.problems[0]}{more}"
            ) from None

    def __getitem__(self, name: str) -> pd.DataFrame:
        return self.tables[name]


def show_rel(rel: object) -> str:
    """A descriptor path as one short printable line, whatever it holds."""
    text = rel if isinstance(rel, str) else repr(rel)
    text = text.encode("unicode_escape", "backslashreplace").decode("ascii")
    return text if len(text) <= 120 else text[:117] + "..."


def bad_dataset(path: Path, what: str) -> BenchwalkError:
    return BenchwalkError(
        f"{path}: not a usable benchwalk dataset: {what}; export it again from the session journal"
    )


def read_package(folder: Path) -> Package:
    """The datapackage.json, checked for the parts benchwalk relies on."""
    folder = Path(folder)
    if not folder.is_dir():
        raise BenchwalkError(f"{folder}: no such dataset folder")
    dp = folder / "datapackage.json"
    try:
        pkg = json.loads(dp.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise bad_dataset(folder, "datapackage.json is missing") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise bad_dataset(folder, f"datapackage.json cannot be read ({exc})") from None
    except (RecursionError, ValueError):  # absurd nesting; numbers too long to convert
        raise bad_dataset(
            folder, "datapackage.json cannot be read (nested too deep or a number too long)"
        ) from None
    if (
        not isinstance(pkg, dict)
        or not isinstance(pkg.get("benchwalk"), dict)
        or not isinstance(pkg.get("resources"), list)
    ):
        raise bad_dataset(folder, "datapackage.json is not a benchwalk data package")
    meta = pkg["benchwalk"]
    for key in ("session", "bench"):
        if not isinstance(meta.get(key), str):
            raise bad_dataset(folder, f"datapackage.json has no benchwalk.{key} text")
    if not isinstance(meta.get("profile_files", []), list):
        raise bad_dataset(folder, "profile_files in datapackage.json is malformed")
    if not isinstance(meta.get("meta", {}), dict):
        raise bad_dataset(folder, "benchwalk.meta in datapackage.json is malformed")
    return pkg


def _member(folder: Path, rel: object) -> Path | None:
    """``folder / rel`` if ``rel`` is a relative path that stays inside the folder, else None.

    A descriptor is data from anyone: its paths must not reach /etc/passwd through an
    absolute path, ``..`` or a symlink.
    """
    if not isinstance(rel, str) or not rel or "\x00" in rel or "\\" in rel:
        return None
    parts = PurePosixPath(rel).parts
    if PurePosixPath(rel).is_absolute() or ".." in parts:
        return None
    try:
        p = folder / rel
        if not p.resolve().is_relative_to(folder.resolve()):
            return None
    except (OSError, RuntimeError, ValueError):
        return None
    return p


def _is_file(p: Path) -> bool:
    try:
        return p.is_file()
    except (OSError, ValueError):  # a name too long for the file system, say
        return False


def _verify_file(
    folder: Path, rel: object, expected_hash: object, expected_bytes: object = None
) -> Path:
    p = _member(folder, rel)
    if p is None:
        raise bad_dataset(folder, f"{show_rel(rel)} is not a path inside the dataset folder")
    if not _is_file(p):
        raise bad_dataset(folder, f"{show_rel(rel)} is missing")
    if expected_bytes is not None and p.stat().st_size != expected_bytes:
        raise bad_dataset(
            folder,
            f"{rel} has {p.stat().st_size} bytes, the package says {expected_bytes} (truncated or changed)",
        )
    if not isinstance(expected_hash, str) or not expected_hash.startswith("sha256:"):
        raise bad_dataset(folder, f"{rel} has no sha256 in datapackage.json")
    if "sha256:" + sha256_of(p) != expected_hash:
        raise bad_dataset(
            folder, f"{rel} does not match its sha256 in datapackage.json (damaged or edited)"
        )
    return p


def _resources(folder: Path, pkg: Package) -> dict[str, dict[str, Any]]:
    out = {}
    for r in pkg["resources"]:
        if isinstance(r, dict) and isinstance(r.get("name"), str):
            out[r["name"]] = r
    return out


def verify_dataset(folder: Path) -> Package:
    """Check every file against its hash and size; returns the package. Cheap enough to do always."""
    folder = Path(folder)
    pkg = read_package(folder)
    res = _resources(folder, pkg)
    for name in tables_in(format_minor(pkg)):
        r = res.get(name)
        if r is None:
            raise bad_dataset(folder, f"table {name} is not listed in datapackage.json")
        _verify_file(folder, r.get("path"), r.get("hash"), r.get("bytes"))
        alt = r.get("benchwalk:parquet")
        if not isinstance(alt, dict):
            raise bad_dataset(folder, f"table {name} has no Parquet copy listed")
        _verify_file(folder, alt.get("path"), alt.get("hash"), alt.get("bytes"))
    for entry in pkg["benchwalk"].get("profile_files", []):
        if not isinstance(entry, dict):
            raise bad_dataset(folder, "profile_files in datapackage.json is malformed")
        _verify_file(folder, entry.get("path"), entry.get("hash"))
    return pkg


def format_minor(pkg: Package) -> int:
    """The package's minor format number (0 for datasets written before minors existed)."""
    minor = pkg["benchwalk"].get("format_minor", 0)
    return minor if isinstance(minor, int) and not isinstance(minor, bool) and minor >= 0 else 0


def empty_table(name: str) -> pd.DataFrame:
    """A table an older dataset does not hold: no rows, the schema's columns and types."""
    return arrow_schema(name).empty_table().to_pandas()


def read_table(
    folder: Path,
    name: str,
    *,
    columns: list[str] | None = None,
    filters: Sequence[tuple[str, str, object]] | None = None,
) -> pd.DataFrame:
    """One table from its Parquet copy, with its columns checked against the schema."""
    folder = Path(folder)
    p = folder / DATA_DIR / f"{name}.parquet"
    if _member(folder, f"{DATA_DIR}/{name}.parquet") is None:
        raise bad_dataset(folder, f"{DATA_DIR}/{name}.parquet leads outside the dataset folder")
    want = column_names(name)
    try:  # the file's columns first (cheap): a column missing is one short line, not pyarrow's
        have = pq.read_schema(p).names
    except FileNotFoundError:
        raise bad_dataset(folder, f"{DATA_DIR}/{name}.parquet is missing") from None
    except (OSError, pa.ArrowException, ValueError) as exc:
        raise bad_dataset(
            folder, f"{DATA_DIR}/{name}.parquet cannot be read ({show_rel(str(exc))})"
        ) from None
    if missing := [c for c in want if c not in have]:
        raise bad_dataset(folder, f"{name} lacks the column(s) {', '.join(missing)}")
    try:
        t = pq.read_table(p, columns=columns, filters=filters)
    except FileNotFoundError:
        raise bad_dataset(folder, f"{DATA_DIR}/{name}.parquet is missing") from None
    except (OSError, pa.ArrowException, ValueError) as exc:
        raise bad_dataset(
            folder, f"{DATA_DIR}/{name}.parquet cannot be read ({show_rel(str(exc))})"
        ) from None
    if columns is None and t.column_names != want:
        raise bad_dataset(folder, f"{name} has columns {show_rel(t.column_names)}, expected {want}")
    expected = arrow_schema(name)
    for f in t.schema:
        if f.name not in expected.names:
            continue
        want_type = expected.field(f.name).type
        if pa.types.is_large_string(f.type) and pa.types.is_string(want_type):
            # the same text column as pandas 3 writes it back: read it as the schema's type
            t = t.set_column(t.schema.get_field_index(f.name), f.name, t[f.name].cast(want_type))
        elif not f.type.equals(want_type):
            raise bad_dataset(folder, f"{name}.{f.name} holds {f.type}, expected {want_type}")
    try:
        return t.to_pandas()
    except (pa.ArrowException, ValueError, OverflowError) as exc:
        raise bad_dataset(
            folder, f"{DATA_DIR}/{name}.parquet cannot be read ({show_rel(str(exc))})"
        ) from None


def load_dataset(
    folder: Path, *, tables: Sequence[str] | None = None, verify: bool = True
) -> Dataset:
    """The dataset's tables as pandas frames, after checking every file; BenchwalkError if damaged."""
    folder = Path(folder)
    pkg = verify_dataset(folder) if verify else read_package(folder)
    fmt = pkg["benchwalk"].get("format")
    if fmt != FORMAT_VERSION:
        raise bad_dataset(
            folder, f"it is dataset format {fmt!r}; this benchwalk reads format {FORMAT_VERSION}"
        )
    held = set(tables_in(format_minor(pkg)))
    frames = {
        name: read_table(folder, name) if name in held else empty_table(name)
        for name in (tables or TABLES)
    }
    files = {}
    for entry in pkg["benchwalk"].get("profile_files", []):
        p = _member(folder, entry.get("path")) if isinstance(entry, dict) else None
        if p is None:
            raise bad_dataset(folder, "profile_files in datapackage.json is malformed")
        try:
            files[entry["path"]] = p.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise bad_dataset(folder, f"profile file cannot be read ({exc})") from None
    return Dataset(folder, pkg["benchwalk"], frames, files)


# ---------------------------------------------------------------- several sessions as one table
