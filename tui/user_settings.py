"""The person's console settings (the theme), kept in a per-user config file between runs.

The file is ``settings.toml`` in the per-user config folder (``platformdirs``, e.g.
``~/.config/benchwalk/``) or at ``$BENCHWALK_CONFIG``. A missing or unreadable file means the
defaults: a setting is a convenience and never stops the console from starting.
"""

from __future__ import annotations

import json
import os
import tomllib
from dataclasses import dataclass, replace
from pathlib import Path

DEFAULT_THEME = "textual-dark"


@dataclass(frozen=True)
class Settings:
    theme: str = DEFAULT_THEME


def settings_path() -> Path:
    env = os.environ.get("BENCHWALK_CONFIG")
    if env:
        return Path(env)
    from platformdirs import user_config_path

    return user_config_path("benchwalk", appauthor=False) / "settings.toml"


def load_settings(path: Path | None = None) -> Settings:
    """The saved settings, or the defaults where the file or a key is missing or unreadable."""
    path = path or settings_path()
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return Settings()
    theme = data.get("theme")
    return Settings(theme=theme) if isinstance(theme, str) and theme else Settings()


def save_settings(settings: Settings, path: Path | None = None) -> bool:
    """Write the settings (atomically); False when the folder is not writable (not an error)."""
    path = path or settings_path()
    text = f"# benchwalk console settings\ntheme = {json.dumps(settings.theme)}\n"
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_name(path.name + ".tmp")
        tmp.write_text(text, encoding="utf-8")
        tmp.replace(path)
    except OSError:
        return False
    return True


def remember_theme(theme: str, path: Path | None = None) -> bool:
    """Save a newly chosen theme, keeping the other settings."""
    current = load_settings(path)
    if current.theme == theme:
        return True
    return save_settings(replace(current, theme=theme), path)
