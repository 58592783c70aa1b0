"""Where the demo profiles are, installed or in a source checkout.

The profiles live once, in the repository's top-level ``profiles_demo/``; the build maps that
folder into the wheel as the data package ``tui.profiles_demo`` (see ``setup.py``), read here
with ``importlib.resources``. A source checkout (``PYTHONPATH``, editable install) has no such
package, so the folder beside ``tui/`` is used.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from meas.errors import BenchwalkError

PACKAGE = "tui.profiles_demo"
FEEDER = "feeder_bench.toml"


def demo_profiles_dir() -> Path:
    """The folder holding the demo profiles (a real folder: a profile names its sequence file)."""
    try:
        root = resources.files(PACKAGE)
    except ModuleNotFoundError:
        root = None
    if root is not None:
        found = root.joinpath(FEEDER)
        if isinstance(found, Path) and found.is_file():
            return found.parent
    checkout = Path(__file__).resolve().parents[2] / "profiles_demo"
    if (checkout / FEEDER).is_file():
        return checkout
    raise BenchwalkError(
        f"the demo profiles are missing from this installation (no {PACKAGE} package and no "
        f"{checkout}/); reinstall benchwalk"
    )


def demo_profile(name: str = FEEDER) -> Path:
    """One demo profile by file name."""
    return demo_profiles_dir() / name
