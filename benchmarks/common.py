"""Shared pieces of the benchmarks: medians, side-by-side runs, figures with targets, tables.

Every benchmark reports its results as :class:`Figure` rows (ours against a reference measured
in the same run, a ratio, targets); ``run_all.py`` gathers them into one table. Pass or miss
is computed here from the numbers and the targets, never written by hand.
"""

from __future__ import annotations

import math
import operator
import os
import statistics
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from typing import Literal

Op = Literal["<", "<=", ">", ">=", "=="]
_OPS: dict[str, Callable[[float, float], bool]] = {
    "<": operator.lt,
    "<=": operator.le,
    ">": operator.gt,
    ">=": operator.ge,
    "==": operator.eq,
}


# ---------------------------------------------------------------- statistics


def median(xs: Iterable[float]) -> float:
    """Median of the samples; NaN for none (a benchmark that produced nothing must not pass)."""
    xs = list(xs)
    return statistics.median(xs) if xs else math.nan


def percentile(xs: Iterable[float], q: float) -> float:
    """Nearest-rank percentile, ``q`` in [0, 1]; NaN for no samples."""
    xs = sorted(xs)
    if not xs:
        return math.nan
    return xs[min(len(xs) - 1, max(0, math.ceil(q * len(xs)) - 1))]


def ratio(ours: float | None, reference: float | None) -> float | None:
    """ours / reference, or None when either is missing or the reference is zero."""
    if ours is None or reference is None or not math.isfinite(ours) or not math.isfinite(reference):
        return None
    return None if reference == 0 else ours / reference


def slowdown(ours: float | None, reference: float | None, higher_is_better: bool) -> float | None:
    """How many times ours costs the reference: time ratio, or inverted for rates (> 1 = ours worse)."""
    return ratio(reference, ours) if higher_is_better else ratio(ours, reference)


# ---------------------------------------------------------------- side-by-side runs


def _orders(names: Sequence[str], rounds: int) -> Iterable[list[str]]:
    """Rotate who goes first each round, so drift in machine load hits every case alike."""
    n = len(names)
    for r in range(rounds):
        k = r % n
        yield list(names[k:]) + list(names[:k])


def interleaved(
    cases: dict[str, Callable[[], object]], rounds: int, warmup: int = 1
) -> dict[str, list[float]]:
    """Wall time (s) of each case, run round after round with the starting case rotated."""
    names = list(cases)
    for _ in range(warmup):
        for name in names:
            cases[name]()
    times: dict[str, list[float]] = {name: [] for name in names}
    for order in _orders(names, rounds):
        for name in order:
            t = time.perf_counter()
            cases[name]()
            times[name].append(time.perf_counter() - t)
    return times


# ---------------------------------------------------------------- figures


@dataclass(frozen=True)
class Target:
    """One requirement on a figure: ``on`` names the value compared, ``op`` and ``limit`` the test."""

    on: Literal["ours", "ratio"]
    op: Op
    limit: float
    text: str = ""  # how to print it, when the plain form would not say enough

    def met(self, fig: Figure) -> bool | None:
        value = fig.ours if self.on == "ours" else fig.ratio
        if value is None or not math.isfinite(value):
            return None
        return _OPS[self.op](value, self.limit)

    def describe(self, unit: str) -> str:
        if self.text:
            return self.text
        op = "=" if self.op == "==" else self.op
        if self.on == "ratio":
            return f"ratio {op} {self.limit:g}"
        return f"{op} {fmt_value(self.limit, unit)}"


