"""The ``firewatch`` command line: one parser, subcommands imported only when run.

Every subcommand module has ``add_parser(subparsers)`` and ``run(args)``;
heavy imports (textual, scipy, the recorder) happen inside ``run`` so that
``firewatch --help`` answers at once.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence
from typing import Any

from firewatch import __version__
from firewatch.commands import _logging
from firewatch.commands._args import UsageError

__all__ = ["main", "UsageError", "Parser"]

#: subcommand name -> module under firewatch.commands
COMMANDS: dict[str, str] = {
    "calc": "calc",
    "sim": "sim",
    "record": "record",
    "check": "check",
    "inspect": "inspect",
    "export": "export",
    "replay": "replay",
    "watch": "watch",
    "demo": "demo",
    "tune": "tune",
    "plant": "plant",
    "report": "report",
    "probe": "probe",
    "upgrade-log": "upgrade_log",
}

CAUTION = (
    "firewatch is a monitoring aid, never a safety device: the kiln's own controller "
    "and an independent over-temperature cut-out stay in charge."
)


class Parser(argparse.ArgumentParser):
    """An argument parser whose errors are one line and exit status 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        sys.stderr.write(f"{self.prog}: {message} (see --help)\n")
        raise SystemExit(2)


def build_parser() -> Parser:
    parser = Parser(
        prog="firewatch",
        description="Watch a kiln or furnace firing: thermocouples and pyrometers reconciled, "
        "schedules followed, alarms with their likely cause, every reading recorded.",
        epilog=CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"firewatch {__version__}")
    _add_common(parser, top=True)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=Parser)
    for module in COMMANDS.values():
        importlib.import_module(f"firewatch.commands.{module}").add_parser(sub)
    _add_common_below(parser)
    return parser


def _add_common_below(parser: argparse.ArgumentParser) -> None:
    """The same options after every subcommand, nested ones too (``calc tc``)."""
    for action in parser._actions:  # argparse lists subcommands only there
        if isinstance(action, argparse._SubParsersAction):
            for command in action.choices.values():
                _add_common(command)
                _add_common_below(command)


def _add_common(parser: argparse.ArgumentParser, top: bool = False) -> None:
    """-v, -q and --debug, accepted before or after the subcommand.

    After it their default is SUPPRESS, so that a value given before the subcommand stands.
    """
    count: Any = 0 if top else argparse.SUPPRESS
    flag: Any = False if top else argparse.SUPPRESS
    parser.add_argument("-v", "--verbose", action="count", default=count, help="say more (-v: debug lines too)")
    parser.add_argument("-q", "--quiet", action="count", default=count,
                        help="say less (-q: warnings and errors only, -qq: errors only)")
    parser.add_argument("--debug", action="store_true", default=flag,
                        help="on an error, show the traceback instead of one line")


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 2
    _logging.configure(args.verbose - args.quiet)
    module = importlib.import_module(f"firewatch.commands.{COMMANDS[args.command]}")
    try:
        return int(module.run(args) or 0)
    except UsageError as exc:
        if args.debug:
            raise
        sys.stderr.write(f"firewatch {args.command}: {exc}\n")
        return 2
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:
        if args.debug:
            raise
        message = _file_problem(exc, args)
        if message is None:  # not the user's input: one line still, the traceback on request
            sys.stderr.write(f"firewatch {args.command}: internal error: {type(exc).__name__}: {exc} "
                             "(run again with --debug for the traceback)\n")
            return 1
        sys.stderr.write(f"firewatch {args.command}: {message}\n")
        return 2


def _file_problem(exc: Exception, args: argparse.Namespace) -> str | None:
    """One line for a firing log that cannot be used (damaged, foreign, unreadable); None for anything else."""
    import sqlite3

    from firewatch.store._common import LogDamaged, LogError, log_error

    if isinstance(exc, sqlite3.DatabaseError):  # met outside the reader, which names the file itself
        log = getattr(args, "log", None) or getattr(args, "to_log", None)
        if log is None:
            return None
        exc = log_error(log, exc)
    if not isinstance(exc, LogError):
        return None
    if isinstance(exc, LogDamaged) and args.command != "inspect":
        return f"{exc}; 'firewatch inspect' shows what SQLite finds"
    return str(exc)
