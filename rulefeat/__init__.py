"""rulefeat: expert rules as scikit-learn features over tutoring logs, with student-grouped evaluation."""

from ._version import __version__
from .errors import (
    DetectorFileError,
    EvaluationError,
    LateEventError,
    LiveError,
    LogRepairWarning,
    LogSchemaError,
    MissingExtraError,
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
from .log import EventLog, LogIssue, read_events, read_xapi
from .mined.transformer import LogFeatures
from .rules import Rule, RuleSet
from .rules.transformer import RuleFeatures
from .ship import LiveScorer, SavedDetector, bind, load_detector, read_manifest, save_detector

__all__ = [
    "__version__",
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
    "IncrementalValueReport",
    "RuleDiagnostics",
    "bind",
    "save_detector",
    "load_detector",
    "read_manifest",
    "SavedDetector",
    "LiveScorer",
    "RulefeatError",
    "LogSchemaError",
    "UnitError",
    "RuleSyntaxError",
    "RuleCheckError",
    "EvaluationError",
    "ParameterError",
    "SimulationError",
    "DetectorFileError",
    "MissingExtraError",
    "LiveError",
    "LateEventError",
    "RulefeatWarning",
    "LogRepairWarning",
    "GuardWarning",
]

