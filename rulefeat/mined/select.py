"""The fit-time feature budget: drop uninformative columns, keep at most ``max_features``.

Everything here sees only the training units' feature values (and labels), so
the choice is part of what fit learns (contract 2).  Order of the steps:

1. drop features that are *constant* on the training units (NaN counts as a
   value, so a feature that is NaN on some units and 3 on the rest is kept);
2. drop exact *duplicates* (same value, NaN in the same places, on every
   training unit), keeping the first in family order;
3. when more than ``max_features`` remain, rank them by a score and keep the
   best; ties go to the alphabetically first name, so the choice is
   deterministic.

Scores: with labels, the absolute Spearman correlation between the feature and
``y`` over the units where both are known (for a binary ``y`` this is the
point-biserial correlation of the ranks; a multiclass ``y`` takes the largest
one-vs-rest value).  Without labels, the *normalised rank variance*: the
variance of the feature's mid-ranks (NaN ranked as one tied block) divided by
its largest possible value; 1 when every unit has its own value, falling
towards 0 as ties grow, so features that tell units apart are preferred.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.stats import rankdata
from sklearn.utils.multiclass import type_of_target

from ..errors import UnitError


@dataclass
class Selection:
    """Outcome of :func:`select`: kept names (in input order), dropped ``{name: reason}``, scores."""

    kept: list = field(default_factory=list)
    dropped: dict = field(default_factory=dict)
    scores: dict = field(default_factory=dict)


def select(columns: dict, y=None, max_features: int | None = None, *, prune: bool = True,
           where: str = "select") -> Selection:
    """Apply the steps of the module docstring to ``{name: training values}`` (1-2 only if ``prune``)."""
    out = Selection()
    seen: dict[bytes, str] = {}
    for name, values in columns.items():
        values = np.asarray(values, dtype=np.float64)
        if not prune:
            out.kept.append(name)
            continue
        if is_constant(values):
            out.dropped[name] = "constant on the training units"
            continue
        key = _fingerprint(values)
        if key in seen:
            out.dropped[name] = f"duplicate of {seen[key]!r} on the training units"
            continue
        seen[key] = name
        out.kept.append(name)
    if max_features is None or len(out.kept) <= max_features:
        return out
    target = _prepare_target(y, len(next(iter(columns.values()))), where)
    out.scores = {name: score(np.asarray(columns[name], dtype=np.float64), target) for name in out.kept}
    ranked = sorted(out.kept, key=lambda n: (-out.scores[n], n))
    best = set(ranked[:max_features])
    criterion = "|Spearman correlation| with y" if target is not None else "normalised rank variance"
    for rank, name in enumerate(ranked[max_features:], start=max_features + 1):
        out.dropped[name] = (f"outside the max_features={max_features} budget (rank {rank}, "
                             f"{criterion} {out.scores[name]:.4g})")
    out.kept = [n for n in out.kept if n in best]
    return out


def is_constant(values: np.ndarray) -> bool:
    nan = np.isnan(values)
    if nan.all():
        return True
    if nan.any():
        return False
    return bool(np.all(values == values[0]))


def _fingerprint(values: np.ndarray) -> bytes:
    # One bit pattern for every NaN and for -0.0 / 0.0, so equal columns hash equal.
    canonical = np.where(np.isnan(values), np.nan, values + 0.0)
    return canonical.tobytes()


def _prepare_target(y, n_rows: int, where: str):
    """None, or a list of 1-D float targets to correlate with (one per class when multiclass)."""
    if y is None:
        return None
    y = np.asarray(y)
    if y.ndim != 1 or len(y) != n_rows:
        raise UnitError(f"{where}: y must be 1-D with one label per row of X ({n_rows} rows). "
                        f"Got shape {y.shape}.")
    kind = type_of_target(y)
    if kind == "multiclass":
        return [(y == c).astype(np.float64) for c in np.unique(y)]
    if kind == "binary":
        return [(y == np.unique(y)[-1]).astype(np.float64)]
    return [np.asarray(y, dtype=np.float64)]


def score(values: np.ndarray, target) -> float:
    """The ranking score of one feature (see the module docstring)."""
    if target is None:
        return _rank_variance(values)
    return max(_abs_spearman(values, t) for t in target)


def _abs_spearman(x: np.ndarray, y: np.ndarray) -> float:
    ok = ~np.isnan(x) & ~np.isnan(y)
    if ok.sum() < 3:
        return 0.0
    rx, ry = rankdata(x[ok]), rankdata(y[ok])
    rx, ry = rx - rx.mean(), ry - ry.mean()
    den = np.sqrt((rx * rx).sum() * (ry * ry).sum())
    return float(abs((rx * ry).sum()) / den) if den > 0 else 0.0


def _rank_variance(values: np.ndarray) -> float:
    n = len(values)
    if n < 2:
        return 0.0
    ranks = rankdata(np.where(np.isnan(values), np.inf, values))
    return float(ranks.var() / ((n * n - 1) / 12.0))
