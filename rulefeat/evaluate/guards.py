"""Guards: warnings about evaluations whose numbers should not be trusted as they stand.

Each guard looks for a known way an evaluation of detectors goes wrong — a feature that encodes the label, a
feature that identifies students or rows, labels that student identity alone would predict, folds of very
different sizes — and reports it in plain words: as a :class:`GuardWarning` and in ``results["guards"]``.  The
feature guards run on each training fold (never on test data) and are collected over folds.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy import stats as sps

from ..errors import RulefeatWarning

__all__ = ["GuardWarning", "Finding", "feature_findings", "column_aucs", "label_guard", "fold_balance_guard",
           "merge_findings", "emit", "LEAK_AUC", "ID_DISTINCT_SHARE", "MONOTONE_CORRELATION",
           "CONSTANT_LABEL_SHARE", "FOLD_SIZE_RATIO"]

# Thresholds of the guards; all common practice, no source.
LEAK_AUC = 0.95                 # one feature alone separating the classes this well is suspicious
ID_DISTINCT_SHARE = 0.9         # about one distinct value per student ...
ID_CONSTANT_SHARE = 0.99        # ... and the same value on (nearly) all of a student's units
MONOTONE_CORRELATION = 0.99     # |Spearman correlation| with the row position
MONOTONE_DISTINCT_SHARE = 0.5   # ... for a feature taking many values
CONSTANT_LABEL_SHARE = 0.8      # share of students (with >= 2 units) whose label never changes
FOLD_SIZE_RATIO = 2.0           # largest / smallest test fold
_MIN_ROWS = 20


class GuardWarning(RulefeatWarning):
    """An evaluation guard found something that may make the reported numbers misleading."""


@dataclass(frozen=True)
class Finding:
    """One guard's finding on one training fold: which feature and the value that tripped it."""

    kind: str
    feature: str
    value: float


def column_aucs(X: np.ndarray, y: np.ndarray) -> np.ndarray:
    """AUC of every column of ``X`` alone as a score for boolean ``y`` (missing values ranked lowest)."""
    y = np.asarray(y, dtype=bool)
    n1, n0 = int(y.sum()), int((~y).sum())
    if n1 == 0 or n0 == 0:
        return np.full(X.shape[1], np.nan)
    ranks = sps.rankdata(np.where(np.isnan(X), -np.inf, X), axis=0)
    return (ranks[y].sum(axis=0) - n1 * (n1 + 1) / 2.0) / (n1 * n0)


def _rank_correlation(X: np.ndarray, target: np.ndarray) -> np.ndarray:
    """|Spearman correlation| of each column with ``target`` (missing ranked lowest; 0 for constants)."""
    rx = sps.rankdata(np.where(np.isnan(X), -np.inf, X), axis=0)
    rt = sps.rankdata(target)
    rx -= rx.mean(axis=0)
    rt = rt - rt.mean()
    den = np.sqrt((rx * rx).sum(axis=0) * (rt @ rt))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, np.abs(rt @ rx) / np.where(den > 0, den, 1.0), 0.0)


def _distinct_counts(X: np.ndarray) -> np.ndarray:
    s = np.sort(np.where(np.isnan(X), np.inf, X), axis=0)
    return 1 + (s[1:] != s[:-1]).sum(axis=0) if len(s) else np.zeros(X.shape[1], dtype=int)


def _identifier_columns(X: np.ndarray, groups: np.ndarray) -> np.ndarray:
    """Share of multi-unit students on whose units a column is constant (NaN when the check cannot apply)."""
    students, counts = np.unique(groups, return_counts=True)
    if len(students) < 10 or (counts >= 2).mean() < 0.5:
        return np.full(X.shape[1], np.nan)  # one unit per student: every feature would look like an id
    order = np.argsort(groups, kind="stable")
    filled = np.where(np.isnan(X), np.inf, X)[order]
    starts = np.r_[0, np.cumsum(counts)[:-1]]
    constant = np.maximum.reduceat(filled, starts, axis=0) == np.minimum.reduceat(filled, starts, axis=0)
    share = constant[counts >= 2].mean(axis=0)
    distinct_ok = _distinct_counts(X) >= ID_DISTINCT_SHARE * len(students)
    return np.where(distinct_ok, share, 0.0)


