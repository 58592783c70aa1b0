"""Read a bench profile (TOML) and validate it into ``meas.model``, reporting every problem."""

from .files import (
    check_profile,
    companion_path,
    format_path,
    lint_profile,
    load_profile,
    locate_keys,
)

__all__ = [
    "check_profile",
    "companion_path",
    "format_path",
    "lint_profile",
    "load_profile",
    "locate_keys",
]
