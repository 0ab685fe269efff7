"""rulefeat: expert rules as scikit-learn features over tutoring logs, with student-grouped evaluation."""

from ._version import __version__
from .errors import (
    EvaluationError,
    LogRepairWarning,
    LogSchemaError,
    ParameterError,
    RuleCheckError,
    RulefeatError,
    RulefeatWarning,
    RuleSyntaxError,
    UnitError,
)
from .evaluate import diagnose, incremental_value, make_detector
from .log import EventLog, LogIssue, read_events
from .mined.transformer import LogFeatures
from .rules import Rule, RuleSet
from .rules.transformer import RuleFeatures

__all__ = [
    "__version__",
    "EventLog",
    "LogIssue",
    "read_events",
    "Rule",
    "RuleSet",
    "RuleFeatures",
    "LogFeatures",
    "incremental_value",
    "make_detector",
    "diagnose",
    "RulefeatError",
    "LogSchemaError",
    "UnitError",
    "RuleSyntaxError",
    "RuleCheckError",
    "EvaluationError",
    "ParameterError",
    "RulefeatWarning",
    "LogRepairWarning",
]
