"""RuleFeatures: summaries per unit, leakage safety, and the scikit-learn contract."""

import copy
import pickle
import warnings

import joblib
import numpy as np
import pandas as pd
import pytest
from _sklearn_checks import EXPECTED_FAILURES
from sklearn.base import clone
from sklearn.compose import ColumnTransformer
from sklearn.ensemble import HistGradientBoostingClassifier
from sklearn.model_selection import GridSearchCV, GroupKFold, cross_validate
from sklearn.pipeline import FeatureUnion, Pipeline
from sklearn.utils.estimator_checks import parametrize_with_checks

from rulefeat import (
    EventLog,
    LogRepairWarning,
    ParameterError,
    Rule,
    RuleCheckError,
    RuleFeatures,
    RuleSet,
    UnitError,
)
from rulefeat.errors import RulefeatWarning

HINT = Rule("hint", when="action == 'hint'", report=["count", "rate", "any", "longest_streak",
                                                       "first_position", "first_seconds"])
SLOW = Rule("slow", when="duration > typical(duration, per='step', q=0.5)", report=["count"])


def small_log():
    #            a: h  h  a  h   b: a  a      c: h
    data = pd.DataFrame({
        "student": ["a", "a", "a", "a", "b", "b", "c"],
        "time": [0.0, 2.0, 3.0, 10.0, 0.0, 4.0, 5.0],
        "action": ["hint", "hint", "attempt", "hint", "attempt", "attempt", "hint"],
        "step": ["x", "x", "x", "y", "x", "x", "y"],
        "duration": [2.0, 1.0, 7.0, 3.0, 4.0, 1.0, 9.0],
    })
    return EventLog(data)


LOG = small_log()


def hint_features(X):
    return RuleFeatures(rules=[HINT], log=LOG, unit="window").fit(X).transform(X)


# -- hand-computed summaries ---------------------------------------------------------------------
WINDOWS = pd.DataFrame({"student": ["a", "a", "b", "c"], "start": [0.0, 1.0, 0.0, 6.0],
                        "end": [11.0, 3.5, 5.0, 8.0]})
EXPECTED = {  # per window: a[0,11) = h h a h ; a[1,3.5) = h a ; b[0,5) = a a ; c[6,8) = nothing
    "hint__count": [3, 1, 0, 0],
    "hint__rate": [0.75, 0.5, 0.0, np.nan],
    "hint__any": [1, 1, 0, 0],
    "hint__longest_streak": [2, 1, 0, 0],
    "hint__first_position": [1, 1, np.nan, np.nan],
    "hint__first_seconds": [0.0, 1.0, np.nan, np.nan],
}


@pytest.mark.parametrize("column", sorted(EXPECTED))
def test_summaries_by_hand(column):
    with pytest.warns(RulefeatWarning, match="cover no events"):
        out = hint_features(WINDOWS)
    np.testing.assert_array_equal(out[column].to_numpy(), np.array(EXPECTED[column], dtype=float))


def test_feature_names_and_output_alignment():
    X = WINDOWS.iloc[:3].set_index(pd.Index([10, 20, 30]))
    est = RuleFeatures(rules=[HINT], log=LOG).fit(X)
    out = est.transform(X)
    assert list(out.columns) == list(est.get_feature_names_out())
    assert est.get_feature_names_out().dtype == object
    assert list(out.index) == [10, 20, 30]
    assert est.n_features_in_ == 3 and list(est.feature_names_in_) == ["student", "start", "end"]


def test_select_outputs_only_chosen_rules_and_refuses_unknown():
    ref = Rule("after_hint", when="prev(hint) and action == 'attempt'", report=["count"])
    X = pd.DataFrame({"student": ["a", "b"]})
    est = RuleFeatures(rules=[HINT, ref], log=LOG, unit="student", select=["after_hint"]).fit(X)
    assert list(est.get_feature_names_out()) == ["after_hint__count"]
    assert est.transform(X)["after_hint__count"].tolist() == [1.0, 0.0]
    with pytest.raises(RuleCheckError, match="Did you mean 'after_hint'"):
        RuleFeatures(rules=[HINT, ref], log=LOG, unit="student", select=["after_hnt"]).fit(X)


