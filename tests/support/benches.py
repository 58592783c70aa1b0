"""Fast copies of the demo bench written as real profile files, and a short test sequence.

The bench is the invented demo bench (``profiles_demo/``) with a shorter simulated transient
and faster polling; the sequences are invented for the tests.
"""

from __future__ import annotations

import re
from pathlib import Path

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"


FAST_CAPTURE = "capture = { snapshots = 2, interval_s = 0.1, settle = { window_s = 0.5, rel_spread = 0.01, timeout_s = 6.0 } }"


# The simulated bench starts with every switch in its normal state (the radial base case).
TEST_SEQUENCE = f"""
[[step]]
id = "radial"
title = "Radial base case"
kind = "capture"
instruction = "Check the bench is radial, then capture."
expect = {{ CB1 = "closed", SW2 = "closed", SW3 = "closed", TIE = "open", RX = "open", LB2 = "closed" }}
{FAST_CAPTURE}

[[step]]
id = "rx-in"
title = "Reactor in"
kind = "remote"
instruction = "Close RX from the tool."
operate = {{ RX = "closed" }}
{FAST_CAPTURE}

[[step]]
id = "sign-off"
title = "Hold"
kind = "hold"
instruction = "Sign off."

[[step]]
id = "tie"
title = "Tie closed"
kind = "manual"
instruction = "Close the tie by hand."
expect = {{ TIE = "closed" }}
{FAST_CAPTURE}
gate = "allow"

[[step]]
id = "remark"
title = "Remark"
kind = "note"
instruction = "Write a remark."
"""


def fast_profile_text(text: str, verify_timeout_s: float | None = None) -> str:
    """The demo profile with a short simulated transient and faster polling (same bench).

    The transient keeps the demo's ratio to the fast settle window (0.5 s / 0.1 s = 1.5 s / 0.3 s),
    so a capture the settle criterion allows is as settled as the demo's (fit-worthy).
    """
    text, n = re.subn(r"(?m)^settle_s = [0-9.]+ ", "settle_s = 0.1 ", text, count=1)
    assert n == 1, "the demo profile's [sim] settle_s line was not found"
    text = text.replace("[poll]\ninterval_s = 0.2", "[poll]\ninterval_s = 0.1", 1)
    text = text.replace("update_hz = 20", "update_hz = 10", 1)
    if verify_timeout_s is not None:
        text = text.replace("verify_timeout_s = 3.0", f"verify_timeout_s = {verify_timeout_s}", 1)
    return text


def write_bench(folder: Path, sequence: str = TEST_SEQUENCE, edit=None) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    text = fast_profile_text(DEMO.read_text())
    if edit is not None:
        text = edit(text)
    (folder / "feeder_bench.toml").write_text(text)
    (folder / "feeder_bench.sequence.toml").write_text(sequence)
    return folder / "feeder_bench.toml"


def fast_sequence_text(text: str) -> str:
    """The demo sequence with short capture policies (same steps, same switching)."""

    return re.sub(r"(?m)^capture = \{.*\}$", FAST_CAPTURE, text)


def write_fast_demo(folder: Path) -> Path:
    """The demo profile and demo sequence, sped up for tests."""
    seq = (DEMO.parent / "feeder_bench.sequence.toml").read_text()
    return write_bench(folder, fast_sequence_text(seq))
