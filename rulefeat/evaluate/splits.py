"""Student-grouped splits (contract 6): repeated stratified group k-fold, and leave-one-population-out.

Rows of one student are never split across the training and test part of a fold: a detector is meant for students
it has not seen, and a student's own rows would otherwise tell the model about the student rather than the
behaviour.  Only group-aware scikit-learn splitters are accepted; every variant of an evaluation uses the same
splits, so their per-fold scores are paired.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass

import numpy as np
from sklearn.model_selection import (
    GroupKFold,
    GroupShuffleSplit,
    LeaveOneGroupOut,
    LeavePGroupsOut,
    StratifiedGroupKFold,
)

from ..errors import EvaluationError
from ..limits import MAX_FOLDS

__all__ = ["Fold", "GROUP_AWARE", "check_splitter", "repeat_seeds", "student_folds", "population_folds",
           "assert_grouped", "fold_size_ratio"]

GROUP_AWARE = (GroupKFold, StratifiedGroupKFold, LeaveOneGroupOut, GroupShuffleSplit, LeavePGroupsOut)

# Regression targets are stratified on this many quantile bins, so every fold sees the whole range of y.
_REGRESSION_BINS = 5

_ALTERNATIVES = ("an int (stratified group k-fold by student), GroupKFold, StratifiedGroupKFold, "
                 "LeaveOneGroupOut, GroupShuffleSplit or LeavePGroupsOut from sklearn.model_selection")


@dataclass(frozen=True, eq=False)
class Fold:
    """One split: positions (into the units table) of the training and test units.

    ``repeat`` is the repetition of the cross-validation (``-1`` for the transfer view), ``fold`` its index within
    the repetition (for the transfer view: the held-out population's index).
    """

    repeat: int
    fold: int
    train: np.ndarray
    test: np.ndarray


def check_splitter(cv, where: str = "incremental_value"):
    """Return ``cv`` if it is an int >= 2 or a group-aware scikit-learn splitter; raise otherwise."""
    if isinstance(cv, (int, np.integer)) and not isinstance(cv, bool):
        if not 2 <= cv <= MAX_FOLDS:
            raise EvaluationError(f"The 'cv' parameter of {where} must be between 2 and {MAX_FOLDS} folds "
                                  f"(rulefeat.limits.MAX_FOLDS). Got {cv!r} instead.")
        return int(cv)
    if isinstance(cv, GROUP_AWARE):
        return cv
    kind = type(cv).__name__
    raise EvaluationError(
        f"The 'cv' parameter of {where} must keep every student's rows together, but {kind} "
        f"({cv!r:.80}) does not split by student. Rows of one student must never be split across train and test "
        f"(the model would learn the student, not the behaviour). Use {_ALTERNATIVES}."
    )


def repeat_seeds(random_state: int | None, repeats: int) -> list[int]:
    """One split seed per repeat, derived deterministically from ``random_state`` (fresh entropy when None)."""
    children = np.random.SeedSequence(random_state).spawn(repeats)
    return [int(child.generate_state(1)[0]) for child in children]


def _strata(y: np.ndarray, task: str) -> np.ndarray:
    """Classes for classification; quantile bins of y for regression."""
    if task == "classification":
        return y
    edges = np.unique(np.quantile(y, np.linspace(0, 1, _REGRESSION_BINS + 1)[1:-1]))
    return np.searchsorted(edges, y, side="right")


def _splitter_for_repeat(cv, seed: int, repeats: int, where: str):
    if isinstance(cv, int):
        return StratifiedGroupKFold(n_splits=cv, shuffle=True, random_state=seed)
    if repeats == 1:
        return cv
    if not hasattr(cv, "random_state") or getattr(cv, "shuffle", True) is False:
        raise EvaluationError(
            f"{where}: repeats={repeats} needs a splitter that draws different splits per repeat, but "
            f"{type(cv).__name__} gives the same splits every time. Pass repeats=1, an int cv, or a splitter with "
            "shuffle=True and a random_state (e.g. StratifiedGroupKFold(shuffle=True), GroupShuffleSplit)."
        )
    splitter = copy.deepcopy(cv)
    splitter.random_state = seed
    return splitter


def student_folds(y: np.ndarray, groups: np.ndarray, cv, repeats: int, seeds: list[int], task: str,
                  where: str = "incremental_value") -> list[Fold]:
    """Repeated student-grouped splits; the same list serves every variant (paired comparisons).

    With an int ``cv``, each repeat ``r`` is ``StratifiedGroupKFold(cv, shuffle=True, random_state=seeds[r])``
    (stratified on y's classes, or on quantile bins of y for regression), so every unit is tested exactly once per
    repeat.
    """
    strata = _strata(y, task)
    n_students = len(np.unique(groups))
    folds = []
    for r in range(repeats):
        splitter = _splitter_for_repeat(cv, seeds[r], repeats, where)
        try:
            pairs = list(splitter.split(np.zeros((len(y), 1)), strata, groups))
        except ValueError as exc:
            raise EvaluationError(f"{where}: {type(splitter).__name__} cannot split {n_students} students: "
                                  f"{exc} Use fewer folds or more students.") from exc
        folds.extend(Fold(r, k, np.asarray(tr, dtype=np.int64), np.asarray(te, dtype=np.int64))
                     for k, (tr, te) in enumerate(pairs))
    assert_grouped(folds, groups)
    return folds


def population_folds(populations: np.ndarray) -> list[Fold]:
    """Leave-one-population-out: fold ``k`` tests population code ``k`` and trains on all the others.

    ``populations`` holds each unit's population code (-1 for units without one; those are never tested and
    always train).
    """
    codes = np.unique(populations[populations >= 0])
    positions = np.arange(len(populations), dtype=np.int64)
    return [Fold(-1, int(k), positions[populations != k], positions[populations == k]) for k in codes]


def assert_grouped(folds: list[Fold], groups: np.ndarray) -> None:
    """Bug guard: raise if any fold has a student on both sides."""
    for fold in folds:
        shared = np.intersect1d(groups[fold.train], groups[fold.test])
        if len(shared):
            raise EvaluationError(
                f"Internal check failed: fold {fold.fold} of repeat {fold.repeat} has {len(shared)} students in "
                "both its training and its test part. This is a bug in rulefeat; please report it."
            )


def fold_size_ratio(folds: list[Fold]) -> float:
    """Largest over smallest test-fold size (in units) over the given folds."""
    sizes = np.array([len(f.test) for f in folds], dtype=float)
    return float(sizes.max() / sizes.min()) if len(sizes) and sizes.min() > 0 else float("inf")
