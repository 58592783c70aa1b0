"""How long work reports how far it got, without drawing anything (the command line draws)."""

from __future__ import annotations

from typing import Protocol


class Progress(Protocol):
    """Called with (done, total) as work advances, in whatever units the work counts.

    ``stage``, when given, says what the work does from this call on (a phase that counts
    nothing, such as one long estimate, comes with total 0): a long silence is then explained.
    """

    def __call__(self, done: int, total: int, /, stage: str = "") -> None: ...
