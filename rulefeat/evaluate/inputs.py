"""Checking and normalising the inputs of an evaluation: units, labels, task, students and populations."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .. import _frame
from .._text import did_you_mean, show_rows
from ..errors import EvaluationError
from ..log.eventlog import EventLog
from ..units import as_unit
from .models import TASKS

__all__ = ["Inputs", "read_target", "resolve_task", "prepare", "prepare_precomputed", "population_summary"]

WHERE = "incremental_value"
# Integer targets with at least this many distinct values are read as regression targets under task="auto".
_MIN_REGRESSION_VALUES = 10


@dataclass(frozen=True, eq=False)
class Inputs:
    """Everything the evaluation needs about the units, in positional form (row i = units row i)."""

    X: pd.DataFrame | None
    y: np.ndarray
    task: str
    students: np.ndarray
    student_labels: np.ndarray
    populations: np.ndarray
    population_names: list
    population_column: str | None
    notes: list = field(default_factory=list)

    @property
    def n_units(self) -> int:
        return len(self.y)


def _missing(values: pd.Series) -> np.ndarray:
    return np.asarray(values.isna().to_numpy(), dtype=bool)


def read_target(units: pd.DataFrame | None, y, n_units: int, where: str = WHERE) -> tuple[pd.Series, str | None]:
    """The target as a Series of length ``n_units`` (and its column name when ``y`` named a column of units)."""
    column = None
    if isinstance(y, str) and units is not None:
        if y not in units.columns:
            raise EvaluationError(f"{where}: 'y' names the column {y!r}, which units does not have."
                                  f"{did_you_mean(y, [str(c) for c in units.columns])} Columns: "
                                  f"{[str(c) for c in units.columns]!r}.")
        column, values = y, units[y].reset_index(drop=True)
    elif isinstance(y, pd.Series):
        if units is not None and len(y) == len(units) and not y.index.equals(units.index):
            raise EvaluationError(f"{where}: the index of 'y' differs from the index of units, so rows could be "
                                  "matched wrongly. Align them first, or pass y.to_numpy() to match by position.")
        values = y.reset_index(drop=True)
    else:
        arr = np.asarray(y)
        if arr.ndim != 1:
            raise EvaluationError(f"{where}: 'y' must be one-dimensional (one label per unit); got shape "
                                  f"{arr.shape}.")
        values = pd.Series(arr)
    if len(values) != n_units:
        raise EvaluationError(f"{where}: 'y' has {len(values)} values but there are {n_units} units; give one "
                              "label per row of units.")
    bad = np.flatnonzero(_missing(values))
    if len(bad):
        raise EvaluationError(f"{where}: 'y' is missing at {show_rows(bad)}; drop those units or give them a "
                              "label.")
    return values, column


def resolve_task(values: pd.Series, task: str, where: str = WHERE) -> tuple[str, np.ndarray, object]:
    """Decide classification or regression; return the task, y coded as floats, and the positive label."""
    if task not in ("auto", *TASKS):
        raise EvaluationError(f"The 'task' parameter of {where} must be one of ['auto', 'classification', "
                              f"'regression']. Got {task!r} instead.{did_you_mean(str(task), TASKS)}")
    try:
        distinct = np.unique(values.to_numpy())
    except TypeError as exc:
        raise EvaluationError(f"{where}: 'y' mixes value types that cannot be ordered.") from exc
    numeric = _frame.is_number_dtype(values.dtype) and not _frame.is_bool_dtype(values.dtype)
    if task == "auto":
        task = _guess_task(values, distinct, numeric, where)
    if len(distinct) < 2:
        raise EvaluationError(f"{where}: 'y' has a single value ({distinct[0]!r}); there is nothing to predict.")
    if task == "classification":
        if len(distinct) != 2:
            raise EvaluationError(f"{where}: classification needs exactly two classes in 'y'; found "
                                  f"{len(distinct)} ({distinct[:5].tolist()!r}...). Pass task='regression' for a "
                                  "numeric target.")
        positive = distinct[1]
        return task, (values.to_numpy() == positive).astype(float), positive
    if not numeric:
        raise EvaluationError(f"{where}: regression needs a numeric 'y'; got dtype {values.dtype}.")
    y = values.to_numpy(dtype=float)
    if not np.isfinite(y).all():
        raise EvaluationError(f"{where}: 'y' has infinite values at {show_rows(np.flatnonzero(~np.isfinite(y)))}.")
    return task, y, None


def _guess_task(values, distinct, numeric, where) -> str:
    if len(distinct) <= 2:
        return "classification"
    if numeric and (_frame.is_float_dtype(values.dtype) or len(distinct) >= _MIN_REGRESSION_VALUES):
        return "regression"
    raise EvaluationError(f"{where}: cannot tell whether 'y' ({len(distinct)} distinct values, dtype "
                          f"{values.dtype}) is a set of classes or a number to predict. Only binary "
                          "classification and regression are supported: pass task='regression', or recode y "
                          "into two classes.")


def label_codes(labels: pd.Series) -> tuple[np.ndarray, list]:
    codes, uniques = _frame.factorize_values(labels, sort=True)
    return codes.astype(np.int64), [str(u) for u in uniques]


def log_populations(log, student_codes: np.ndarray, notes: list) -> tuple[np.ndarray, list]:
    """Each unit's population from the log: the population of its student's first event."""
    first, last = log.student_bounds()
    pop = log.values("population")
    names = [str(c) for c in log.categories("population")]
    present = first < last
    student_pop = np.full(len(first), -1, dtype=np.int64)
    student_pop[present] = pop[first[present]]
    spans = np.flatnonzero(present)
    if len(spans):
        # The log is sorted by student, so segments between first events are exactly each student's events.
        values, starts = pop.astype(float), first[spans]
        mixed = int((np.minimum.reduceat(values, starts) != np.maximum.reduceat(values, starts)).sum())
        if mixed:
            notes.append(f"{mixed} students have events in more than one population; each is counted in the "
                         "population of its first event.")
    return student_pop[student_codes], names


def _populations(units, population, log_population, log_codes, notes) -> tuple[np.ndarray, list, str | None]:
    if population is None:
        if log_population is not None:
            codes, names = log_population(log_codes, notes)
            return codes, names, None
        return np.full(len(units), -1, dtype=np.int64), [], None
    if not isinstance(population, str) or population not in units.columns:
        cols = [str(c) for c in units.columns]
        raise EvaluationError(f"The 'population' parameter of {WHERE} must name a column of units (or be None to "
                              f"use the log's population field). Got {population!r}.{did_you_mean(str(population), cols)}")
    codes, names = label_codes(units[population].reset_index(drop=True))
    if (codes < 0).any():
        notes.append(f"{int((codes < 0).sum())} units have no population; they are used for training only in the "
                     "transfer view.")
    return codes, names, population


def check_units(log, units, unit, where: str = WHERE, *, needs_log: bool = True):
    """The unit spec, after checking the log, the units table and its key columns."""

    if needs_log and not isinstance(log, EventLog):
        raise EvaluationError(f"{where}: 'log' must be a rulefeat.EventLog. Got {type(log).__name__}.")
    if not isinstance(units, pd.DataFrame) or len(units) == 0:
        size = len(units) if hasattr(units, "__len__") else "?"
        raise EvaluationError(f"{where}: 'units' must be a non-empty pandas DataFrame of unit keys (one row per "
                              f"unit). Got {type(units).__name__} of length {size}.")
    spec = as_unit(unit, where=where)
    cols = [str(c) for c in units.columns]
    lacking = [k for k in spec.keys() if k not in cols]
    if lacking:
        raise EvaluationError(f"{where}: units lacks the key columns {lacking!r} of unit {spec.name!r} (needs "
                              f"{list(spec.keys())!r}).{did_you_mean(lacking[0], cols)} Columns: {cols!r}.")
    return spec


def prepare(log, units, y, population, unit, task) -> Inputs:
    """Check the units table (pandas, pyarrow or polars) against the log and the unit, and read y, students and populations."""
    units = _frame.as_pandas(units)
    check_units(log, units, unit)

    def log_codes(labels):
        return log.student_codes(labels, missing="error", where=WHERE)

    def from_log(codes, notes):
        return log_populations(log, codes, notes)

    return prepare_units(units, y, population, unit, task, log_codes, from_log if log.has("population") else None)


def prepare_units(units: pd.DataFrame, y, population, unit, task, student_codes, log_population) -> Inputs:
    """:func:`prepare` for events held elsewhere (:mod:`rulefeat.scale`).

    ``student_codes(labels)`` returns the units' student codes, raising for students without events;
    ``log_population(codes, notes)`` returns ``(population code per unit, names)`` from the events' own
    population field, or is None when they have none.
    """
    spec = check_units(None, units, unit, needs_log=False)
    values, y_column = read_target(units, y, len(units))
    task, y_coded, positive = resolve_task(values, task)
    X = units.drop(columns=[y_column]) if y_column is not None else units
    X = X.reset_index(drop=True)
    student_labels = X[spec.student]
    codes = student_codes(student_labels)
    notes = _positive_note(task, positive)
    pops, names, column = _populations(X, population, log_population, codes, notes)
    students, _ = label_codes(student_labels)
    return Inputs(X, y_coded, task, students, student_labels.to_numpy(), pops, names, column, notes)


def prepare_precomputed(n_units: int, y, students, population, task) -> Inputs:
    """Inputs for an evaluation of precomputed feature tables (no log)."""
    labels = pd.Series(np.asarray(students)).reset_index(drop=True)
    if len(labels) != n_units:
        raise EvaluationError(f"{WHERE}: 'students' has {len(labels)} values but the feature tables have "
                              f"{n_units} rows; give each row's student.")
    bad = np.flatnonzero(_missing(labels))
    if len(bad):
        raise EvaluationError(f"{WHERE}: 'students' is missing at {show_rows(bad)}.")
    values, _ = read_target(None, y, n_units)
    task, y_coded, positive = resolve_task(values, task)
    notes = _positive_note(task, positive)
    if population is None:
        codes, names = np.full(n_units, -1, dtype=np.int64), []
    else:
        pops = pd.Series(np.asarray(population)).reset_index(drop=True)
        if len(pops) != n_units:
            raise EvaluationError(f"{WHERE}: 'population' has {len(pops)} values; expected {n_units}.")
        codes, names = label_codes(pops)
    students_codes, _ = label_codes(labels)
    return Inputs(None, y_coded, task, students_codes, labels.to_numpy(), codes, names, None, notes)


def _positive_note(task: str, positive) -> list:
    if task != "classification" or (isinstance(positive, (bool, np.bool_, int, np.integer, float, np.floating))
                                    and positive == 1):
        return []
    return [f"The positive class is {positive!r} (the greater of the two labels); it is coded 1 in the "
            "out-of-fold predictions."]


def population_summary(inputs: Inputs) -> dict:
    """Per population: units, students and positive rate."""
    out = {}
    for k, name in enumerate(inputs.population_names):
        rows = inputs.populations == k
        out[name] = {"n_units": int(rows.sum()), "n_students": int(len(np.unique(inputs.students[rows]))),
                     "positive_rate": float(inputs.y[rows].mean()) if inputs.task == "classification" and rows.any()
                     else None}
    return out
