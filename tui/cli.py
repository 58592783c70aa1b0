"""The ``benchwalk`` command: parses arguments and hands over to one module per subcommand.

Each module in ``tui.commands`` exposes ``HELP`` (one line), ``add_arguments(parser)`` and
``main(args) -> int``. Errors a user can cause arrive here as ``BenchwalkError`` and leave as
one line on stderr with exit code 2 (or the error's own code), never a traceback.

The top-level ``--help`` and ``--version`` import no command module (pandas, pyarrow and
pymodbus stay unloaded): each command's one-line ``HELP`` is read from its source text.
"""

from __future__ import annotations

import argparse
import ast
import contextlib
import importlib
import importlib.util
import io
import os
import sys
from pathlib import Path
from types import ModuleType

# One BLAS thread unless the user says otherwise, set before any command imports numpy: the
# estimator's and the load flow's matrices are a few hundred wide, where a second BLAS thread
# only spins (a faulted 15-step dataset's re-check: 10.1 s CPU with one, 17.9 s with two, the
# same wall time) and takes a core from the poller on a loaded machine.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

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
    "collect": "collect",
    "sessions": "sessions",
    "completion": "completion",
    "scan": "scan",
    "summary": "summary",
}


def _load(name: str) -> ModuleType:
    return importlib.import_module(f"tui.commands.{COMMANDS[name]}")


def _source_help(name: str) -> str | None:
    """A command's ``HELP`` read from its source without importing it; None when not built in."""
    spec = importlib.util.find_spec(f"tui.commands.{COMMANDS[name]}")
    if spec is None or spec.origin is None:
        return None
    tree = ast.parse(Path(spec.origin).read_text(encoding="utf-8"))
    for node in tree.body:
        if (
            isinstance(node, ast.Assign)
            and any(isinstance(t, ast.Name) and t.id == "HELP" for t in node.targets)
            and isinstance(node.value, ast.Constant)
            and isinstance(node.value.value, str)
        ):
            return node.value.value
    return ""


def version() -> str:
    """The installed distribution's version, or the source tree's when not installed."""
    from importlib.metadata import PackageNotFoundError
    from importlib.metadata import version as dist_version

    try:
        return dist_version("benchwalk")
    except PackageNotFoundError:
        from meas import __version__

        return __version__


class _Version(argparse.Action):
    """``--version``, looked up only when asked for (importlib.metadata is slow to import)."""

    def __init__(self, option_strings: list[str], dest: str, **kwargs: object) -> None:
        super().__init__(option_strings, dest, nargs=0, default=argparse.SUPPRESS, **kwargs)  # type: ignore[arg-type]

    def __call__(self, parser: argparse.ArgumentParser, *_: object) -> None:
        print(f"benchwalk {version()}")
        parser.exit()


def _verbosity(parser: argparse.ArgumentParser, default: object) -> None:
    parser.add_argument(
        "-q",
        "--quiet",
        action="store_true",
        default=default,
        help="print nothing on standard output but --json output; errors still on standard error",
    )
    parser.add_argument(
        "-v",
        "--verbose",
        action="count",
        default=default,
        help="log what the libraries do (-v info, -vv debug) on standard error",
    )


def _top_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="benchwalk",
        description="Walk a metered bench through its switching sequence and record checked readings.",
    )
    parser.add_argument("--version", action=_Version, help="show the version and exit")
    _verbosity(parser, None)
    return parser


def _add_command(sub: argparse._SubParsersAction, name: str, mod: ModuleType) -> None:
    p = sub.add_parser(name, help=mod.HELP, description=mod.HELP)
    mod.add_arguments(p)
    _verbosity(p, argparse.SUPPRESS)  # also accepted after the command; the top level's wins
    p.set_defaults(_module=mod)


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The parser; only the chosen subcommand's module is imported (``only``), none for help."""
    parser = _top_parser()
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        if only is None:
            text = _source_help(name)
            if text is not None:
                sub.add_parser(name, help=text, description=text)
            continue
        if name != only:
            continue
        try:
            mod = _load(name)
        except ModuleNotFoundError as exc:
            if exc.name and exc.name.startswith("tui.commands"):
                continue  # subcommand not built into this version
            raise
        _add_command(sub, name, mod)
    return parser


def build_full_parser() -> argparse.ArgumentParser:
    """Every subcommand with all its options (imports them all): for shell completion."""
    parser = _top_parser()
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        try:
            mod = _load(name)
        except ModuleNotFoundError as exc:
            if exc.name and exc.name.startswith("tui.commands"):
                continue
            raise
        _add_command(sub, name, mod)
    return parser


def _devnull() -> io.TextIOWrapper:
    return open(os.devnull, "w", encoding="utf-8")  # noqa: SIM115 - closed by redirect's owner


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    first = next((a for a in argv if not a.startswith("-")), None)
    parser = build_parser(first if first in COMMANDS else None)
    args = parser.parse_args(argv)
    if not getattr(args, "_module", None):
        parser.print_help()
        return 2
    from meas.errors import BenchwalkError

    if args.verbose:
        import logging

        logging.basicConfig(level=logging.DEBUG if args.verbose > 1 else logging.INFO)
    as_json = bool(getattr(args, "json", False))
    try:
        if as_json and hasattr(args, "headless"):
            if not args.headless:
                raise BenchwalkError("--json reports a headless run: add --headless")
            args._stdout = sys.stdout  # the verdict's line; the walk's own lines go to stderr
            with contextlib.redirect_stdout(sys.stderr if not args.quiet else _devnull()):
                return int(args._module.main(args) or 0)
        if args.quiet and not as_json:
            with contextlib.redirect_stdout(_devnull()):
                return int(args._module.main(args) or 0)
        return int(args._module.main(args) or 0)
    except BenchwalkError as exc:
        print(f"benchwalk {args.command}: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print(f"benchwalk {args.command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
