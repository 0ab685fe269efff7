"""Binding fitted transformers and detectors to an event log: the log is a run-time input.

A fitted :class:`~rulefeat.RuleFeatures` or :class:`~rulefeat.LogFeatures` holds
fitted state only (contract 8, DEVELOPERS.md); it reads events from the log it is
bound to.  :func:`bind` returns a copy of any estimator holding such
transformers — a single transformer, the pipeline of
:func:`~rulefeat.make_detector`, a ``GridSearchCV`` — with every one of them
bound to another log.  Units of that log get exactly the features they would
get if their students' events had been appended to the training log.
"""

from __future__ import annotations

import copy

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from .._base import UnitTransformer, raise_schema_differences
from ..errors import ParameterError
from ..log.eventlog import EventLog

__all__ = ["bind", "unit_transformers", "log_params"]

_POLICIES = ("error", "empty")


def unit_transformers(estimator) -> list[UnitTransformer]:
    """Every rulefeat transformer inside ``estimator`` (itself included), each once, in a fixed order.

    Looks through estimator attributes, lists, tuples and dicts, so it finds the fitted steps of a
    ``Pipeline``, ``FeatureUnion``, ``ColumnTransformer`` (``transformers_``) or a search's
    ``best_estimator_``.
    """
    found, seen, stack = [], set(), [estimator]
    while stack:
        obj = stack.pop()
        if id(obj) in seen or isinstance(obj, (EventLog, np.ndarray, pd.DataFrame, pd.Series, str, bytes)):
            continue
        seen.add(id(obj))
        if isinstance(obj, UnitTransformer):
            found.append(obj)
        if isinstance(obj, BaseEstimator):
            stack.extend(reversed(list(vars(obj).values())))
        elif isinstance(obj, dict):
            stack.extend(reversed(list(obj.values())))
        elif isinstance(obj, (list, tuple)):
            stack.extend(reversed(obj))
    return found


def log_params(estimator) -> dict:
    """``{parameter: EventLog}`` of every log parameter of an (unfitted) estimator, for ``set_params``.

    The library sends estimators to its own parallel workers; a fitted transformer would arrive
    without its log, so the logs travel beside the estimator and are set again on each clone there.
    """
    if not hasattr(estimator, "get_params"):
        return {}
    return {name: value for name, value in estimator.get_params(deep=True).items()
            if isinstance(value, EventLog) and (name == "log" or name.endswith("__log"))}


def bind(detector, log: EventLog, *, empty_units: str = "error"):
    """A copy of a fitted detector (or transformer) whose rulefeat transformers read ``log``.

    Parameters
    ----------
    detector : estimator
        A fitted :class:`~rulefeat.RuleFeatures` / :class:`~rulefeat.LogFeatures`, the pipeline of
        :func:`~rulefeat.make_detector`, or any scikit-learn estimator holding them (loaded from a
        file or not).  It is left unchanged.
    log : EventLog
        The events to score, e.g. a new day's log.  It needs every field the detector read when it
        was fitted, with the same kind; otherwise :class:`~rulefeat.errors.LogSchemaError` lists
        every difference.
    empty_units : {"error", "empty"}, default "error"
        Units of ``X`` that find no events in ``log`` (a student it does not hold, a window with no
        event) raise :class:`~rulefeat.errors.UnitError` naming them; ``"empty"`` scores them as
        empty units (count-like features 0, others missing) with a warning listing them.

    Returns
    -------
    estimator
        The bound copy.  Its fitted state is the detector's, so a unit gets the same features and
        probability in ``log`` as in any other log holding its student's events.

    Examples
    --------
    >>> import pandas as pd
    >>> from rulefeat import EventLog, Rule, RuleFeatures, bind
    >>> def day(student, times):
    ...     return EventLog(pd.DataFrame({"student": student, "time": times, "action": "hint"}))
    >>> quick = Rule("quick_hint", when="action == 'hint' and gap < 3s", report=["count"])
    >>> fitted = RuleFeatures(rules=[quick], log=day("a", [0., 1., 9.]), unit="student")
    >>> fitted = fitted.fit(pd.DataFrame({"student": ["a"]}))
    >>> bind(fitted, day("new", [0., 2., 4.])).transform(pd.DataFrame({"student": ["new"]}))
       quick_hint__count
    0                2.0
    """
    if not isinstance(log, EventLog):
        raise ParameterError(f"rulefeat.bind: log must be a rulefeat.EventLog. Got {type(log).__name__} instead.")
    if empty_units not in _POLICIES:
        raise ParameterError(f"The 'empty_units' parameter of rulefeat.bind must be one of {list(_POLICIES)!r}. "
                             f"Got {empty_units!r} instead.")
    inside = unit_transformers(detector)
    if not inside:
        raise ParameterError(f"rulefeat.bind: {type(detector).__name__} holds no rulefeat transformer "
                             "(RuleFeatures or LogFeatures), so there is nothing to bind to a log.")
    differ = [d for tf in inside if hasattr(tf, "log_schema_") for d in tf._schema_differences(log)]
    raise_schema_differences(differ, "rulefeat.bind")
    bound = copy.deepcopy(detector)  # transformers share their old log instead of copying it (contract 1)
    for transformer in unit_transformers(bound):
        transformer.log = log
        transformer.empty_units = empty_units
        transformer.missing_students = empty_units
    return bound
