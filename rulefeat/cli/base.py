"""What every subcommand shares: the command record, exit codes, usage errors, progress and JSON output."""

from __future__ import annotations

import json
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass

__all__ = ["Command", "UsageError", "Progress", "EXIT_OK", "EXIT_PROBLEMS", "EXIT_USAGE", "EXIT_CODES",
           "print_json"]

EXIT_OK = 0
EXIT_PROBLEMS = 1
EXIT_USAGE = 2

EXIT_CODES = """\
exit codes:
  0  done, no problem found
  1  the inputs were read but have problems (a rule that does not check, a log or units table the library
     refuses, an evaluation that cannot run on these data); the message says what and where
  2  usage: unknown or bad options, files that cannot be read, --columns that is not a JSON object"""


class UsageError(Exception):
    """The command cannot run as written (bad option, unreadable file); reported in one line, exit code 2."""


@dataclass(frozen=True)
class Command:
    """One subcommand: its one-line help, its ``--help`` examples, how to declare its options and how to run.

    ``run(args)`` returns the exit code.  Adding a subcommand is one more entry of ``rulefeat.cli.COMMANDS``.
    """

    help: str
    examples: str
    add_arguments: Callable
    run: Callable
    description: str = ""


class Progress:
    """Stage messages on stderr, shown only when stderr is a terminal or ``--progress`` was given."""

    def __init__(self, command: str, enabled: bool | None = None):
        self.command = command
        self.enabled = sys.stderr.isatty() if enabled is None else enabled
        self._start = time.perf_counter()

    @classmethod
    def for_args(cls, command: str, args) -> Progress:
        return cls(command, True if getattr(args, "progress", False) else None)

    def say(self, message: str) -> None:
        if self.enabled:
            elapsed = time.perf_counter() - self._start
            print(f"rulefeat {self.command} [{elapsed:6.1f} s] {message}", file=sys.stderr, flush=True)


def print_json(value) -> None:
    """Machine-readable output on stdout: one JSON document, sorted keys, no NaN (null instead)."""
    print(json.dumps(_plain(value), indent=2, sort_keys=True, allow_nan=False, ensure_ascii=False))


def _plain(value):
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):  # numpy scalars
        value = value.item()
    if isinstance(value, float) and value != value:
        return None
    return value
