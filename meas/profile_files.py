"""The profile's files as the journal keeps them: the main TOML and its companion files.

Interim home: this re-reads the files from disk when a session starts. The profile loader
will hand over the text it validated instead; until then the session passes this list to
``Journal.create``, so the journal itself never imports ``meas.profile``.
"""

from __future__ import annotations

import dataclasses
import json
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from .errors import BenchwalkError
from .model import Profile
from .profile import companion_path

COMPANION_TABLES = ("sequence",)  # tables whose ``file`` the loader reads as part of the profile


def profile_files(profile: Profile) -> list[tuple[str, str]]:
    """(name, text) of the profile file and the companion files it names (``file = ...``).

    Names are relative to the profile's folder, the main file first. A profile built in
    memory (no file) is kept as its JSON form so the journal is never without a description.
    """
    path = Path(profile.path) if profile.path else None
    if path is None or not path.is_file():
        as_json = json.dumps(dataclasses.asdict(profile), sort_keys=True, default=str)
        return [("profile.json", as_json)]
    try:
        text = path.read_bytes().decode("utf-8")  # bytes as hashed: no newline translation
        doc = tomllib.loads(text)
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise BenchwalkError(
            f"{path}: cannot read the profile to store it in the journal: {exc}"
        ) from exc
    out = [(path.name, text)]
    for name in _companion_names(doc):
        comp = companion_path(path, name)
        if comp is None:
            raise BenchwalkError(
                f"{path}: companion file {name!r} is not inside the profile's folder; keep it beside the profile"
            )
        try:
            out.append((Path(name).as_posix(), comp.read_bytes().decode("utf-8")))
        except (OSError, UnicodeDecodeError) as exc:
            raise BenchwalkError(f"{path}: companion file {name} cannot be read: {exc}") from exc
    return out


def _companion_names(doc: Mapping[str, Any]) -> list[str]:
    """Only the files the loader itself reads: a ``file`` key elsewhere (say in the free-form
    ``[sim]`` table) is plain data and must never pull a file into the journal."""
    names: list[str] = []
    for table in COMPANION_TABLES:
        value = doc.get(table)
        if isinstance(value, Mapping):
            f = value.get("file")
            if isinstance(f, str) and f not in names:
                names.append(f)
    return names
