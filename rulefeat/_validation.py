"""Parameter validation as data: a constraint per parameter, one message format for every public entry point.

A constraint is a test and the words for what a valid value is; :func:`validate` checks a dict of values against
a dict of constraints and raises ``The 'x' parameter of F must be <words>. Got <value> instead.`` (with a
"Did you mean" hint for near-misses of a list of options).  Estimators declare their constraints in
``_constraints`` (see ``_base.py``); functions call :func:`validate` on their options.

>>> validate("f", {"n": 0}, {"n": Interval(int, 1)})
Traceback (most recent call last):
...
rulefeat.errors.ParameterError: The 'n' parameter of f must be an int >= 1. Got 0 instead.
"""

from __future__ import annotations

import numbers
from collections.abc import Callable, Sequence
from typing import NamedTuple

import numpy as np

from ._text import did_you_mean
from .errors import ParameterError

__all__ = ["Constraint", "Interval", "Options", "Flag", "InstanceOf", "Satisfies", "validate", "is_int", "is_real"]


class Constraint(NamedTuple):
    """``test(value) -> bool`` and ``text``, the words completing "must be ..."; ``options`` for hints."""

    test: Callable[[object], bool]
    text: str
    options: tuple = ()


def is_int(value) -> bool:
    """An integer (numpy integers too), not a bool."""
    return isinstance(value, numbers.Integral) and not isinstance(value, bool)


def is_real(value) -> bool:
    """A real number (numpy floats and integers too), not a bool."""
    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def Interval(kind: type, low=None, high=None, *, closed: str = "both", none: bool = False,
             noun: str | None = None) -> Constraint:
    """Numbers of ``kind`` (int or float) in an interval; ``closed`` is "both", "left", "right" or "neither".

    >>> Interval(int, 1).text, Interval(float, 0, 1, closed="neither").text
    ('an int >= 1', 'a float strictly between 0 and 1')
    """
    number = is_int if kind is int else is_real
    noun = noun or ("an int" if kind is int else "a float")
    low_ok = (lambda v: True) if low is None else (
        (lambda v: v >= low) if closed in ("both", "left") else (lambda v: v > low))
    high_ok = (lambda v: True) if high is None else (
        (lambda v: v <= high) if closed in ("both", "right") else (lambda v: v < high))
    if low is not None and high is not None:
        text = (f"{noun} strictly between {low} and {high}" if closed == "neither"
                else f"{noun} in [{low}, {high}]" if closed == "both"
                else f"{noun} in ({low}, {high}]" if closed == "right" else f"{noun} in [{low}, {high})")
    elif low is not None:
        text = f"{noun} {'>=' if closed in ('both', 'left') else '>'} {low}"
    elif high is not None:
        text = f"{noun} {'<=' if closed in ('both', 'right') else '<'} {high}"
    else:
        text = noun
    return _nullable(Constraint(lambda v: number(v) and low_ok(v) and high_ok(v), text), none)


def Options(values: Sequence, *, none: bool = False) -> Constraint:
    """One of a fixed list of values."""
    values = tuple(values)
    return _nullable(Constraint(lambda v: _member(v, values), f"one of {list(values)!r}", values), none)


def _member(value, values: tuple) -> bool:
    if isinstance(value, np.ndarray):
        return False
    try:
        return bool(value in values)
    except (TypeError, ValueError):  # e.g. an array, whose == is elementwise
        return False


def Flag() -> Constraint:
    """True or False (numpy booleans too)."""
    return Constraint(lambda v: isinstance(v, (bool, np.bool_)), "True or False")


def InstanceOf(types, text: str, *, none: bool = False) -> Constraint:
    """An instance of ``types``, described by ``text``."""
    return _nullable(Constraint(lambda v: isinstance(v, types), text), none)


def Satisfies(test: Callable[[object], bool], text: str) -> Constraint:
    """Any other rule, as a test and its words."""
    return Constraint(test, text)


def _nullable(constraint: Constraint, none: bool) -> Constraint:
    if not none:
        return constraint
    test = constraint.test
    return Constraint(lambda v: v is None or test(v), f"None or {constraint.text}", constraint.options)


def validate(where: str, values: dict, constraints: dict, error: type[Exception] = ParameterError) -> None:
    """Raise ``error`` for the first value breaking its constraint, in the constraints' order."""
    for name, constraint in constraints.items():
        constraint = constraint if isinstance(constraint, Constraint) else Constraint(*constraint)
        value = values[name]
        if not constraint.test(value):
            hint = did_you_mean(str(value), [str(o) for o in constraint.options]) if constraint.options else ""
            raise error(f"The {name!r} parameter of {where} must be {constraint.text}. Got {value!r} instead.{hint}")
