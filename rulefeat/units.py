"""Units: the things a detector classifies, and the events each one covers.

A units table ``X`` has one row per unit.  A :class:`Unit` says which key
columns ``X`` carries and how a row maps to events of an
:class:`~rulefeat.EventLog`; :meth:`Unit.resolve` returns a :class:`UnitIndex`
(compressed rows: unit ``i`` covers ``events[indptr[i]:indptr[i + 1]]``, in log
order), which the transformers aggregate with vectorized group operations.

=============  ==========================  ==========================================
unit           key columns of X            events covered
=============  ==========================  ==========================================
``window``     student, start, end         the student's events with start <= time < end
``last``       student, time (+ ``n``)     the student's last ``n`` events with time <= t
``step``       student, step               all the student's events on that step
``problem``    student, problem            all the student's events on that problem
``session``    student, session            all events of that session
``student``    student                     all the student's events
=============  ==========================  ==========================================

Windows may overlap; each is computed from its own events.  Key column names
can be changed, e.g. ``Window(start="from", end="to")``.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from . import _frame
from ._text import did_you_mean, show_rows
from .errors import RulefeatWarning, UnitError
from .log import passes
from .log.derive import ranges_to_index
from .log.eventlog import EventLog

__all__ = ["Unit", "Window", "LastActions", "Step", "Problem", "Session", "Student", "UnitIndex",
           "as_unit", "UNIT_NAMES"]

MISSING_POLICIES = ("error", "empty")


@dataclass(frozen=True)
class UnitIndex:
    """Which events each unit covers (CSR layout) plus what aggregations need."""

    indptr: np.ndarray
    events: np.ndarray
    start_time: np.ndarray
    students: np.ndarray

    @property
    def n_units(self) -> int:
        return len(self.indptr) - 1

    @property
    def sizes(self) -> np.ndarray:
        return np.diff(self.indptr)

    @property
    def empty(self) -> np.ndarray:
        return self.sizes == 0

    def unit_of_event(self) -> np.ndarray:
        """For every entry of ``events``, the unit it belongs to."""
        return np.repeat(np.arange(self.n_units), self.sizes)


@dataclass(frozen=True)
class Unit:
    """Base of the unit kinds; subclasses set the key columns."""

    student: str = "student"

    name = "unit"

    def keys(self) -> tuple[str, ...]:
        return (self.student,)

    def resolve(self, log: EventLog, X: pd.DataFrame, *, missing_students: str = "error",
                empty_units: str = "empty", where: str = "resolve") -> UnitIndex:
        """Map the rows of ``X`` to the events they cover.

        Units covering no events are kept with a warning (``empty_units="empty"``) or refused with a
        :class:`~rulefeat.errors.UnitError` naming them (``empty_units="error"``).
        """
        X = _frame.as_pandas(X)
        _check_table(X, self.keys(), where, self.name)
        if missing_students not in MISSING_POLICIES:
            raise UnitError(f"The 'missing_students' parameter of {where} must be one of "
                            f"{list(MISSING_POLICIES)!r}. Got {missing_students!r} instead.")
        students = log.student_codes(X[self.student], missing=missing_students, where=where)
        starts, ends, order = self._ranges(log, X, students, where)
        index = _make_index(log, starts, ends, order, students, self._start_times(log, X))
        if empty_units not in MISSING_POLICIES:
            raise UnitError(f"The 'empty_units' parameter of {where} must be one of "
                            f"{list(MISSING_POLICIES)!r}. Got {empty_units!r} instead.")
        if empty_units == "error":
            _refuse_empty(index, X, self.keys(), where, self.name)
        _report_empty(index, where, self.name)
        return index

    def _start_times(self, log: EventLog, X: pd.DataFrame):
        return None

    def _ranges(self, log, X, students, where):
        first, last = log.student_bounds()
        safe = np.maximum(students, 0)
        present = students >= 0
        return np.where(present, first[safe], 0), np.where(present, last[safe], 0), None


@dataclass(frozen=True)
class Window(Unit):
    """A time window of one student: events with ``start <= time < end``."""

    start: str = "start"
    end: str = "end"
    name = "window"

    def keys(self):
        return (self.student, self.start, self.end)

    def _start_times(self, log, X):
        return log.to_seconds(X[self.start], what=f"column {self.start!r}")

    def _ranges(self, log, X, students, where):
        start = log.to_seconds(X[self.start], what=f"column {self.start!r}")
        end = log.to_seconds(X[self.end], what=f"column {self.end!r}")
        for col, vals in ((self.start, start), (self.end, end)):
            bad = np.flatnonzero(np.isnan(vals))
            if len(bad):
                raise UnitError(f"{where}: column {col!r} of X has missing or unreadable times at "
                                f"{show_rows(bad)}.")
        bad = np.flatnonzero(end < start)
        if len(bad):
            raise UnitError(f"{where}: {len(bad)} windows end before they start ({show_rows(bad)}); "
                            f"each needs {self.start!r} <= {self.end!r}.")
        lo = _time_search(log, students, start, "left")
        hi = _time_search(log, students, end, "left")
        return lo, np.maximum(hi, lo), None


@dataclass(frozen=True)
class LastActions(Unit):
    """The last ``n`` events of a student up to and including time ``time``."""

    n: int = 20
    time: str = "time"
    name = "last"

    def keys(self):
        return (self.student, self.time)

    def _ranges(self, log, X, students, where):
        if not isinstance(self.n, (int, np.integer)) or self.n < 1:
            raise UnitError(f"LastActions: n must be a positive integer. Got {self.n!r} instead.")
        t = log.to_seconds(X[self.time], what=f"column {self.time!r}")
        bad = np.flatnonzero(np.isnan(t))
        if len(bad):
            raise UnitError(f"{where}: column {self.time!r} of X has missing or unreadable times at "
                            f"{show_rows(bad)}.")
        hi = _time_search(log, students, t, "right")
        first, _ = log.student_bounds()
        lo = np.maximum(np.where(students >= 0, first[np.maximum(students, 0)], hi), hi - int(self.n))
        return lo, hi, None


@dataclass(frozen=True)
class _KeyedUnit(Unit):
    """Units given by a category key of the student (step, problem, session)."""

    field = ""

    def keys(self):
        return (self.student, self.key)

    @property
    def key(self) -> str:
        return getattr(self, self.field)

    def _ranges(self, log, X, students, where):
        if not log.has(self.field):
            raise UnitError(f"{where}: unit {self.name!r} needs a {self.field!r} field, which the log "
                            f"does not have; map a column to it when building the log.")
        codes = _key_codes(log, self.field, X[self.key], where, self.key)
        sorted_keys, order = _keyed_order(log, self.field)
        width = _key_width(log, self.field)
        query = np.where((students >= 0) & (codes >= 0), students * width + codes + 1, -1)
        lo = np.searchsorted(sorted_keys, query, side="left")
        hi = np.searchsorted(sorted_keys, query, side="right")
        hi = np.where(query < 0, lo, hi)
        return lo, hi, order


@dataclass(frozen=True)
class Step(_KeyedUnit):
    """All of a student's events on one step."""

    step: str = "step"
    name = "step"
    field = "step"


