"""A progress bar on the terminal for the commands; the core only calls a ``Progress``."""

from __future__ import annotations

import sys
from collections.abc import Callable
from typing import TYPE_CHECKING, TypeVar

from meas.progress import Progress

if TYPE_CHECKING:
    from rich.progress import Progress as Bar


def terminal_progress(description: str) -> tuple[Bar, Progress] | tuple[None, None]:
    """A rich progress bar on stderr when it is a terminal, else None (quiet in pipes and tests)."""
    if not sys.stderr.isatty():
        return None, None
    from rich.console import Console  # noqa: PLC0415
    from rich.progress import BarColumn, TaskProgressColumn, TimeRemainingColumn
    from rich.progress import Progress as Bar

    bar = Bar(
        "[progress.description]{task.description}",
        BarColumn(),
        TaskProgressColumn(),  # no "0 %" while a stage that counts nothing runs
        TimeRemainingColumn(),
        console=Console(stderr=True),
        transient=True,
    )
    task = bar.add_task(description, total=None)

    def update(done: int, total: int, /, stage: str = "") -> None:
        # total 0: a stage that counts nothing; the bar pulses instead of standing at 100 %
        if stage:
            bar.update(task, description=stage)
        bar.update(task, completed=done, total=total or None)

    return bar, update


T = TypeVar("T")


def with_progress(description: str, work: Callable[[Progress | None], T]) -> T:
    """``work(update)`` under a terminal bar (``update`` None where stderr is no terminal); a
    stage that counts nothing shows the bar pulsing until it ends."""
    bar, update = terminal_progress(description)
    if bar is None:
        return work(None)
    with bar:
        return work(update)
