"""Errors a user can cause. Each one becomes a single clear line, never a traceback."""

from __future__ import annotations

from dataclasses import dataclass


class BenchwalkError(Exception):
    """A problem the user can fix; ``str()`` is the whole message. Exit code 2 by default."""

    exit_code = 2


@dataclass(frozen=True)
class Problem:
    """One finding in a profile: ``file:line: key.path: what is wrong``."""

    file: str
    line: int | None
    path: str
    message: str

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}" if self.line else self.file
        return f"{where}: {self.path}: {self.message}" if self.path else f"{where}: {self.message}"


class ProfileError(BenchwalkError):
    """The profile has one or more problems; all of them are listed."""

    def __init__(self, problems: list[Problem]):
        self.problems = list(problems)
        super().__init__("\n".join(str(p) for p in self.problems))
