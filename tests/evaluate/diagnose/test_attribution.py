"""Tests of the SHAP utilities: TreeSHAP on LightGBM, grouping by rule, dependence data and plot."""

from __future__ import annotations

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure

from rulefeat.errors import EvaluationError
from rulefeat.evaluate.diagnose.attribution import (
    MINED,
    _positive_class,
    dependence_data,
    group_shap,
    shap_by_rule,
    tree_shap,
)
from rulefeat.report.diagnose_figures import plot_dependence

SETTINGS = {"n_estimators": 25, "num_leaves": 7, "min_child_samples": 10, "deterministic": True,
            "force_row_wise": True, "n_jobs": 1, "random_state": 0, "verbose": -1}


@pytest.fixture(scope="module")
def units():
    """A small units table: two rule columns, two mined columns and a categorical skill."""
    rng = np.random.default_rng(0)
    n = 400
    X = pd.DataFrame({
        "skim__rate": rng.random(n),
        "skim__any": rng.integers(0, 2, n).astype(float),
        "n_attempts": rng.poisson(5, n).astype(float),
        "mean_gap": rng.gamma(2.0, 3.0, n),
        "skill": pd.Categorical(rng.choice(["fractions", "ratios", "slopes"], n)),
    }, index=pd.RangeIndex(1000, 1000 + n))
    eta = 2 * X["skim__rate"] - 0.3 * X["n_attempts"] + 1.2 * (X["skill"] == "ratios") + rng.normal(size=n)
    return X, (eta > eta.median()).astype(int), eta + 0.5 * X["skim__any"]


@pytest.fixture(scope="module")
def classifier(units):
    X, y, _ = units
    return lgb.LGBMClassifier(**SETTINGS).fit(X, y)


def test_classifier_local_accuracy_and_lightgbm_contributions(units, classifier):
    # Local accuracy (Lundberg & Lee 2017) and LightGBM's own pred_contrib (reference library;
    # last column = expected value), both in log-odds.
    X, _, _ = units
    values, expected = tree_shap(classifier, X)
    assert list(values.columns) == list(X.columns) and values.index.equals(X.index)
    raw = classifier.predict(X, raw_score=True)
    np.testing.assert_allclose(expected + values.sum(axis=1).to_numpy(), raw, atol=1e-9)
    contrib = classifier.booster_.predict(X, pred_contrib=True)
    np.testing.assert_allclose(values.to_numpy(), contrib[:, :-1], atol=1e-12)
    np.testing.assert_allclose(contrib[:, -1], expected, atol=1e-12)
    # The categorical skill is used by the trees and receives attribution.
    assert values["skill"].abs().mean() > 0.1


def test_booster_input_equals_classifier(units, classifier):
    X, _, _ = units
    a, ea = tree_shap(classifier, X)
    b, eb = tree_shap(classifier.booster_, X)
    pd.testing.assert_frame_equal(a, b)
    assert ea == eb


def test_regressor_local_accuracy(units):
    # Local accuracy and LightGBM pred_contrib (reference library) for a regressor.
    X, _, y = units
    model = lgb.LGBMRegressor(**SETTINGS).fit(X, y)
    values, expected = tree_shap(model, X)
    np.testing.assert_allclose(expected + values.sum(axis=1).to_numpy(), model.predict(X), atol=1e-9)
    np.testing.assert_allclose(values.to_numpy(), model.booster_.predict(X, pred_contrib=True)[:, :-1],
                               atol=1e-12)


def _path_expectation(node: dict, x: np.ndarray, known: set[int]) -> float:
    """E[f(x) | x_S] of one tree: follow x at splits on known features, else average by cover."""
    if "leaf_value" in node:
        return node["leaf_value"]
    left, right = node["left_child"], node["right_child"]
    if node["split_feature"] in known:
        return _path_expectation(left if x[node["split_feature"]] <= node["threshold"] else right, x, known)
    count = [child.get("internal_count", child.get("leaf_count")) for child in (left, right)]
    return (count[0] * _path_expectation(left, x, known)
            + count[1] * _path_expectation(right, x, known)) / sum(count)


