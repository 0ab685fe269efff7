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
    SimulationError,
    UnitError,
)
from .evaluate import (
    GuardWarning,
    IncrementalValueReport,
    RuleDiagnostics,
    diagnose,
    incremental_value,
    make_detector,
)
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
    "IncrementalValueReport",
    "RuleDiagnostics",
    "RulefeatError",
    "LogSchemaError",
    "UnitError",
    "RuleSyntaxError",
    "RuleCheckError",
    "EvaluationError",
    "ParameterError",
    "SimulationError",
    "RulefeatWarning",
    "LogRepairWarning",
    "GuardWarning",
]

