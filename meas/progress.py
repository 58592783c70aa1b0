"""How long work reports how far it got, without drawing anything (the command line draws)."""

from __future__ import annotations

from typing import Protocol


class Progress(Protocol):
    """Called with (done, total) as work advances, in whatever units the work counts."""

    def __call__(self, done: int, total: int, /) -> None: ...
