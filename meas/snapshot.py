"""One poll cycle's readings, immutable once made.

Per meter a block of engineering values keyed by ``"<quantity>.<phase>"`` (see
``meas.quantities``), each with a quality code. Values that failed carry NaN so that
arithmetic downstream never mistakes a missing reading for zero.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime
from enum import StrEnum
from types import MappingProxyType


class Quality(StrEnum):
    OK = "ok"
    TIMEOUT = "timeout"
    EXCEPTION = "exception"  # the device answered with a Modbus exception
    DECODE = "decode"  # NaN, Inf or an impossible value in the registers
    OFFLINE = "offline"  # not connected; waiting for backoff before the next try
    STALE = "stale"  # value repeated from an earlier cycle (never produced by the poller)


class CommState(StrEnum):
    OK = "ok"
    DEGRADED = "degraded"  # answered, but some values bad or a retry was needed
    FAILING = "failing"  # no good answer this cycle
    OFFLINE = "offline"  # connection down, in backoff


@dataclass(frozen=True)
class MeterBlock:
    meter: str
    values: Mapping[str, float]
    quality: Mapping[str, Quality]
    state: CommState
    exception_code: int | None = None
    error: str = ""  # one line: what went wrong this cycle
    last_good_utc: datetime | None = None
    error_count: int = 0  # consecutive failed cycles
    latency_s: float = math.nan

    def __post_init__(self) -> None:
        object.__setattr__(self, "values", MappingProxyType(dict(self.values)))
        object.__setattr__(self, "quality", MappingProxyType(dict(self.quality)))

    def get(self, key: str) -> float:
        """The value if its quality is ok, else NaN."""
        if self.quality.get(key) is Quality.OK:
            return self.values.get(key, math.nan)
        return math.nan

    def ok(self, key: str) -> bool:
        return self.quality.get(key) is Quality.OK


@dataclass(frozen=True)
class Snapshot:
    seq: int
    time_utc: datetime
    t_mono: float
    meters: Mapping[str, MeterBlock]
    switches: Mapping[str, str] = field(
        default_factory=dict
    )  # switch id -> "open"/"closed"/"unknown"
    cycle_s: float = math.nan

    def __post_init__(self) -> None:
        object.__setattr__(self, "meters", MappingProxyType(dict(self.meters)))
        object.__setattr__(self, "switches", MappingProxyType(dict(self.switches)))