def test_regressor_matches_brute_force_shapley_values():
    # Our own brute-force reference: the exact Shapley values of the cover-weighted conditional expectation that
    # path-dependent TreeSHAP explains (Lundberg, Erion & Lee 2018, arXiv:1802.03888, Algorithm 1),
    # enumerated over all feature subsets from the dumped trees.
    from itertools import combinations
    from math import factorial

    rng = np.random.default_rng(1)
    X = pd.DataFrame(rng.normal(size=(200, 3)), columns=["a", "b", "c"])
    y = X.a * X.b + np.sin(X.c) + 0.1 * rng.normal(size=200)
    model = lgb.LGBMRegressor(**{**SETTINGS, "n_estimators": 6}).fit(X, y)
    trees = [t["tree_structure"] for t in model.booster_.dump_model()["tree_info"]]
    values, expected = tree_shap(model, X.iloc[:5])
    m = X.shape[1]
    for row, x in enumerate(X.iloc[:5].to_numpy()):
        def v(known, x=x):
            return sum(_path_expectation(tree, x, set(known)) for tree in trees)
        for i in range(m):
            others = [j for j in range(m) if j != i]
            phi = sum(factorial(len(s)) * factorial(m - len(s) - 1) / factorial(m) * (v((*s, i)) - v(s))
                      for size in range(m) for s in combinations(others, size))
            assert values.iloc[row, i] == pytest.approx(phi, abs=1e-9)
    assert expected == pytest.approx(sum(_path_expectation(tree, np.zeros(m), set()) for tree in trees), abs=1e-9)


def test_unnamed_matrix_model(units):
    X, y, _ = units
    numeric = X.drop(columns="skill").to_numpy()
    model = lgb.LGBMClassifier(**SETTINGS).fit(numeric, y)
    values, expected = tree_shap(model, numeric)
    assert list(values.columns) == [f"Column_{j}" for j in range(4)]
    np.testing.assert_allclose(expected + values.sum(axis=1), model.predict(numeric, raw_score=True), atol=1e-9)


def test_subsample_is_seeded_sorted_and_equal_to_full_rows(units, classifier):
    X, _, _ = units
    full, _ = tree_shap(classifier, X)
    a, _ = tree_shap(classifier, X, sample_size=50, random_state=3)
    b, _ = tree_shap(classifier, X, sample_size=50, random_state=3)
    c, _ = tree_shap(classifier, X, sample_size=50, random_state=4)
    pd.testing.assert_frame_equal(a, b)
    assert len(a) == 50 and a.index.is_monotonic_increasing and a.index.is_unique
    assert not a.index.equals(c.index)
    pd.testing.assert_frame_equal(a, full.loc[a.index])  # path-dependent SHAP of a row ignores other rows
    everything, _ = tree_shap(classifier, X, sample_size=10_000, random_state=3)
    assert everything.index.equals(X.index)


@pytest.mark.parametrize("raw, expected", [
    ([-np.ones((3, 2)), np.ones((3, 2))], np.array([-0.5, 0.5])),  # older shap: [negative, positive]
    (np.stack([-np.ones((3, 2)), np.ones((3, 2))], axis=2), np.array([-0.5, 0.5])),  # (rows, features, 2)
    (np.ones((3, 2)), 0.5),  # recent shap: positive class only, scalar base value
    (np.ones((3, 2)), np.array([0.5])),
])
def test_positive_class_handles_shap_output_shapes(raw, expected):
    values, base = _positive_class(raw, expected, 2)
    np.testing.assert_array_equal(values, np.ones((3, 2)))
    assert base == 0.5


def test_positive_class_refuses_unknown_shape():
    with pytest.raises(EvaluationError, match=r"shap returned values of shape \(3, 5\); expected \(rows, 2\)"):
        _positive_class(np.ones((3, 5)), 0.0, 2)


