"""LogFeatures as a scikit-learn transformer: contracts, leakage, selection, missing data, bad input."""

from __future__ import annotations

import copy
import pickle
import warnings

import numpy as np
import pandas as pd
import pytest
from _sklearn_checks import EXPECTED_FAILURES
from sklearn.base import clone
from sklearn.ensemble import HistGradientBoostingClassifier
from sklearn.exceptions import NotFittedError
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import GroupKFold, cross_validate
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.utils.estimator_checks import parametrize_with_checks

from rulefeat import EventLog
from rulefeat.errors import ParameterError, RulefeatWarning, UnitError
from rulefeat.mined import FAMILIES
from rulefeat.mined.transformer import LogFeatures

FAST_BKT = {"n_restarts": 1, "max_iter": 40}


def make_events(n_students=40, per_student=120, seed=0, hint_levels=True) -> pd.DataFrame:
    """A random log: students alternate attempts and hints on steps of 4 skills, times in seconds."""
    rng = np.random.default_rng(seed)
    n = n_students * per_student
    student = np.repeat([f"s{i:03d}" for i in range(n_students)], per_student)
    gaps = rng.exponential(12.0, n)
    gaps[rng.random(n) < 0.01] = 4000.0  # a few session breaks
    time = np.cumsum(gaps)
    action = np.where(rng.random(n) < 0.3, "hint", "attempt")
    step = rng.integers(0, 24, n)
    events = pd.DataFrame({
        "student": student, "time": time, "action": action,
        "correct": pd.array(np.where(action == "attempt", rng.random(n) < 0.65, None), dtype="boolean"),
        "step": [f"st{k}" for k in step], "skill": [f"k{k // 6}" for k in step],
        "problem": [f"p{k // 3}" for k in step],
        "duration": np.round(rng.lognormal(2.0, 0.6, n), 3),
    })
    if hint_levels:
        events["hint_level"] = np.where(action == "hint", rng.integers(1, 4, n), np.nan)
        events["hint_levels_total"] = 3.0
    return events


def quiet_log(events, **options) -> EventLog:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RulefeatWarning)
        return EventLog(events, **options)


def windows_of(events: pd.DataFrame, per_student=4) -> pd.DataFrame:
    """``per_student`` consecutive windows per student, each covering about as many events."""
    rows = []
    for student, times in events.groupby("student", sort=True)["time"]:
        cuts = np.quantile(times.to_numpy(), np.linspace(0, 1, per_student + 1))
        rows += [(student, cuts[k], cuts[k + 1]) for k in range(per_student)]
    return pd.DataFrame(rows, columns=["student", "start", "end"])


@pytest.fixture(scope="module")
def events():
    return make_events()


@pytest.fixture(scope="module")
def log(events):
    return quiet_log(events)


@pytest.fixture(scope="module")
def windows(events):
    X = windows_of(events)
    X["label"] = np.random.default_rng(1).integers(0, 2, len(X))
    return X


def features(log, **params) -> LogFeatures:
    return LogFeatures(log, random_state=0, bkt_options=FAST_BKT, **params)


@pytest.fixture(scope="module")
def fitted(log, windows):
    return features(log).fit(windows)


# ----------------------------------------------------------------------------- sklearn contract
def test_feature_names_are_family_prefixed_and_match_columns(fitted, windows):
    out = fitted.transform(windows)
    names = fitted.get_feature_names_out()
    assert names.dtype == object and list(names) == list(out.columns)
    assert all(n.split("__")[0] in FAMILIES for n in names)
    assert "timing__duration_mean_norm_step" in names
    assert out.index.equals(windows.index)
    assert fitted.n_features_in_ == windows.shape[1]


def test_fit_transform_equals_fit_then_transform(log, windows, fitted):
    once = features(log).fit_transform(windows)
    pd.testing.assert_frame_equal(once, fitted.transform(windows))


def test_transform_is_row_order_and_subset_invariant(fitted, windows):
    full = fitted.transform(windows)
    perm = np.random.default_rng(3).permutation(len(windows))
    shuffled = fitted.transform(windows.iloc[perm])
    pd.testing.assert_frame_equal(shuffled, full.iloc[perm])
    subset = fitted.transform(windows.iloc[5:17])
    pd.testing.assert_frame_equal(subset, full.iloc[5:17])


