"""Student-grouped splits: accepted and refused splitters, and invariants checked against scikit-learn."""

import numpy as np
import pytest
from sklearn.model_selection import (
    GroupKFold,
    GroupShuffleSplit,
    KFold,
    LeaveOneGroupOut,
    LeavePGroupsOut,
    PredefinedSplit,
    ShuffleSplit,
    StratifiedGroupKFold,
    StratifiedKFold,
)

from rulefeat.errors import EvaluationError
from rulefeat.evaluate.splits import (
    Fold,
    assert_grouped,
    check_splitter,
    fold_size_ratio,
    population_folds,
    repeat_seeds,
    student_folds,
)


def _data(n_students=30, seed=0):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(2, 9, n_students)
    groups = np.repeat(np.arange(n_students), sizes)
    y = (rng.random(len(groups)) < 0.3).astype(float)
    return y, groups


@pytest.mark.parametrize("splitter", [GroupKFold(3), StratifiedGroupKFold(4, shuffle=True, random_state=0),
                                      LeaveOneGroupOut(), GroupShuffleSplit(3, random_state=0),
                                      LeavePGroupsOut(2)])
def test_group_aware_splitters_are_accepted(splitter):
    assert check_splitter(splitter) is splitter


@pytest.mark.parametrize("splitter", [KFold(5), StratifiedKFold(5), ShuffleSplit(3), PredefinedSplit([0, 1, 0]),
                                      [(np.arange(3), np.arange(3, 6))], "5", 5.0])
def test_splitters_that_ignore_students_are_refused(splitter):
    with pytest.raises(EvaluationError, match="must never be split across train and test.*GroupKFold"):
        check_splitter(splitter)


def test_int_cv_bounds():
    assert check_splitter(5) == 5
    with pytest.raises(EvaluationError, match="between 2 and 1000 folds"):
        check_splitter(1)
    with pytest.raises(EvaluationError, match="does not split by student"):
        check_splitter(True)


@pytest.mark.parametrize("task", ["classification", "regression"])
def test_every_unit_tested_once_per_repeat_and_groups_disjoint(task):
    y, groups = _data()
    if task == "regression":
        y = np.random.default_rng(1).normal(size=len(y))
    folds = student_folds(y, groups, 5, 3, repeat_seeds(11, 3), task)
    assert len(folds) == 15
    for r in range(3):
        tests = np.concatenate([f.test for f in folds if f.repeat == r])
        np.testing.assert_array_equal(np.sort(tests), np.arange(len(y)))  # each unit exactly once
    for f in folds:
        assert not set(groups[f.train]) & set(groups[f.test])
        np.testing.assert_array_equal(np.sort(np.concatenate([f.train, f.test])), np.arange(len(y)))


def test_int_cv_is_sklearn_stratified_group_kfold_with_derived_seeds():
    # Reference library: the splits equal scikit-learn's StratifiedGroupKFold with the same seed.
    y, groups = _data(seed=2)
    seeds = repeat_seeds(5, 2)
    folds = student_folds(y, groups, 4, 2, seeds, "classification")
    for r in range(2):
        ref = list(StratifiedGroupKFold(4, shuffle=True, random_state=seeds[r]).split(np.zeros(len(y)), y, groups))
        ours = [f for f in folds if f.repeat == r]
        for (tr, te), f in zip(ref, ours, strict=True):
            np.testing.assert_array_equal(tr, f.train)
            np.testing.assert_array_equal(te, f.test)


def test_repeats_differ_and_seeds_are_deterministic():
    assert repeat_seeds(3, 4) == repeat_seeds(3, 4)
    assert len(set(repeat_seeds(3, 4))) == 4
    y, groups = _data()
    folds = student_folds(y, groups, 5, 2, repeat_seeds(3, 2), "classification")
    assert any(not np.array_equal(a.test, b.test) for a, b in zip(folds[:5], folds[5:], strict=True))


def test_user_splitter_is_used_as_given():
    y, groups = _data()
    folds = student_folds(y, groups, GroupKFold(3), 1, repeat_seeds(0, 1), "classification")
    ref = list(GroupKFold(3).split(np.zeros(len(y)), y, groups))
    assert len(folds) == 3
    for (tr, te), f in zip(ref, folds, strict=True):
        np.testing.assert_array_equal(tr, f.train)
        np.testing.assert_array_equal(te, f.test)


def test_repeats_need_a_shuffling_splitter():
    y, groups = _data()
    with pytest.raises(EvaluationError, match="repeats=2 needs a splitter that draws different splits"):
        student_folds(y, groups, LeaveOneGroupOut(), 2, repeat_seeds(0, 2), "classification")
    folds = student_folds(y, groups, GroupShuffleSplit(2, test_size=0.3), 2, repeat_seeds(0, 2), "classification")
    assert len(folds) == 4 and not np.array_equal(folds[0].test, folds[2].test)


def test_more_folds_than_students_is_refused():
    y, groups = _data(n_students=4)
    with pytest.raises(EvaluationError, match="cannot split 4 students"):
        student_folds(y, groups, 5, 1, repeat_seeds(0, 1), "classification")


def test_population_folds_leave_one_out():
    pops = np.array([0, 0, 1, 1, 2, -1, 2])
    folds = population_folds(pops)
    assert [f.fold for f in folds] == [0, 1, 2]
    np.testing.assert_array_equal(folds[1].test, [2, 3])
    np.testing.assert_array_equal(folds[1].train, [0, 1, 4, 5, 6])  # units without a population always train


def test_bug_guard_and_size_ratio():
    groups = np.array([0, 0, 1, 1, 2])
    bad = Fold(0, 0, np.array([0, 2]), np.array([1, 4]))
    with pytest.raises(EvaluationError, match="students in both its training and its test part"):
        assert_grouped([bad], groups)
    good = [Fold(0, 0, np.array([0, 1]), np.array([2, 3, 4])), Fold(0, 1, np.array([2, 3, 4]), np.array([0]))]
    assert_grouped(good, groups)
    assert fold_size_ratio(good) == 3.0