def test_tree_shap_bad_input(units, classifier):
    X, y, _ = units
    with pytest.raises(EvaluationError, match=r"the LightGBM model is not fitted"):
        tree_shap(lgb.LGBMClassifier(), X)
    with pytest.raises(EvaluationError, match=r"must be a fitted LGBMClassifier, .* got LogisticRegression"):
        from sklearn.linear_model import LogisticRegression
        tree_shap(LogisticRegression(), X)
    three = lgb.LGBMClassifier(**{**SETTINGS, "n_estimators": 3}).fit(X, X["skill"].cat.codes)
    with pytest.raises(EvaluationError, match=r"3 outputs per iteration \(multiclass\)"):
        tree_shap(three, X)
    with pytest.raises(EvaluationError, match=r"missing \['mean_gap'\], unexpected \['mean_gapp'\]\. "
                                              r"Did you mean 'mean_gap'\?"):
        tree_shap(classifier, X.rename(columns={"mean_gap": "mean_gapp"}))
    with pytest.raises(EvaluationError, match=r"in another order; use X\["):
        tree_shap(classifier, X[X.columns[::-1]])
    with pytest.raises(EvaluationError, match=r"'X' must have shape \(n, 5\); got \(400, 4\)"):
        tree_shap(classifier, X.drop(columns="skill").to_numpy())
    for bad in (0, 2.5, True):
        with pytest.raises(EvaluationError, match=r"'sample_size' must be None or a positive integer"):
            tree_shap(classifier, X, sample_size=bad)
    with pytest.raises(EvaluationError, match=r"'random_state' must be None, an int"):
        tree_shap(classifier, X, sample_size=5, random_state="seed")


# -- grouping ------------------------------------------------------------------------------------------
@pytest.fixture
def table():
    # Hand-made SHAP values: |.| column totals skim__rate 4, skim__any 1, hasty__rate 2, n_attempts 3.
    return pd.DataFrame({"skim__rate": [1.0, -3.0], "skim__any": [0.5, 0.5], "hasty__rate": [-1.0, -1.0],
                         "n_attempts": [2.0, -1.0]})


def test_group_shap_arithmetic(table):
    out = group_shap(table, {"skim": ["skim__rate", "skim__any"], "counts": ["n_attempts"]})
    assert list(out.index) == ["skim", "counts", "other"]
    assert out["n_features"].tolist() == [2, 1, 1]
    assert out["total_abs"].tolist() == [5.0, 3.0, 2.0]
    assert out["share"].tolist() == [0.5, 0.3, 0.2]
    assert out["mean_abs"].tolist() == [2.5, 1.5, 1.0]
    # Net per-row group sums: skim 1.5 and -2.5 -> mean |.| 2; counts 2 and -1 -> 1.5; other 1 and 1 -> 1.
    assert out["mean_abs_net"].tolist() == [2.0, 1.5, 1.0]


def test_group_shap_complete_groups_and_zero_table(table):
    out = group_shap(table, {"all": list(table.columns)}, rest=None)
    assert list(out.index) == ["all"] and out["share"].tolist() == [1.0]
    zero = group_shap(table * 0.0, {"skim": ["skim__rate"]})
    assert zero["share"].isna().all() and zero["total_abs"].tolist() == [0.0, 0.0]


@pytest.mark.parametrize("groups, rest, message", [
    ({"skim": ["skim_rate"]}, "other", r"group 'skim' names column 'skim_rate', which 'values' lacks\. "
                                       r"Did you mean 'skim__rate'\?"),
    ({"a": ["n_attempts"], "b": ["n_attempts"]}, "other", r"column 'n_attempts' is in both 'a' and 'b'"),
    ({"skim": ["skim__rate"]}, None, r"columns \['skim__any', 'hasty__rate', 'n_attempts'\] are in no group"),
    ({"other": ["skim__rate"]}, "other", r"'rest' name 'other' is also a group name"),
    ({"skim": "skim__rate"}, "other", r"group 'skim' must list column names; got the string"),
])
def test_group_shap_bad_groups(table, groups, rest, message):
    with pytest.raises(EvaluationError, match=message):
        group_shap(table, groups, rest=rest)


