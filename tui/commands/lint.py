"""``benchwalk lint PROFILE``: list every problem in a profile, or summarize it when clean.

Runs the same validation as every other command (``meas.profile``), but prints all findings
itself, one per line, so a profile can be fixed in one pass before a session starts.
"""

from __future__ import annotations

import argparse
import re
from pathlib import Path

from meas.errors import Problem
from meas.model import Profile
from meas.profile import check_profile, locate_keys
from meas.walk.sequence import sequence_problems
from meas.walk.solvable import load_flow_problems

from .output import add_json, emit_json

HELP = "check a bench profile and its sequence file; list every problem"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("profile", metavar="PROFILE", help="bench profile (.toml)")
    add_json(parser, "the problems (or the counts)")


def main(args: argparse.Namespace) -> int:
    profile, problems = check_profile(args.profile)
    if profile is not None:
        # the walk as a whole, as run, demo and resume check it before they start
        # and the network model's load flow, as sim and demo solve it at every step
        found = sequence_problems(profile) or load_flow_problems(profile)
        problems = [p if p.path == "model" else _located(profile, p) for p in found]
        if problems:
            profile = None
    if getattr(args, "json", False):
        emit_json(
            {
                "profile": str(args.profile),
                "ok": profile is not None,
                "problems": [str(p) for p in problems],
                "counts": None
                if profile is None
                else {
                    "meters": len(profile.meters),
                    "maps": len(profile.maps),
                    "buses": len(profile.buses),
                    "branches": len(profile.branches),
                    "switches": len(profile.switches),
                    "steps": len(profile.steps),
                },
            }
        )
        return 0 if profile is not None else 2
    if profile is None:
        for p in problems:
            print(p)
        print(f"{_plural(len(problems), 'problem')} in {args.profile}")
        return 2
    counts = [
        (len(profile.meters), "meter"),
        (len(profile.maps), "map"),
        (len(profile.buses), "bus"),
        (len(profile.branches), "branch"),
        (len(profile.switches), "switch"),
        (len(profile.steps), "step"),
    ]
    print(f"{profile.bench.name}: ok - " + ", ".join(_plural(n, word) for n, word in counts))
    return 0


def _plural(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}{'es' if word[-1] in 'sh' else 's'}"


_STEP = re.compile(r"step\[(\d+)\] [^:]*(?:: (.*))?")


def _located(profile: Profile, problem: Problem) -> Problem:
    """A sequence problem with the file and line of its step (and key) in the profile's files."""
    folder = Path(profile.path).parent
    m = _STEP.fullmatch(problem.path)
    for i, src in enumerate(profile.sources):
        lines = locate_keys(src.text)
        file = str(profile.path) if i == 0 else str(folder / src.name)
        if m is None:  # about the sequence as a whole: where its steps are (or would be)
            if i == len(profile.sources) - 1:
                return Problem(file, lines.get(("sequence",)) or 1, problem.path, problem.message)
            continue
        n = int(m.group(1))
        if ("step", n) not in lines:
            continue
        key: tuple[str | int, ...] = ("step", n, *(m.group(2) or "").split(".")[:2])
        while key not in lines and len(key) > 2:
            key = key[:-1]
        return Problem(file, lines[key], problem.path, problem.message)
    return problem
