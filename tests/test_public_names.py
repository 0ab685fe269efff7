"""The top-level namespace lists every public error, warning and report class."""

from __future__ import annotations

import inspect

import rulefeat
import rulefeat.errors
from rulefeat.evaluate import IncrementalValueReport, RuleDiagnostics


def _subclasses(cls: type) -> set[type]:
    found = set()
    for sub in cls.__subclasses__():
        found |= {sub} | _subclasses(sub)
    return found


def test_every_class_of_the_errors_module_is_exported():
    classes = [obj for name, obj in vars(rulefeat.errors).items()
               if inspect.isclass(obj) and issubclass(obj, BaseException) and obj.__module__ == "rulefeat.errors"]
    assert {c.__name__ for c in classes} >= {"RulefeatError", "SimulationError", "RulefeatWarning"}
    for cls in classes:
        assert cls.__name__ in rulefeat.__all__, f"rulefeat.__all__ misses {cls.__name__}"
        assert cls.__name__ in rulefeat.errors.__all__
        assert getattr(rulefeat, cls.__name__) is cls


def test_every_public_error_and_warning_anywhere_in_the_package_is_exported():
    # Subclasses defined outside errors.py (a warning of the evaluation guards, say) are public too.
    for cls in _subclasses(rulefeat.RulefeatError) | _subclasses(rulefeat.RulefeatWarning):
        if cls.__module__.startswith("rulefeat") and not cls.__name__.startswith("_"):
            assert cls.__name__ in rulefeat.__all__, f"rulefeat.__all__ misses {cls.__module__}.{cls.__name__}"
            assert getattr(rulefeat, cls.__name__) is cls


def test_report_classes_are_exported():
    for cls in (IncrementalValueReport, RuleDiagnostics):
        assert cls.__name__ in rulefeat.__all__
        assert getattr(rulefeat, cls.__name__) is cls


def test_all_names_resolve_once_each():
    missing = [name for name in rulefeat.__all__ if not hasattr(rulefeat, name)]
    assert not missing, f"rulefeat.__all__ names what rulefeat does not define: {missing}"
    assert len(set(rulefeat.__all__)) == len(rulefeat.__all__)
