"""Input checks shared by the evaluation statistics: every failure is an EvaluationError naming the input."""

from __future__ import annotations

import numpy as np

from ..errors import EvaluationError


def _is_missing(value) -> bool:
    try:
        return bool(value is None or value != value)
    except TypeError:  # pandas.NA-like values refuse comparison: they are missing
        return True


def check_vector(values, where: str, name: str) -> np.ndarray:
    arr = np.asarray(values)
    if arr.ndim != 1:
        raise EvaluationError(f"{where}: {name!r} must be one-dimensional; got shape {arr.shape}.")
    if arr.dtype.kind == "f":
        missing = np.isnan(arr)
    elif arr.dtype.kind == "O":
        missing = np.frompyfunc(_is_missing, 1, 1)(arr).astype(bool)
    else:
        return arr
    if missing.any():
        bad = np.flatnonzero(missing)[:5].tolist()
        raise EvaluationError(f"{where}: {name!r} has missing values at positions {bad}; drop or fill those rows.")
    return arr


def check_same_length(where: str, **arrays: np.ndarray) -> int:
    lengths = {name: len(a) for name, a in arrays.items()}
    if len(set(lengths.values())) != 1:
        raise EvaluationError(f"{where}: inputs must have the same length; got {lengths}.")
    if not next(iter(lengths.values())):
        raise EvaluationError(f"{where}: inputs are empty.")
    return next(iter(lengths.values()))


def check_codes(values: np.ndarray, where: str, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Distinct sorted values and each row's index into them."""
    try:
        distinct, codes = np.unique(values, return_inverse=True)
    except TypeError as exc:
        raise EvaluationError(f"{where}: {name!r} mixes value types that cannot be ordered.") from exc
    return distinct, codes.ravel()


def check_binary(y_true, where: str) -> np.ndarray:
    """Return a bool array, True for the positive (greater) label."""
    classes, codes = check_codes(check_vector(y_true, where, "y_true"), where, "y_true")
    if len(classes) != 2:
        raise EvaluationError(
            f"{where}: 'y_true' must hold exactly two classes; found {len(classes)} "
            f"({classes[:5].tolist()!r}). AUC and kappa need both positives and negatives."
        )
    return codes == 1


def check_scores(score, where: str, name: str) -> np.ndarray:
    s = check_vector(score, where, name)
    try:
        s = s.astype(float)
    except (TypeError, ValueError) as exc:
        raise EvaluationError(f"{where}: {name!r} must be numeric; got dtype {s.dtype}.") from exc
    if not np.isfinite(s).all():
        raise EvaluationError(f"{where}: {name!r} contains infinite values; scores must be finite.")
    return s


def check_weights(sample_weight, n: int, where: str) -> np.ndarray:
    if sample_weight is None:
        return np.ones(n)
    w = check_scores(sample_weight, where, "sample_weight")
    if len(w) != n:
        raise EvaluationError(f"{where}: 'sample_weight' has length {len(w)}; expected {n}.")
    if (w < 0).any():
        raise EvaluationError(f"{where}: 'sample_weight' must be non-negative; got min {w.min()!r}.")
    return w


def check_alpha(alpha: float, where: str) -> float:
    if not (isinstance(alpha, (int, float, np.floating)) and 0 < alpha < 1):
        raise EvaluationError(f"{where}: 'alpha' must be a number in (0, 1); got {alpha!r}.")
    return float(alpha)


def check_positive_number(value, where: str, name: str, integer: bool = False) -> None:
    kinds = (int, np.integer) if integer else (int, float, np.integer, np.floating)
    if isinstance(value, bool) or not isinstance(value, kinds) or not np.isfinite(value) or value <= 0:
        kind = "integer" if integer else "number"
        raise EvaluationError(f"{where}: {name!r} must be a positive {kind}; got {value!r}.")
