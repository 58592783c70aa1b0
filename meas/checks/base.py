"""Small helpers every check module shares: status codes and result construction."""

from __future__ import annotations

import math
from typing import TypedDict

from ..results import CheckResult, Status

# status codes as returned by tolerance.judge_many (the STATUS_RANK order)
FAIL, WARN, PASS, NA = 0, 1, 2, 3
_STATUS = (Status.FAIL, Status.WARN, Status.PASS, Status.NA)

_new = object.__new__
_set = object.__setattr__

Buckets = tuple[list[CheckResult], list[CheckResult], list[CheckResult], list[CheckResult]]


def buckets() -> Buckets:
    """Result lists by status code (FAIL, WARN, PASS, NA): checks append to ``bk[code]``, so the
    engine's output is failures first in emission order without a sorting pass at the end."""
    return ([], [], [], [])


class Template(TypedDict):
    """Every field of a CheckResult, as its ``__dict__`` holds them (see ``template``)."""

    check: str
    subject: str
    status: Status
    value: float
    limit: float
    unit: str
    message: str
    cause: str


def result(
    check: str,
    subject: str,
    code: int,
    value: float = math.nan,
    limit: float = math.nan,
    unit: str = "",
    message: str = "",
    cause: str = "",
) -> CheckResult:
    """A CheckResult with plain floats (numpy scalars would not survive export unchanged).

    Filled directly rather than through the frozen dataclass's __init__: a run makes hundreds
    of results and the per-field frozen setattr dominated the run time. The fields are the
    same; the object is as immutable as one made the usual way.
    """
    r = _new(CheckResult)
    r.__dict__.update(
        check=check,
        subject=subject,
        status=_STATUS[code],
        value=float(value),
        limit=float(limit),
        unit=unit,
        message=message,
        cause=cause,
    )
    return r


def template(
    check: str, subject: str, code: int = PASS, unit: str = "", message: str = "", cause: str = ""
) -> Template:
    """The fixed fields of a result that recurs every run with new numbers (see ``make``)."""
    return {
        "check": check,
        "subject": subject,
        "status": _STATUS[code],
        "value": math.nan,
        "limit": math.nan,
        "unit": unit,
        "message": message,
        "cause": cause,
    }


def make(tp: Template, value: float, limit: float) -> CheckResult:
    """A result from a ``template`` and its two numbers (plain Python floats, e.g. from tolist)."""
    r = _new(CheckResult)
    d = r.__dict__
    d.update(tp)
    d["value"] = value
    d["limit"] = limit
    return r


_NA_CACHE: dict[tuple[str, str, str, str], CheckResult] = {}


def na(check: str, subject: str, reason: str, unit: str = "") -> CheckResult:
    """A not-applicable result; identical ones are shared (they are immutable and recur every run)."""
    key = (check, subject, reason, unit)
    hit = _NA_CACHE.get(key)
    if hit is None:
        hit = result(check, subject, NA, math.nan, math.nan, unit, reason, "")
        if len(_NA_CACHE) < 100_000:
            _NA_CACHE[key] = hit
    return hit


def judge1(value: float, limit: float, warn_fraction: float) -> int:
    if math.isnan(value) or math.isnan(limit):
        return NA
    r = abs(value)
    return FAIL if r > limit else WARN if r > warn_fraction * limit else PASS


def fmt(x: float | None, unit: str) -> str:
    """Readable number with unit: 3 significant figures, no exponent for everyday sizes."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "n/a"
    ax = abs(x)
    s = f"{x:.0f}" if ax >= 100 else f"{x:.3g}" if ax >= 0.01 or ax == 0 else f"{x:.2e}"
    return f"{s} {unit}".strip()
