"""The simulated bench's clock when a session drives it: seconds counted in poll cycles.

A session on the simulated bench advances this clock by one poll interval before each poll
cycle and writes the bench's registers for that instant, so what a poll reads is a function
of the cycle number, never of when the poll happened to land. With the noise drawn per
(seed, meter, cycle) (``BenchEmulator``) two runs with the same seed read the same values.
Real benches keep real time; the standalone ``benchwalk sim`` keeps its wall-clock loop.
"""

from __future__ import annotations

import math

from ..errors import BenchwalkError


class CycleClock:
    """``t = cycle x cycle_s`` seconds, from 0 when the bench starts; ``advance`` is one cycle."""

    def __init__(self, cycle_s: float) -> None:
        if not math.isfinite(cycle_s) or cycle_s <= 0:
            raise BenchwalkError(f"the simulated clock needs a positive cycle, got {cycle_s!r}")
        self.cycle_s = float(cycle_s)
        self.cycle = 0

    def __call__(self) -> float:
        return self.cycle * self.cycle_s

    def advance(self, cycles: int = 1) -> float:
        """Move on ``cycles`` poll cycles (one, or the slots a late cycle skipped); the time."""
        self.cycle += max(1, int(cycles))
        return self()
