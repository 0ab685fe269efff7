"""Shared pieces of the validity statistics: dict-like result records and input checks."""

from __future__ import annotations

from dataclasses import fields

import numpy as np
import pandas as pd

from .. import _frame
from .._text import show_rows
from ..errors import EvaluationError

_MISSING = ("raise", "drop")


class Fields:
    """Read a result dataclass like a mapping; ``to_dict`` gives plain Python values for JSON."""

    def keys(self) -> list[str]:
        return [f.name for f in fields(self)]

    def __getitem__(self, key: str):
        if key not in self.keys():
            raise KeyError(f"{type(self).__name__} has no field {key!r}; fields are {self.keys()}.")
        return getattr(self, key)

    def to_dict(self) -> dict:
        return {key: _plain(getattr(self, key)) for key in self.keys()}


def _plain(value):
    if isinstance(value, Fields):
        return value.to_dict()
    if isinstance(value, (np.ndarray, np.generic)):
        return value.tolist()
    return list(value) if isinstance(value, tuple) else value


# -- input handling ------------------------------------------------------------------------------
def as_matrix(X, where: str, name: str) -> tuple[np.ndarray, tuple[str, ...]]:
    """A float (n, k) matrix and its column names; 1-D input is one column."""
    if isinstance(X, pd.Series):
        X = X.to_frame(name=name if X.name is None else X.name)
    if isinstance(X, pd.DataFrame):
        columns = [X.iloc[:, j] for j in range(X.shape[1])]  # by position: names may repeat
        bad = [str(c.name) for c in columns if not (_frame.is_numeric(c) or _frame.is_boolean(c))]
        if bad:
            raise EvaluationError(f"{where}: {name!r} has non-numeric columns {bad}; encode categories as "
                                  "0/1 indicator columns first.")
        arr = np.column_stack([_frame.to_float(c) for c in columns]) if columns else np.empty((len(X), 0))
        return arr, tuple(str(c) for c in X.columns)
    try:
        arr = np.asarray(X, dtype=float)
    except (TypeError, ValueError) as exc:
        raise EvaluationError(f"{where}: {name!r} must be numeric; got {type(X).__name__}.") from exc
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2:
        raise EvaluationError(f"{where}: {name!r} must be 1-D or 2-D; got shape {arr.shape}.")
    return arr, (name,) if arr.shape[1] == 1 else tuple(f"{name}{j}" for j in range(arr.shape[1]))


def complete_cases(where: str, missing: str, arrays: dict[str, np.ndarray]) -> tuple[dict[str, np.ndarray], int]:
    """Check lengths and finiteness; drop incomplete rows when ``missing='drop'``, else refuse them."""
    if missing not in _MISSING:
        raise EvaluationError(f"{where}: 'missing' must be one of {_MISSING}; got {missing!r}.")
    lengths = {name: len(a) for name, a in arrays.items()}
    if len(set(lengths.values())) != 1:
        raise EvaluationError(f"{where}: inputs must have the same number of rows; got {lengths}.")
    flat = {name: a.reshape(len(a), -1) for name, a in arrays.items()}
    for name, a in flat.items():
        if np.isinf(a).any():
            raise EvaluationError(f"{where}: {name!r} has infinite values at "
                                  f"{show_rows(np.flatnonzero(np.isinf(a).any(axis=1)))}; values must be finite.")
    bad = np.zeros(next(iter(lengths.values())), dtype=bool)
    for a in flat.values():
        bad |= np.isnan(a).any(axis=1)
    if bad.any() and missing == "raise":
        holders = [name for name, a in flat.items() if np.isnan(a).any()]
        raise EvaluationError(f"{where}: missing values in {holders} at {show_rows(np.flatnonzero(bad))}; fill "
                              "them, or pass missing='drop' to leave those rows out (they are counted).")
    return {name: a[~bad] for name, a in arrays.items()}, int(bad.sum())


def as_outcome(y, where: str, name: str = "y") -> np.ndarray:
    """A 1-D float array (None and pandas NA become NaN)."""
    try:
        values = y.to_numpy(dtype=float, na_value=np.nan) if isinstance(y, pd.Series) else np.asarray(y, dtype=float)
    except (TypeError, ValueError) as exc:
        raise EvaluationError(f"{where}: {name!r} must be numeric or boolean; got {type(y).__name__} "
                              f"with dtype {getattr(y, 'dtype', None)}.") from exc
    if values.ndim != 1:
        raise EvaluationError(f"{where}: {name!r} must be one-dimensional; got shape {values.shape}.")
    return values


def as_zero_one(y: np.ndarray, where: str) -> np.ndarray:
    """0/1 floats for a two-valued outcome (the greater value is 1)."""
    distinct = np.unique(y)
    if len(distinct) != 2:
        raise EvaluationError(f"{where}: a logistic model needs exactly two outcome values; found "
                              f"{len(distinct)} ({distinct[:5].tolist()!r}).")
    return (y == distinct[1]).astype(float)
