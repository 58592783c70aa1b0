"""Shared test set-up.

Under CI (``CI`` set in the environment) hypothesis runs derandomized, so a submission's CI
result is reproducible; locally it explores new examples on every run.
"""

from __future__ import annotations

import os

from hypothesis import settings

settings.register_profile("ci", derandomize=True, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")
