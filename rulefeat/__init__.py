"""rulefeat: expert rules as scikit-learn features over tutoring logs, with student-grouped evaluation."""

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
from .log_features import LogFeatures
from .rule_features import RuleFeatures
from .rules import Rule, RuleSet
from .xapi import read_xapi

__version__ = "0.1.0"

__all__ = [
    "EventLog",
    "LogIssue",
    "read_events",
    "read_xapi",
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
