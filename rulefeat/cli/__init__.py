"""The ``rulefeat`` command: the library's main jobs from a shell or a scheduled job.

=============  ==================================================================================
command        what it does
=============  ==================================================================================
``evaluate``   do the rules add value over mined features? (student-grouped CV, reports)
``check``      every problem of a rules file against an event log's schema; no evaluation
``features``   the rule and/or mined feature table of a units file, as Parquet or CSV
``simulate``   demo events, windows, outcomes and rules as files
``report``     re-render a saved evaluation (report.json) as HTML or Markdown
``score``      score the units of a new log with a saved detector (rulefeat.save_detector)
=============  ==================================================================================

Each subcommand is one entry of :data:`COMMANDS` (a :class:`~rulefeat.cli.base.Command`: help, examples,
options, run); adding one touches that table only.  Exit codes: 0 ok, 1 problems found in the inputs
(library errors), 2 usage (bad options, unreadable files, bad ``--columns``).  Library errors and usage
errors print one message on stderr, never a traceback.
"""

from __future__ import annotations

import argparse
import os
import sys
import textwrap
import warnings

from . import check, evaluate, features, report, score, simulate
from .base import EXIT_CODES, EXIT_PROBLEMS, EXIT_USAGE, UsageError

__all__ = ["main", "build_parser", "COMMANDS"]

COMMANDS = {
    "evaluate": evaluate.COMMAND,
    "check": check.COMMAND,
    "features": features.COMMAND,
    "simulate": simulate.COMMAND,
    "report": report.COMMAND,
    "score": score.COMMAND,
}


def build_parser() -> argparse.ArgumentParser:
    from .. import __version__

    parser = argparse.ArgumentParser(
        prog="rulefeat", formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Expert rules as features over tutoring logs, with student-grouped evaluation of their "
                    "added value.",
        epilog="examples:\n  rulefeat simulate --out demo\n  rulefeat check demo/rules.toml --events "
               "demo/events.csv\n  rulefeat evaluate --events demo/events.csv --units demo/windows.csv --rules "
               "demo/rules.toml\n  rulefeat <command> --help\n\n" + EXIT_CODES)
    parser.add_argument("--version", action="version", version=f"rulefeat {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for name, command in COMMANDS.items():
        description = textwrap.fill(command.description or command.help, 110)
        p = sub.add_parser(name, help=command.help, description=description,
                           epilog=command.examples + "\n\n" + EXIT_CODES,
                           formatter_class=argparse.RawDescriptionHelpFormatter)
        command.add_arguments(p)
        p.set_defaults(run=command.run)
    return parser


def main(argv=None) -> int:
    """Run ``rulefeat`` with ``argv`` (default ``sys.argv[1:]``); returns the exit code."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse has printed the usage line and the problem (or the help)
        return exc.code if isinstance(exc.code, int) else EXIT_USAGE
    return run(args)


def run(args) -> int:
    """Run parsed arguments, turning usage and library errors into a message and an exit code."""
    from ..errors import ParameterError, RulefeatError

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("default")
        try:
            code = args.run(args)
        except UsageError as exc:
            code = _fail(args.command, str(exc), EXIT_USAGE)
        except ParameterError as exc:  # an option value outside what the library accepts
            code = _fail(args.command, str(exc), EXIT_USAGE)
        except RulefeatError as exc:
            code = _fail(args.command, str(exc), EXIT_PROBLEMS)
        except KeyboardInterrupt:
            code = _fail(args.command, "interrupted", 130)
        except BrokenPipeError:  # the reader of stdout (e.g. head) has gone; say nothing more to it
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
            code = EXIT_PROBLEMS
    _show_warnings(args.command, caught)
    return code


def _fail(command: str, message: str, code: int) -> int:
    print(f"rulefeat {command}: error: {message}", file=sys.stderr)
    return code


def _show_warnings(command: str, caught) -> None:
    from ..errors import RulefeatWarning

    for w in caught:
        if issubclass(w.category, (RulefeatWarning, UserWarning)):
            print(f"rulefeat {command}: warning: {w.message}", file=sys.stderr)
