"""The ``benchwalk`` command: parses arguments and hands over to one module per subcommand.

Each module in ``tui.commands`` exposes ``HELP`` (one line), ``add_arguments(parser)`` and
``main(args) -> int``. Errors a user can cause arrive here as ``BenchwalkError`` and leave as
one line on stderr with exit code 2 (or the error's own code), never a traceback.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from types import ModuleType

from meas.errors import BenchwalkError

# subcommand -> module in tui.commands (imported lazily so `benchwalk lint` stays quick)
COMMANDS: dict[str, str] = {
    "lint": "lint",
    "plan": "plan",
    "poll": "poll",
    "sim": "sim",
    "demo": "demo",
    "run": "run",
    "resume": "resume",
    "export": "export",
    "check": "check",
    "report": "report",
    "fault": "fault",
    "calibrate": "calibrate",
    "campaign": "campaign",
}


def _load(name: str) -> ModuleType:
    return importlib.import_module(f"tui.commands.{COMMANDS[name]}")


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The parser; with ``only`` set, just that subcommand's module is imported (fast start)."""
    parser = argparse.ArgumentParser(
        prog="benchwalk",
        description="Walk a metered bench through its switching sequence and record checked readings.",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        if only is not None and name != only:
            continue
        try:
            mod = _load(name)
        except ModuleNotFoundError as exc:
            if exc.name and exc.name.startswith("tui.commands"):
                continue  # subcommand not built into this version
            raise
        p = sub.add_parser(name, help=mod.HELP, description=mod.HELP)
        mod.add_arguments(p)
        p.set_defaults(_module=mod)
    return parser


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    first = next((a for a in argv if not a.startswith("-")), None)
    parser = build_parser(first if first in COMMANDS else None)
    args = parser.parse_args(argv)
    if not getattr(args, "_module", None):
        parser.print_help()
        return 2
    try:
        return int(args._module.main(args) or 0)
    except BenchwalkError as exc:
        print(f"benchwalk {args.command}: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print(f"benchwalk {args.command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
