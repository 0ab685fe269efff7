"""rulefeat: expert rules as scikit-learn features over tutoring logs, with student-grouped evaluation."""

from .errors import (
    EvaluationError,
    LogRepairWarning,
    LogSchemaError,
    RuleCheckError,
    RulefeatError,
    RulefeatWarning,
    RuleSyntaxError,
    UnitError,
)
from .log import EventLog, LogIssue, read_events

__version__ = "0.1.0"

__all__ = [
    "EventLog",
    "LogIssue",
    "read_events",
    "RulefeatError",
    "LogSchemaError",
    "UnitError",
    "RuleSyntaxError",
    "RuleCheckError",
    "EvaluationError",
    "RulefeatWarning",
    "LogRepairWarning",
]
