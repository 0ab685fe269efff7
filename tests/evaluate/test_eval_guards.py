"""Guards: leak-like, identifier-like and row-order features; constant labels; unbalanced folds."""

import warnings

import numpy as np
import pytest
from sklearn.metrics import roc_auc_score

from rulefeat.errors import RulefeatWarning
from rulefeat.evaluate.guards import (
    GuardWarning,
    column_aucs,
    emit,
    feature_findings,
    fold_balance_guard,
    label_guard,
    merge_findings,
)


def _fold(seed=0, n_students=40, per=6):
    rng = np.random.default_rng(seed)
    groups = np.repeat(np.arange(n_students), per)
    y = (rng.random(len(groups)) < 0.3).astype(float)
    noise = rng.normal(size=(len(groups), 3))
    return y, groups, noise, rng


def test_column_aucs_match_sklearn():
    y, _, X, rng = _fold()
    X[rng.random(X.shape) < 0.1] = np.nan
    ours = column_aucs(X, y)
    for j in range(X.shape[1]):
        filled = np.where(np.isnan(X[:, j]), -1e9, X[:, j])  # missing values rank lowest
        # Reference library: sklearn.metrics.roc_auc_score per column.
        assert ours[j] == pytest.approx(roc_auc_score(y, filled))
    assert np.isnan(column_aucs(X, np.zeros(len(y)))).all()


def test_planted_features_are_found_and_ordinary_ones_are_not():
    y, groups, noise, rng = _fold()
    leak = y + rng.normal(0, 0.05, len(y))                       # built from the label
    student_id = groups * 1.7 + 3.0                              # one value per student, constant within
    row_number = np.arange(len(y), dtype=float)                  # monotone in row order
    reversed_clock = -np.arange(len(y), dtype=float) ** 1.5      # also monotone (decreasing)
    X = np.column_stack([noise, leak, student_id, row_number, reversed_clock])
    names = ["a", "b", "c", "leak", "student_id", "row_number", "clock"]
    found = {(f.kind, f.feature) for f in feature_findings(X, y, groups, names, "classification")}
    assert ("label_leak", "leak") in found
    assert ("student_identifier", "student_id") in found
    assert ("row_order", "row_number") in found and ("row_order", "clock") in found
    assert not {f for k, f in found if f in ("a", "b", "c")}
    inverted = feature_findings(np.column_stack([-leak]), y, groups, ["inv"], "classification")
    assert [f.kind for f in inverted] == ["label_leak"] and inverted[0].value < 0.05


def test_regression_leak_uses_rank_correlation():
    rng = np.random.default_rng(1)
    groups = np.repeat(np.arange(30), 3)
    y = rng.normal(size=90)
    X = np.column_stack([y * 2 + 1e-3 * rng.normal(size=90), rng.normal(size=90)])
    found = feature_findings(X, y, groups, ["copy", "noise"], "regression")
    assert [(f.kind, f.feature) for f in found] == [("label_leak", "copy")]


def test_student_features_are_not_identifiers_when_each_student_has_one_unit():
    rng = np.random.default_rng(2)
    groups = np.arange(50)
    X = rng.normal(size=(50, 2))
    y = (rng.random(50) < 0.5).astype(float)
    assert not [f for f in feature_findings(X, y, groups, ["a", "b"], "classification")
                if f.kind == "student_identifier"]


def test_merge_findings_one_entry_per_feature_with_counts():
    y, groups, noise, rng = _fold()
    leak = np.column_stack([y + rng.normal(0, 0.01, len(y))])
    per_fold = [feature_findings(leak, y, groups, ["leak"], "classification") for _ in range(3)]
    merged = merge_findings(per_fold, "classification")
    assert len(merged) == 1 and merged[0]["kind"] == "label_leak"
    assert "'leak' alone reaches AUC" in merged[0]["message"] and "on 3 training fold(s)" in merged[0]["message"]


def test_label_and_fold_guards():
    groups = np.repeat(np.arange(10), 4)
    constant = np.repeat(np.arange(10) % 2, 4).astype(float)
    g = label_guard(constant, groups)
    assert g["kind"] == "constant_labels" and "100% of the 10 students" in g["message"]
    varying = np.tile([0, 1, 0, 0], 10).astype(float)
    assert label_guard(varying, groups) is None
    assert label_guard(constant[:4], groups[:4]) is None            # too few students to judge
    assert fold_balance_guard([np.array([10, 12, 11])]) is None
    b = fold_balance_guard([np.array([10, 12]), np.array([5, 30])])
    assert b["kind"] == "unbalanced_folds" and "factor of up to 6.0" in b["message"]


def test_emit_raises_guard_warnings():
    assert issubclass(GuardWarning, RulefeatWarning)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        emit([{"kind": "label_leak", "message": "x"}, {"kind": "row_order", "message": "y"}])
    assert [type(w.message) for w in caught] == [GuardWarning, GuardWarning]
    assert str(caught[0].message) == "[label_leak] x"
