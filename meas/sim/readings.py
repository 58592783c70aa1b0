"""The readings the simulated meters start from: the ideal load-flow readings of
``meas.network.readings`` (the one derivation from phasors), and the Protocol the meter
emulation reads a solved state through."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Protocol

from ..network.readings import (
    BenchState,
    dead_values,
    ideal_readings,
    meter_phasors,
    meter_values,
)

__all__ = [
    "BenchState",
    "IdealReadings",
    "dead_values",
    "ideal_readings",
    "meter_phasors",
    "meter_values",
]


class IdealReadings(Protocol):
    """What the meter emulation reads of a solved state: ``BenchState`` or a hand-made one.

    A ``phasors`` attribute like ``BenchState``'s is used when present.
    """

    @property
    def meters(self) -> Mapping[str, Mapping[str, float]]: ...
