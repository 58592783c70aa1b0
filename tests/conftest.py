"""Shared test set-up.

Under CI (``CI`` set in the environment) hypothesis runs derandomized, so a submission's CI
result is reproducible; locally it explores new examples on every run.
"""

from __future__ import annotations

import os

# one BLAS thread, as the benchwalk command sets (tui/cli.py): before anything imports numpy
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import pytest  # noqa: E402
from hypothesis import settings

settings.register_profile("ci", derandomize=True, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")


@pytest.fixture(autouse=True)
def _private_user_settings(tmp_path, monkeypatch):
    """The console's per-user settings file is the test's own, never the person's."""
    monkeypatch.setenv("BENCHWALK_CONFIG", str(tmp_path / "user-settings.toml"))
