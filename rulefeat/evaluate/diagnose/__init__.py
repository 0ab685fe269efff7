"""Which rules carry the value? Per-rule validity diagnostics and SHAP attribution on the evaluation's folds."""

from ...report.diagnostics import RuleDiagnostics
from .engine import diagnose

__all__ = ["diagnose", "RuleDiagnostics"]