@dataclass(frozen=True)
class Problem(_KeyedUnit):
    """All of a student's events on one problem."""

    problem: str = "problem"
    name = "problem"
    field = "problem"


@dataclass(frozen=True)
class Session(_KeyedUnit):
    """All events of one session of a student."""

    session: str = "session"
    name = "session"
    field = "session"


@dataclass(frozen=True)
class Student(Unit):
    """All events of one student."""

    name = "student"


UNIT_NAMES = {"window": Window, "last": LastActions, "step": Step, "problem": Problem,
              "session": Session, "student": Student}


def as_unit(spec, where: str = "unit") -> Unit:
    """Turn ``"window"`` etc. or a :class:`Unit` into a :class:`Unit`."""
    if isinstance(spec, Unit):
        return spec
    if isinstance(spec, str) and spec in UNIT_NAMES:
        return UNIT_NAMES[spec]()
    raise UnitError(f"The 'unit' parameter of {where} must be one of {sorted(UNIT_NAMES)!r} or a "
                    f"rulefeat.units.Unit. Got {spec!r} instead.{did_you_mean(str(spec), UNIT_NAMES)}")


def _check_table(X, keys, where, name) -> None:
    if not isinstance(X, pd.DataFrame):
        raise UnitError(f"{where}: X must be a pandas DataFrame of unit keys with columns {list(keys)!r} "
                        f"(unit {name!r}). Got {type(X).__name__}.")
    cols = [str(c) for c in X.columns]
    for key in keys:
        if key not in cols:
            raise UnitError(f"{where}: X lacks the key column {key!r} needed by unit {name!r} "
                            f"(needs {list(keys)!r}).{did_you_mean(key, cols)} Columns given: {cols!r}.")


