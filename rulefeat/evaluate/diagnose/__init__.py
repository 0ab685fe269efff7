"""Which rules carry the value? Per-rule validity diagnostics and SHAP attribution on the evaluation's folds."""

from .engine import diagnose
from .report import RuleDiagnostics

__all__ = ["diagnose", "RuleDiagnostics"]
