"""What a check says about one subject in one snapshot."""

from __future__ import annotations

import math
from dataclasses import dataclass
from enum import StrEnum


class Status(StrEnum):
    PASS = "pass"
    WARN = "warn"
    FAIL = "fail"
    NA = "n/a"  # not applicable; ``message`` says why


STATUS_RANK = {Status.FAIL: 0, Status.WARN: 1, Status.PASS: 2, Status.NA: 3}


@dataclass(frozen=True)
class CheckResult:
    check: str  # stable id, e.g. "meter.p_sum"
    subject: str  # meter, bus, branch or switch id
    status: Status
    value: float = math.nan  # the measured figure (e.g. a residual in W)
    limit: float = math.nan  # the allowed figure (expanded uncertainty), same unit
    unit: str = ""
    message: str = ""  # one plain sentence: what is wrong, likely cause, what to look at
    cause: str = ""  # machine-readable cause tag, e.g. "ct_reversed:B", "vt_ratio:1.10"

    @property
    def residual(self) -> float:
        """Normalized residual |value| / limit; 1.0 is the edge of the allowed band."""
        if not self.limit or math.isnan(self.limit) or math.isnan(self.value):
            return math.nan
        return abs(self.value) / self.limit


def overall(results: list[CheckResult]) -> Status:
    """The worst status among results (n/a ignored); PASS when there is nothing to judge."""
    worst = Status.PASS
    for r in results:
        if r.status is not Status.NA and STATUS_RANK[r.status] < STATUS_RANK[worst]:
            worst = r.status
    return worst
