"""Start-up time of the command line: ``benchwalk --help`` against a bare interpreter start.

The top-level help imports no command module (pandas, pyarrow, pymodbus, textual stay
unloaded); target < 0.3 s wall time. Side by side in one run, rotating who goes first:
``python -m tui.cli --help``, ``python -c pass`` (the floor any command pays) and, for
information, ``python -m tui.cli lint --help`` (one command module imported).

    /work/venv/bin/python benchmarks/bench_cli_start.py [--rounds 15]
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from common import Figure, Target, interleaved, median, ratio  # noqa: E402

ROOT = HERE.parent
HELP_TARGET = Target("ours", "<", 0.3)


def _runner(*args: str):
    env = {**os.environ, "PYTHONPATH": str(ROOT)}

    def run() -> None:
        subprocess.run(
            [sys.executable, *args], cwd=ROOT, env=env, check=True, stdout=subprocess.DEVNULL
        )

    return run


def figures(rounds: int = 15) -> list[Figure]:
    times = interleaved(
        {
            "help": _runner("-m", "tui.cli", "--help"),
            "bare": _runner("-c", "pass"),
            "lint_help": _runner("-m", "tui.cli", "lint", "--help"),
        },
        rounds,
    )
    ours, bare = median(times["help"]), median(times["bare"])
    return [
        Figure(
            "command line",
            "benchwalk --help vs bare interpreter start",
            ours,
            "s",
            reference=bare,
            ratio=ratio(ours, bare),
            targets=(HELP_TARGET,),
        ),
        Figure(
            "command line",
            "benchwalk lint --help (one command imported) vs bare interpreter",
            median(times["lint_help"]),
            "s",
            reference=bare,
            ratio=ratio(median(times["lint_help"]), bare),
        ),
    ]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=15)
    args = ap.parse_args()
    for f in figures(args.rounds):
        ref = f"{f.reference:.3f} s" if f.reference is not None else "-"
        rat = f"{f.ratio:.2f}x" if f.ratio is not None else "-"
        print(f"{f.figure}: {f.ours:.3f} s (reference {ref}, ratio {rat}) {f.verdict}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
