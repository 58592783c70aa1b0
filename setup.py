"""Package layout that pyproject.toml alone cannot express (everything else is in pyproject.toml).

The demo profiles stay in the repository's top-level ``profiles_demo/`` and ship in the wheel
as the data package ``tui.profiles_demo`` (read by ``tui/commands/demo_profiles.py``).
"""

from setuptools import find_packages, setup

setup(
    packages=[*find_packages(include=["meas*", "tui*"]), "tui.profiles_demo"],
    package_dir={"tui.profiles_demo": "profiles_demo"},
)
