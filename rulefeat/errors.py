"""The library's one error hierarchy and its warning class (contract 7).

Every error raised on bad input derives from :class:`RulefeatError`, so callers
can catch the library's errors without catching programming mistakes.  The
concrete classes also derive from :class:`ValueError`, which is what
scikit-learn's own checks and most users expect for bad input.
"""

from __future__ import annotations

__all__ = [
    "RulefeatError",
    "LogSchemaError",
    "UnitError",
    "RuleSyntaxError",
    "RuleCheckError",
    "EvaluationError",
    "SimulationError",
    "ParameterError",
    "DetectorFileError",
    "MissingExtraError",
    "LiveError",
    "LateEventError",
    "RulefeatWarning",
    "LogRepairWarning",
]


class RulefeatError(Exception):
    """Base class of every error raised by rulefeat on bad input or configuration."""


class LogSchemaError(RulefeatError, ValueError):
    """The event table cannot be turned into an :class:`~rulefeat.EventLog`."""


class UnitError(RulefeatError, ValueError):
    """A units table (X) does not describe units of the event log."""


class RuleSyntaxError(RulefeatError, ValueError):
    """A rule's text does not follow the grammar of the rule language."""


class RuleCheckError(RulefeatError, ValueError):
    """A rule parses but does not make sense against the log's schema or the other rules."""


class EvaluationError(RulefeatError, ValueError):
    """An evaluation cannot be run as asked (bad splitter, too few students, ...)."""


class ParameterError(RulefeatError, ValueError):
    """An estimator or function parameter has a value outside what it accepts."""


class SimulationError(RulefeatError, ValueError):
    """A knob of the log simulator (:mod:`rulefeat.simulate`) is out of range or unknown."""


class RulefeatWarning(UserWarning):
    """Base class of rulefeat's warnings."""


class LogRepairWarning(RulefeatWarning):
    """The event log repaired or flagged rows of its input; see ``EventLog.issues``."""


class DetectorFileError(RulefeatError, ValueError):
    """A saved detector file cannot be read: not a detector file, a newer format, or its content hash differs."""


class MissingExtraError(RulefeatError, ImportError):
    """An optional part of rulefeat needs packages that are not installed; the message names the extra."""


class LiveError(RulefeatError, ValueError):
    """Live scoring cannot take an event or a rule: a rule it cannot bound, a scope reopened, a closed stream."""


class LateEventError(LiveError):
    """An event arrived later than the live scorer's tolerance allows; the message names the event."""