def test_clone_and_pickle_share_the_log_and_reproduce_output(log, windows, fitted):
    assert copy.deepcopy(log) is log
    assert clone(fitted).log is log
    assert copy.deepcopy(fitted).log is log
    # A fitted transformer pickles without its log (contract 8); bound again, it gives the same output.
    restored = pickle.loads(pickle.dumps(fitted))
    assert restored.log is None and fitted.log is log
    pd.testing.assert_frame_equal(restored.bind(log).transform(windows), fitted.transform(windows))


def test_set_output_pandas_and_not_fitted(log, windows):
    feats = features(log, families=["volume"]).set_output(transform="pandas")
    out = feats.fit_transform(windows)
    assert isinstance(out, pd.DataFrame) and out.shape[0] == len(windows)
    with pytest.raises(NotFittedError):
        features(log).transform(windows)


def test_same_random_state_same_mastery(log, windows):
    a = features(log, families=["mastery"]).fit_transform(windows)
    b = features(log, families=["mastery"]).fit_transform(windows)
    pd.testing.assert_frame_equal(a, b)


@pytest.mark.filterwarnings("ignore::rulefeat.errors.RulefeatWarning")
def test_pipelines_and_grouped_cross_validation(log, windows):
    y, groups = windows["label"].to_numpy(), windows["student"].to_numpy()
    X = windows[["student", "start", "end"]]
    linear = make_pipeline(features(log, max_features=20), SimpleImputer(), StandardScaler(),
                           LogisticRegression(max_iter=200))
    for model in (linear, make_pipeline(features(log), HistGradientBoostingClassifier(max_iter=10))):
        scores = cross_validate(model, X, y, groups=groups, cv=GroupKFold(n_splits=3), error_score="raise")
        assert np.all(np.isfinite(scores["test_score"]))


# ----------------------------------------------------------------------------- leakage (contract 2)
def test_fitted_state_and_training_rows_ignore_test_students(events, windows):
    test_students = events["student"].unique()[-10:]
    changed = events.copy()
    is_test = changed["student"].isin(test_students).to_numpy()
    rng = np.random.default_rng(9)
    changed.loc[is_test, "duration"] = changed.loc[is_test, "duration"] * 7.0
    changed.loc[is_test, "correct"] = pd.array(
        np.where(changed.loc[is_test, "action"] == "attempt", rng.random(is_test.sum()) < 0.1, None),
        dtype="boolean")
    train = windows[~windows["student"].isin(test_students)]
    a = features(quiet_log(events)).fit(train)
    b = features(quiet_log(changed)).fit(train)
    for key, norm in a.family_state_["timing"].norms.items():
        other = b.family_state_["timing"].norms[key]
        np.testing.assert_array_equal(norm.table, other.table, err_msg=str(key))
    assert a.family_state_["timing"].pause_seconds == b.family_state_["timing"].pause_seconds
    pa, pb = a.family_state_["mastery"].params_, b.family_state_["mastery"].params_
    np.testing.assert_array_equal(pa.for_skills(np.arange(-1, 4)), pb.for_skills(np.arange(-1, 4)))
    pd.testing.assert_frame_equal(a.transform(train), b.transform(train))
    assert a.feature_names_out_ == b.feature_names_out_
    # ...while the test students' own rows do change.
    test = windows[windows["student"].isin(test_students)]
    assert not a.transform(test).equals(b.transform(test))


def test_unseen_steps_fall_back_to_the_overall_median(events):
    rare = events.copy()
    test_students = rare["student"].unique()[-5:]
    rare.loc[rare["student"].isin(test_students) & (rare["action"] == "hint"), "step"] = "st_rare"
    log = quiet_log(rare)
    train = windows_of(rare[~rare["student"].isin(test_students)])
    norm = features(log, families=["timing"]).fit(train).family_state_["timing"].norms[("duration", "step")]
    code = log.categories("step").get_loc("st_rare")
    train_durations = rare.loc[~rare["student"].isin(test_students), "duration"]
    assert norm.table[-1] == pytest.approx(np.median(train_durations))
    assert norm.table[code] == norm.table[-1] and norm.n_events[code] == 0
    seen = log.categories("step").get_loc("st3")
    assert norm.table[seen] == pytest.approx(np.median(train_durations[rare["step"] == "st3"]))