def test_group_shap_needs_a_table():
    with pytest.raises(EvaluationError, match=r"'values' must be the non-empty DataFrame returned by tree_shap"):
        group_shap(np.ones((2, 2)), {})


def test_shap_by_rule(table):
    out = shap_by_rule(table, ["skim", "hasty"])
    assert list(out.index) == ["skim", "hasty", MINED]
    assert out["total_abs"].tolist() == [5.0, 2.0, 3.0] and out["share"].sum() == pytest.approx(1.0)
    # Longest rule name wins: 'skim__fast__rate' is rule 'skim__fast', not rule 'skim' with summary 'fast__rate'.
    wide = table.assign(**{"skim__fast__rate": [0.25, 0.25]})
    out = shap_by_rule(wide, ["skim", "skim__fast", "hasty"])
    assert out.loc["skim__fast", "n_features"] == 1 and out.loc["skim", "n_features"] == 2


@pytest.mark.parametrize("rules, message", [
    (["skim", "hastey"], r"no '<rule>__<summary>' column for rules \['hastey'\]\. Did you mean 'hasty'\?"),
    (["skim", MINED], r"a rule may not be called 'mined'"),
    (["skim", "skim"], r"must be a list of distinct rule names"),
    ("skim", r"must be a list of distinct rule names"),
])
def test_shap_by_rule_bad_rules(table, rules, message):
    with pytest.raises(EvaluationError, match=message):
        shap_by_rule(table, rules)


# -- dependence ----------------------------------------------------------------------------------------
def test_dependence_data_follows_subsample(units, classifier):
    X, _, _ = units
    values, _ = tree_shap(classifier, X, sample_size=40, random_state=1)
    data = dependence_data(values, X, "skill")
    assert data.index.equals(values.index) and isinstance(data["value"].dtype, pd.CategoricalDtype)
    assert data["value"].tolist() == X.loc[values.index, "skill"].tolist()
    np.testing.assert_array_equal(data["shap"], values["skill"])


def test_dependence_data_bad_input(table):
    X = pd.DataFrame({"skim__rate": [0.1, 0.2]}, index=[0, 1])
    with pytest.raises(EvaluationError, match=r"'values' has no column 'skim_rate'\. Did you mean 'skim__rate'\?"):
        dependence_data(table, X, "skim_rate")
    with pytest.raises(EvaluationError, match=r"'X' has no column 'n_attempts'"):
        dependence_data(table, X, "n_attempts")
    with pytest.raises(EvaluationError, match=r"1 rows of 'values' are not in 'X' \(e\.g\. index 1\)"):
        dependence_data(table, X.iloc[:1], "skim__rate")
    with pytest.raises(EvaluationError, match=r"'X' must be the DataFrame the values explain"):
        dependence_data(table, X.to_numpy(), "skim__rate")


def test_plot_dependence_numeric_and_categorical(units, classifier):
    X, _, _ = units
    values, _ = tree_shap(classifier, X, sample_size=60, random_state=2)
    fig = plot_dependence(values, X, "skim__rate")
    assert isinstance(fig, Figure) and fig.canvas.get_default_filetype() == "png"
    (ax,) = fig.axes
    assert ax.get_xlabel() == "skim__rate" and len(ax.collections[0].get_offsets()) == 60
    cat = plot_dependence(values, X, "skill")
    labels = [t.get_text() for t in cat.axes[0].get_xticklabels()]
    assert labels == ["fractions", "ratios", "slopes"]
    offsets = cat.axes[0].collections[0].get_offsets()
    again = plot_dependence(values, X, "skill").axes[0].collections[0].get_offsets()
    np.testing.assert_array_equal(offsets, again)  # seeded jitter


def test_plot_dependence_counts_missing_values(units, classifier):
    X, _, _ = units
    values, _ = tree_shap(classifier, X, sample_size=30, random_state=5)
    holes = X.copy()
    holes.loc[values.index[:4], "mean_gap"] = np.nan
    fig = plot_dependence(values, holes, "mean_gap")
    assert "(4 missing not shown)" in fig.axes[0].get_title()
    assert len(fig.axes[0].collections[0].get_offsets()) == 26