def test_rules_from_toml_text_and_file(tmp_path):
    text = '[rules.hint]\nwhen = "action == \'hint\'"\nreport = ["count"]\n'
    path = tmp_path / "rules.toml"
    path.write_text(text)
    X = pd.DataFrame({"student": ["a", "c"]})
    for rules in (text, str(path), path, RuleSet.from_toml(text)):
        out = RuleFeatures(rules=rules, log=LOG, unit="student").fit_transform(X)
        assert out["hint__count"].tolist() == [3.0, 1.0]


# -- leakage: fitted norms come from training students only --------------------------------------
def test_norms_depend_only_on_training_students():
    train = pd.DataFrame({"student": ["a", "b"]})
    base = RuleFeatures(rules=[SLOW], log=LOG, unit="student").fit(train)
    changed = small_log().to_frame(derived=False).reset_index(drop=True)
    changed.loc[changed["student"] == "c", "duration"] = 500.0
    changed.loc[changed["student"] == "c", "step"] = "x"
    other_log = EventLog(changed)
    other = RuleFeatures(rules=[SLOW], log=other_log, unit="student").fit(train)
    a, b = base.program_.norms_, other.program_.norms_
    assert a.keys() == b.keys()
    for key in a:
        np.testing.assert_equal(a[key], b[key])
    pd.testing.assert_frame_equal(base.transform(train), other.transform(train))


# -- invariances and sharing ----------------------------------------------------------------------
def test_row_subset_and_order_invariance_and_fit_transform():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RulefeatWarning)
        est = RuleFeatures(rules=[HINT, SLOW], log=LOG).fit(WINDOWS)
        full = est.transform(WINDOWS)
        shuffled = WINDOWS.iloc[[3, 1, 0, 2]]
        pd.testing.assert_frame_equal(est.transform(shuffled), full.loc[shuffled.index])
        pd.testing.assert_frame_equal(est.transform(WINDOWS.iloc[[1]]), full.iloc[[1]])
        pd.testing.assert_frame_equal(RuleFeatures(rules=[HINT, SLOW], log=LOG).fit_transform(WINDOWS), full)


def test_clone_shares_the_log_and_pickle_round_trips(tmp_path):
    est = RuleFeatures(rules=[HINT, SLOW], log=LOG, unit="student")
    assert clone(est).log is LOG
    X = pd.DataFrame({"student": ["a", "b", "c"]})
    est.fit(X)
    assert copy.deepcopy(est).log is LOG
    # A fitted transformer pickles without its log (contract 8); bound again, it gives the same output.
    again = pickle.loads(pickle.dumps(est))
    assert again.log is None and est.log is LOG
    pd.testing.assert_frame_equal(again.bind(LOG).transform(X), est.transform(X))
    joblib.dump(est, tmp_path / "rf.joblib")
    pd.testing.assert_frame_equal(joblib.load(tmp_path / "rf.joblib").bind(LOG).transform(X), est.transform(X))


def test_set_output_pandas_and_default():
    X = pd.DataFrame({"student": ["a", "b"]})
    for how in ("pandas", "default"):
        out = RuleFeatures(rules=[HINT], log=LOG, unit="student").set_output(transform=how).fit_transform(X)
        assert isinstance(out, pd.DataFrame) and out.columns[0] == "hint__count"


