"""The one conversion of results to JSON-ready values, shared by every report."""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np
import pandas as pd

from ..errors import EvaluationError

__all__ = ["to_plain"]


def to_plain(value, path: str = "results", where: str = "IncrementalValueReport.to_json"):
    """A JSON-ready copy: numpy scalars to Python, NaN and infinities to None, tuples to lists."""
    if isinstance(value, Mapping):
        return {str(k): to_plain(v, f"{path}[{k!r}]", where) for k, v in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [to_plain(v, f"{path}[{i}]", where) for i, v in enumerate(list(value))]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if value is None or isinstance(value, (str, int, bool)):
        return value
    if value is pd.NA or value is pd.NaT:
        return None
    raise EvaluationError(f"{where}: {path} holds a {type(value).__name__} "
                          f"({value!r}), which JSON cannot hold; results may contain only str, int, float, "
                          "bool, None, lists and dicts.")
