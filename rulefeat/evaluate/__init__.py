"""Student-grouped evaluation of the rules' added value: splits, variants, statistics and reports.

>>> from rulefeat.evaluate import thread_budget
>>> thread_budget(None, cores=2)
(1, 2)
"""

from ..report.value import IncrementalValueReport
from .diagnose import RuleDiagnostics, diagnose
from .guards import GuardWarning
from .metrics import METRICS
from .models import default_model, thread_budget
from .splits import GROUP_AWARE
from .value import incremental_value, incremental_value_precomputed, make_detector

__all__ = ["diagnose", "RuleDiagnostics", "incremental_value", "incremental_value_precomputed", "make_detector", "default_model",
           "thread_budget", "GuardWarning", "METRICS", "GROUP_AWARE", "IncrementalValueReport"]