# ----------------------------------------------------------------------------- selection
def test_constant_and_duplicate_features_are_dropped_with_reasons(fitted):
    kept, dropped = set(fitted.feature_names_out_), fitted.dropped_features_
    assert set(fitted.candidate_features_) == kept | set(dropped) and not kept & set(dropped)
    no_hints = make_events(10, 60)
    no_hints["action"] = "attempt"
    no_hints["correct"] = pd.array(np.arange(len(no_hints)) % 3 > 0, dtype="boolean")
    log = quiet_log(no_hints)
    X = windows_of(no_hints, per_student=2)
    feats = features(log, families=["volume", "help"]).fit(X)
    assert feats.dropped_features_["volume__hints"] == "constant on the training units"
    reason = feats.dropped_features_["volume__attempts"]
    assert reason == "duplicate of 'volume__actions' on the training units"
    assert "volume__actions" in feats.feature_names_out_
    assert "help__hints_per_step" in feats.dropped_features_


def test_max_features_keeps_best_correlated_with_y(log, windows):
    base = features(log, families=["volume"], prune=True).fit_transform(windows)
    y = base["volume__hints"].to_numpy() + np.random.default_rng(0).random(len(base)) * 0.1
    feats = features(log, families=["volume"], max_features=2).fit(windows, y)
    assert len(feats.feature_names_out_) == 2
    assert "volume__hints" in feats.feature_names_out_
    scores = feats.feature_scores_
    assert max(scores, key=scores.get) == "volume__hints"
    assert any("max_features=2 budget" in r for r in feats.dropped_features_.values())


def test_max_features_without_y_is_deterministic(log, windows):
    a = features(log, families=["volume", "correctness"], max_features=5).fit(windows)
    b = features(log, families=["correctness", "volume"], max_features=5).fit(windows.iloc[::-1])
    assert a.feature_names_out_ == b.feature_names_out_
    assert len(a.feature_names_out_) == 5


# ----------------------------------------------------------------------------- missing data
@pytest.mark.filterwarnings("ignore::rulefeat.errors.RulefeatWarning")
def test_units_without_attempts_and_empty_windows():
    events = pd.DataFrame({"student": ["a"] * 4, "time": [0.0, 5.0, 10.0, 50.0],
                           "action": ["hint", "hint", "attempt", "attempt"], "correct": [None, None, 1, 0],
                           "step": ["x", "x", "x", "y"], "skill": ["k", "k", "k", None]})
    log = quiet_log(events)
    X = pd.DataFrame({"student": ["a", "a", "a"], "start": [0.0, 0.0, 1000.0], "end": [6.0, 100.0, 2000.0]})
    out = features(log, prune=False).fit(X).transform(X)
    only_hints, everything, empty = out.iloc[0], out.iloc[1], out.iloc[2]
    assert only_hints["volume__attempts"] == 0 and np.isnan(only_hints["correctness__accuracy"])
    assert only_hints["correctness__longest_error_streak"] == 0
    assert np.isnan(only_hints["mastery__p_known_mean"])
    assert everything["volume__skills"] == 1  # the step without a skill adds none
    assert np.isnan(everything["help__last_hint_step_share"])  # no hint levels in this log
    assert empty["volume__actions"] == 0 and np.isnan(empty["timing__duration_mean"])
    assert np.isnan(empty["history__prior_accuracy"]) and empty["history__prior_attempts"] == 0


def test_empty_windows_warn(log, windows):
    X = windows.assign(start=windows["start"] + 1e9, end=windows["end"] + 1e9)
    with pytest.warns(RulefeatWarning, match="cover no events"):
        features(log, families=["volume"], prune=False).fit(windows).transform(X)