# -- inside scikit-learn compositions -----------------------------------------------------------------
def sim_like(n_students=24, seed=0):
    rng = np.random.default_rng(seed)
    rows = []
    for s in range(n_students):
        t = 0.0
        for _ in range(30):
            t += rng.exponential(5.0)
            rows.append((f"s{s:02d}", t, "hint" if rng.random() < 0.3 + 0.02 * s else "attempt",
                         f"k{rng.integers(3)}"))
    data = pd.DataFrame(rows, columns=["student", "time", "action", "step"])
    log = EventLog(data)
    X = pd.DataFrame({"student": data["student"].unique()}).loc[lambda d: d.index.repeat(2)].reset_index(drop=True)
    X["start"] = np.where(X.index % 2 == 0, 0.0, 60.0)
    X["end"] = X["start"] + 60.0
    y = (np.arange(len(X)) // 2 >= n_students // 2).astype(int)
    return log, X, y


def test_pipeline_feature_union_column_transformer_grid_search_and_grouped_cv():
    log, X, y = sim_like()
    groups = X["student"]
    rf = RuleFeatures(rules=[HINT, Rule("fast", when="gap < 2s")], log=log)
    pipe = Pipeline([("rules", rf), ("model", HistGradientBoostingClassifier(max_iter=10))])
    scores = cross_validate(pipe, X, y, groups=groups, cv=GroupKFold(n_splits=3))
    assert len(scores["test_score"]) == 3
    union = FeatureUnion([("a", RuleFeatures(rules=[HINT], log=log)), ("b", RuleFeatures(rules=[SLOW], log=log))])
    assert union.fit_transform(X).shape == (len(X), 7)
    ct = ColumnTransformer([("rules", RuleFeatures(rules=[HINT], log=log), ["student", "start", "end"])])
    assert ct.fit_transform(X).shape == (len(X), 6)
    grid = GridSearchCV(Pipeline([("rules", rf), ("model", HistGradientBoostingClassifier(max_iter=10))]),
                        {"rules__select": [["hint"], ["fast"]]}, cv=GroupKFold(n_splits=3))
    grid.fit(X, y, groups=groups)
    assert grid.best_params_["rules__select"] in (["hint"], ["fast"])


# -- bad configuration ------------------------------------------------------------------------------
@pytest.mark.parametrize(("params", "error", "message"), [
    ({"unit": "windw"}, ParameterError, r"'unit' parameter of RuleFeatures must be one of"),
    ({"missing_students": "skip"}, ParameterError, r"'missing_students' parameter of RuleFeatures"),
    ({"min_count": 0}, ParameterError, r"'min_count' parameter of RuleFeatures must be a positive integer"),
    ({"log": "events.csv"}, ParameterError, r"'log' parameter of RuleFeatures must be a rulefeat.EventLog"),
    ({"rules": 42}, RuleCheckError, r"'rules' must be a RuleSet"),
    ({"select": "hint"}, ParameterError, r"'select' parameter of RuleFeatures"),
])
def test_bad_parameters(params, error, message):
    kw = {"rules": [HINT], "log": LOG, "unit": "student", **params}
    with pytest.raises(error, match=message):
        RuleFeatures(**kw).fit(pd.DataFrame({"student": ["a"]}))


def test_bad_units_table_and_unknown_students():
    est = RuleFeatures(rules=[HINT], log=LOG, unit="student")
    with pytest.raises(UnitError, match="must be a pandas DataFrame of unit keys"):
        est.fit(np.zeros((3, 1)))
    with pytest.raises(UnitError, match="X has no rows"):
        est.fit(pd.DataFrame({"student": []}))
    est.fit(pd.DataFrame({"student": ["a"]}))
    with pytest.raises(UnitError, match=r"not in the event log \(row 0: 'zed'\)"):
        est.transform(pd.DataFrame({"student": ["zed"]}))
    lenient = RuleFeatures(rules=[HINT], log=LOG, unit="student", missing_students="empty").fit(
        pd.DataFrame({"student": ["a"]}))
    with pytest.warns(RulefeatWarning, match="cover no events"):
        out = lenient.transform(pd.DataFrame({"student": ["zed", "a"]}))
    assert out["hint__count"].tolist() == [0.0, 3.0]


def test_transform_before_fit_raises_not_fitted():
    from sklearn.exceptions import NotFittedError
    with pytest.raises(NotFittedError):
        RuleFeatures(rules=[HINT], log=LOG).transform(WINDOWS)


# -- scikit-learn's own checks -----------------------------------------------------------------------------


@parametrize_with_checks([RuleFeatures(rules=[HINT], log=LOG, unit="student")],
                         expected_failed_checks=lambda est: EXPECTED_FAILURES)
def test_sklearn_compatible(estimator, check):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        check(estimator)
