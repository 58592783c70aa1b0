"""Read a bench profile (TOML) and validate it into ``meas.model``, reporting every problem.

One module per job: ``scanner`` (the line of every key), ``tables`` (the typed table reader),
one parser per section (``settings``, ``maps``, ``network``, ``devices``, ``steps``) and
``files`` (reading files, the companion sequence file, ``check_profile``).
"""

from .files import check_profile, companion_path, lint_profile, load_profile
from .scanner import locate_keys
from .tables import format_path

__all__ = [
    "check_profile",
    "companion_path",
    "format_path",
    "lint_profile",
    "load_profile",
    "locate_keys",
]