@dataclass(frozen=True)
class Figure:
    """One row of the performance table; ``ours`` and ``reference`` are medians from one run."""

    area: str
    figure: str  # what was measured, and what the reference is
    ours: float | None
    unit: str = ""
    reference: float | None = None
    ratio: float | None = None  # cost of ours relative to the reference (> 1 = ours worse)
    targets: tuple[Target, ...] = ()
    note: str = ""  # why a figure is missing, or a detail worth keeping
    extra: dict[str, float] = field(default_factory=dict, compare=False)

    @property
    def passed(self) -> bool | None:
        """True if every target is met, False if one is missed, None if none apply or a value is missing."""
        if not self.targets:
            return None
        verdicts = [t.met(self) for t in self.targets]
        if any(v is False for v in verdicts):
            return False
        return None if any(v is None for v in verdicts) else True

    @property
    def target_text(self) -> str:
        return "; ".join(t.describe(self.unit) for t in self.targets) or "-"

    @property
    def verdict(self) -> str:
        p = self.passed
        if p is None:
            return "not run" if self.ours is None else "info" if not self.targets else "n/a"
        return "pass" if p else "MISS"


def missing(
    area: str, figure: str, why: str, unit: str = "", targets: tuple[Target, ...] = ()
) -> Figure:
    """A row for a benchmark that could not run here, saying why (the table never silently drops one)."""
    return Figure(area, figure, None, unit, targets=targets, note=why)


# ---------------------------------------------------------------- formatting


def fmt_number(v: float | None) -> str:
    """Three significant figures without exponents for the sizes benchmarks produce."""
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    if float(v).is_integer() and abs(v) < 1e9:
        return f"{int(v):,}"
    a = abs(v)
    if a >= 100:
        return f"{v:,.0f}"
    if a >= 10:
        return f"{v:.1f}"
    if a >= 1:
        return f"{v:.2f}"
    return f"{v:.3g}"


def fmt_value(v: float | None, unit: str) -> str:
    s = fmt_number(v)
    return s if s == "-" or not unit else f"{s} {unit}"


def fmt_ratio(r: float | None) -> str:
    return "-" if r is None or not math.isfinite(r) else f"{r:.2f}x"


COLUMNS = ("area", "figure", "ours (median)", "reference (median)", "ratio", "target", "pass/miss")


def table_rows(figures: Sequence[Figure]) -> list[tuple[str, ...]]:
    """The table as text cells, one tuple per figure, in :data:`COLUMNS` order."""
    rows = []
    for f in figures:
        fig = f.figure if not f.note else f"{f.figure} ({f.note})"
        rows.append(
            (
                f.area,
                fig,
                fmt_value(f.ours, f.unit),
                fmt_value(f.reference, f.unit),
                fmt_ratio(f.ratio),
                f.target_text,
                f.verdict,
            )
        )
    return rows


def markdown_table(figures: Sequence[Figure]) -> str:
    """GitHub-flavoured Markdown of the same table (pipes in cells escaped)."""

    def cell(s: str) -> str:
        return s.replace("|", "\\|")

    lines = [
        "| " + " | ".join(COLUMNS) + " |",
        "|" + "|".join(["---"] * 2 + ["---:"] * 3 + ["---"] * 2) + "|",
    ]
    lines += ["| " + " | ".join(cell(c) for c in row) + " |" for row in table_rows(figures)]
    return "\n".join(lines) + "\n"


def rich_table(figures: Sequence[Figure], title: str = ""):
    """The table for the terminal; misses in red."""
    from rich.table import Table

    t = Table(title=title or None, show_lines=False)
    for i, col in enumerate(COLUMNS):
        t.add_column(col, justify="right" if 2 <= i <= 4 else "left", overflow="fold")
    style = {
        "pass": "green",
        "MISS": "bold red",
        "not run": "yellow",
        "n/a": "yellow",
        "info": "dim",
    }
    for row in table_rows(figures):
        t.add_row(*row[:-1], f"[{style[row[-1]]}]{row[-1]}[/]")
    return t


def machine_line() -> str:
    """Cores and load, so a reader can tell a busy machine from a slow program."""
    try:
        load = "load average " + " ".join(f"{x:.2f}" for x in os.getloadavg())
    except OSError:
        load = "load average unknown"
    return f"{os.cpu_count()} CPUs, {load}"