def feature_findings(X: np.ndarray, y: np.ndarray, groups: np.ndarray, names, task: str) -> list[Finding]:
    """Run the feature guards on one training fold (rows in units-table order)."""
    X = np.asarray(X, dtype=float)
    if X.shape[0] < _MIN_ROWS or X.shape[1] == 0:
        return []
    found = []
    if task == "classification":
        aucs = column_aucs(X, y)
        for j in np.flatnonzero((aucs > LEAK_AUC) | (aucs < 1.0 - LEAK_AUC)):
            found.append(Finding("label_leak", names[j], float(aucs[j])))
    else:
        corr = _rank_correlation(X, np.asarray(y, dtype=float))
        for j in np.flatnonzero(corr > LEAK_AUC):
            found.append(Finding("label_leak", names[j], float(corr[j])))
    share = _identifier_columns(X, groups)
    for j in np.flatnonzero(share >= ID_CONSTANT_SHARE):
        found.append(Finding("student_identifier", names[j], float(share[j])))
    many = _distinct_counts(X) >= MONOTONE_DISTINCT_SHARE * X.shape[0]
    corr = _rank_correlation(X, np.arange(X.shape[0], dtype=float))
    for j in np.flatnonzero(many & (corr >= MONOTONE_CORRELATION)):
        found.append(Finding("row_order", names[j], float(corr[j])))
    return found


_EXPLAIN = {
    "label_leak": ("alone reaches {stat} {value:.3f} on {n} training fold(s). A single feature this close to the "
                   "label usually means it was built from the labels (or from information recorded after them); "
                   "check how it is computed before trusting any result."),
    "student_identifier": ("takes about one distinct value per student and is constant within students on {n} "
                           "training fold(s): it identifies students. Grouped folds keep it from leaking labels "
                           "between students, but a detector leaning on it learns who the student is, not the "
                           "behaviour."),
    "row_order": ("is monotone in the row order of the units table (|Spearman| {value:.3f}) on {n} training "
                  "fold(s): it looks like a row number or timestamp. Such a feature generalises only if the "
                  "order itself means something for new students."),
}


def merge_findings(per_fold: list[list[Finding]], task: str) -> list[dict]:
    """One guard entry per (kind, feature), with the number of folds and the most extreme value."""
    seen: dict[tuple[str, str], list[float]] = {}
    for findings in per_fold:
        for f in findings:
            seen.setdefault((f.kind, f.feature), []).append(f.value)
    stat = "AUC" if task == "classification" else "|Spearman correlation| with the target"
    out = []
    for (kind, feature), values in sorted(seen.items()):
        extreme = max(values, key=lambda v: abs(v - 0.5)) if kind == "label_leak" else max(values)
        text = _EXPLAIN[kind].format(stat=stat, value=extreme, n=len(values))
        out.append({"kind": kind, "message": f"Feature {feature!r} {text}"})
    return out


def label_guard(y: np.ndarray, groups: np.ndarray) -> dict | None:
    """Guard for labels that never change within most students (student identity would predict them)."""
    order = np.argsort(groups, kind="stable")
    v = np.asarray(y, dtype=float)[order]
    _, starts, counts = np.unique(groups[order], return_index=True, return_counts=True)
    multi = counts >= 2
    if multi.sum() < 5:
        return None
    constant = np.maximum.reduceat(v, starts) == np.minimum.reduceat(v, starts)
    share = float(constant[multi].mean())
    if share <= CONSTANT_LABEL_SHARE:
        return None
    return {"kind": "constant_labels", "message": (
        f"The label is constant within {share:.0%} of the {int(multi.sum())} students with two or more units: "
        "knowing the student nearly gives the label. Student-grouped folds keep this from inflating the scores, "
        "but the effective sample size is the number of students, and features describing the student (rather "
        "than the unit) will carry most of the signal.")}


def fold_balance_guard(sizes_per_repeat: list[np.ndarray]) -> dict | None:
    """Guard for test folds of very different sizes within a repeat."""
    ratios = [float(s.max() / s.min()) for s in sizes_per_repeat if len(s) and s.min() > 0]
    if not ratios or max(ratios) <= FOLD_SIZE_RATIO:
        return None
    return {"kind": "unbalanced_folds", "message": (
        f"Test folds differ in size by a factor of up to {max(ratios):.1f} (largest / smallest, in units): a few "
        "students own many units. Per-fold scores then vary for reasons other than the model; prefer the pooled "
        "out-of-fold metrics and consider fewer folds.")}


def emit(guards: list[dict], stacklevel: int = 3) -> None:
    """Raise one :class:`GuardWarning` per guard entry."""
    for guard in guards:
        warnings.warn(f"[{guard['kind']}] {guard['message']}", GuardWarning, stacklevel=stacklevel)