def _key_codes(log, field, values, where, column) -> np.ndarray:
    codes = _frame.codes_for(values, log.categories(field))
    bad = np.flatnonzero(codes < 0)
    if len(bad):
        raise UnitError(f"{where}: column {column!r} of X has values that are not {field}s of the log "
                        f"at {show_rows(bad)} (first: {values.iloc[bad[0]]!r}).")
    return codes


def _key_width(log, field) -> int:
    return len(log.categories(field)) + 1


def _keyed_order(log: EventLog, field: str):
    def compute():
        width = _key_width(log, field)
        codes = log.values(field).astype(np.int64)
        keys = np.where(codes >= 0, log.values("student").astype(np.int64) * width + codes + 1, -1)
        order = np.argsort(keys, kind="stable")
        return keys[order], order
    return log.cached(("unit-order", field), compute)


def _time_search(log: EventLog, students, times, side) -> np.ndarray:
    """Position of the first event of ``student`` with time >= t (side='left') or > t ('right')."""
    first, last = log.student_bounds()
    students = np.asarray(students, dtype=np.int64)
    out = np.empty(len(students), dtype=np.int64)
    passes.search_times(log.values("time"), first, last, students, np.asarray(times, dtype=np.float64),
                        side == "right", out)
    return out


def _make_index(log, starts, ends, order, students, start_time) -> UnitIndex:
    starts = np.asarray(starts, dtype=np.int64)
    ends = np.asarray(ends, dtype=np.int64)
    positions = ranges_to_index(starts, ends)
    events = positions if order is None else np.asarray(order)[positions]
    indptr = np.concatenate([[0], np.cumsum(ends - starts)]).astype(np.int64)
    if start_time is None:
        time = log.values("time")
        start_time = np.full(len(starts), np.nan)
        nonempty = ends > starts
        start_time[nonempty] = time[events[indptr[:-1][nonempty]]]
    return UnitIndex(indptr=indptr, events=events, start_time=np.asarray(start_time, dtype=np.float64),
                     students=np.asarray(students, dtype=np.int64))


def _refuse_empty(index: UnitIndex, X: pd.DataFrame, keys, where: str, name: str) -> None:
    empty = np.flatnonzero(index.empty)
    if not len(empty):
        return
    shown = "; ".join(f"row {r}: " + ", ".join(f"{k}={X[k].iloc[r]!r}" for k in keys) for r in empty[:3])
    more = f" (and {len(empty) - 3} more)" if len(empty) > 3 else ""
    raise UnitError(f"{where}: {len(empty)} of {index.n_units} {name} units cover no events of the log this "
                    f"transformer reads ({shown}{more}). If these units come from another log, bind the fitted "
                    "detector to that log first: rulefeat.bind(detector, new_log). To score units without "
                    "events anyway (count-like features 0, others missing), pass empty_units='empty'.")


def _report_empty(index: UnitIndex, where: str, name: str) -> None:
    empty = np.flatnonzero(index.empty)
    if len(empty):
        warnings.warn(f"{where}: {len(empty)} of {index.n_units} {name} units cover no events "
                      f"({show_rows(empty)}); they are kept, with count-like features 0 and others NaN.",
                      RulefeatWarning, stacklevel=3)