def test_log_without_steps_skills_or_outcomes_does_not_crash():
    events = make_events(6, 30)[["student", "time", "action"]]
    log = quiet_log(events)
    X = windows_of(events, per_student=2)
    out = features(log, prune=False).fit(X).transform(X)
    assert out["volume__steps"].eq(0).all() and out["correctness__accuracy"].isna().all()
    assert out["mastery__p_known_at_end"].isna().all() and out["history__prior_accuracy"].isna().all()
    assert out["volume__actions"].gt(0).any()


def test_hint_level_fields_are_parameters(events):
    renamed = events.rename(columns={"hint_level": "depth", "hint_levels_total": "depth_max"})
    log = quiet_log(renamed)
    X = windows_of(renamed)
    default = features(log, families=["help"], prune=False).fit(X).transform(X)
    named = features(log, families=["help"], prune=False, hint_level_field="depth",
                     hint_total_field="depth_max").fit(X).transform(X)
    assert default["help__last_hint_step_share"].isna().all()
    assert named["help__last_hint_step_share"].notna().any()


def test_missing_students_policy(log, windows, fitted):
    X = pd.concat([windows.iloc[:2], pd.DataFrame({"student": ["nobody"], "start": [0.0], "end": [10.0]})])
    with pytest.raises(UnitError, match="not in the event log"):
        fitted.transform(X)
    lenient = features(log, missing_students="empty").fit(windows)
    with pytest.warns(RulefeatWarning, match="cover no events"):
        out = lenient.transform(X)
    assert out.iloc[2]["volume__actions"] == 0


# ----------------------------------------------------------------------------- bad input
@pytest.mark.parametrize("params, match", [
    ({"families": ["volume", "timeing"]}, r"unknown family 'timeing'\. Did you mean 'timing'\?"),
    ({"families": []}, r"'families' parameter of LogFeatures must be"),
    ({"max_features": 0}, r"'max_features' parameter of LogFeatures must be None or an int >= 1"),
    ({"mastery_threshold": 1.5}, r"'mastery_threshold' parameter"),
    ({"pause_quantiles": (0.9, 0.9)}, r"'pause_quantiles' parameter.*distinct"),
    ({"pause_quantiles": (90,)}, r"'pause_quantiles' parameter"),
    ({"min_norm_events": 0}, r"'min_norm_events' parameter"),
    ({"bkt_options": {"n_restart": 2}}, r"unknown key 'n_restart'\. Did you mean 'n_restarts'\?"),
    ({"unit": "windw"}, r"'unit' parameter of LogFeatures"),
    ({"missing_students": "skip"}, r"'missing_students' parameter of LogFeatures"),
    ({"prune": "yes"}, r"'prune' parameter of LogFeatures must be True or False"),
    ({"random_state": "seven"}, r"'random_state' parameter"),
])
def test_bad_parameters(log, windows, params, match):
    with pytest.raises(ParameterError, match=match):
        LogFeatures(log, **params).fit(windows)


def test_bad_log_and_tables(log, windows, fitted):
    with pytest.raises(ParameterError, match="'log' parameter of LogFeatures must be a rulefeat.EventLog"):
        LogFeatures(windows).fit(windows)
    with pytest.raises(UnitError, match="must be a pandas DataFrame"):
        fitted.transform(windows.to_numpy())
    with pytest.raises(UnitError, match="lacks the key column 'end'"):
        fitted.transform(windows.drop(columns="end"))
    with pytest.raises(UnitError, match="one label per row of X"):
        features(log, max_features=3).fit(windows, np.zeros(3))
    with pytest.raises(UnitError, match="none of the students in X is in the event log"):
        features(log, missing_students="empty").fit(pd.DataFrame({"student": ["x"], "start": [0.0],
                                                                   "end": [1.0]}))
    with pytest.raises(UnitError, match="every candidate feature is constant"):
        features(log).fit(windows.iloc[:1])


# ----------------------------------------------------------------------------- scikit-learn's own checks
CHECK_LOG = quiet_log(make_events(8, 40, seed=4))


@parametrize_with_checks([LogFeatures(CHECK_LOG, unit="student", random_state=0)],
                         expected_failed_checks=lambda est: EXPECTED_FAILURES)
def test_sklearn_compatible(estimator, check):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RulefeatWarning)
        check(estimator)
