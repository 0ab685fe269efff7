"""Fitted state only in artefacts (contract 8, DEVELOPERS.md): no events, no student ids, size independent of the log."""

import copy
import io
import pickle

import joblib
import numpy as np
import pandas as pd
import pytest
from _ship_data import KEYS, MINED, fitted_detector, quiet_log, rules, simulated, student_ids
from sklearn.base import clone
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import GridSearchCV, GroupKFold, cross_validate
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import StandardScaler

import rulefeat
from rulefeat.errors import ParameterError, RuleCheckError
from rulefeat.evaluate.value.engine import demo_rules_path


@pytest.fixture(scope="module")
def trained():
    events, windows = simulated(50, seed=3)
    log = quiet_log(events)
    return events, windows, log, fitted_detector(log, windows)


def _parts(detector):
    union = detector.named_steps["features"]
    return dict(union.transformer_list)


def _dumps(obj) -> dict:
    buffer = io.BytesIO()
    joblib.dump(obj, buffer)
    return {"pickle": pickle.dumps(obj), "joblib": buffer.getvalue()}


def test_pickles_hold_no_student_id_and_no_events(trained):
    events, _, log, detector = trained
    ids = student_ids(events)
    assert ids[0].startswith("stu-ZQ81-")
    parts = _parts(detector)
    for name, obj in {"rules": parts["rules"], "mined": parts["mined"], "detector": detector}.items():
        for how, data in _dumps(obj).items():
            assert b"stu-ZQ81" not in data, f"{how} of {name} holds a training student id"
            assert len(data) < len(pickle.dumps(log)) / 10, f"{how} of {name} is as big as the events"
    # The detector itself keeps its log at run time: pickling copies, it does not change the original.
    assert parts["rules"].log is log and parts["mined"].log is log


@pytest.mark.slow
def test_size_does_not_grow_with_the_number_of_students(trained):
    small = trained[3]
    events, windows = simulated(500, seed=4)
    large = fitted_detector(quiet_log(events), windows)
    for name in ("rules", "mined"):
        a, b = (len(pickle.dumps(_parts(d)[name])) for d in (small, large))
        assert abs(a - b) / a < 0.05, (name, a, b)  # content labels (steps, skills) only, the same in both
    a, b = len(pickle.dumps(small)), len(pickle.dumps(large))
    assert abs(a - b) / a < 0.15, (a, b)  # the boosted trees differ a little in their split values


def test_unpickled_detector_needs_a_log_and_says_how_to_bind(trained):
    _, windows, log, detector = trained
    restored = pickle.loads(pickle.dumps(detector))
    with pytest.raises(ParameterError, match=r"no event log to read.*rulefeat\.bind\(detector, log\)"):
        restored.predict_proba(windows[KEYS])
    np.testing.assert_array_equal(rulefeat.bind(restored, log).predict_proba(windows[KEYS]),
                                  detector.predict_proba(windows[KEYS]))


def test_copies_share_the_log_and_unfitted_specifications_keep_it(trained):
    _, windows, log, detector = trained
    rf = _parts(detector)["rules"]
    assert copy.deepcopy(rf).log is log and clone(rf).log is log
    assert not hasattr(copy.deepcopy(rf), "_fired_cache")  # a memo over the bound log is never copied
    unfitted = rulefeat.RuleFeatures(rules=rules(), log=log)
    assert pickle.loads(pickle.dumps(unfitted)).log is not None  # work to do, as shipped to parallel workers


def test_parallel_search_and_cross_validation_still_work(trained):
    # scikit-learn's loky workers receive unfitted clones with their log; fitted results come back without it.
    _, windows, log, _ = trained
    pipe = Pipeline([("rules", rulefeat.RuleFeatures(rules=demo_rules_path(), log=log)),
                     ("model", LogisticRegression(max_iter=200))])
    X, y, groups = windows[KEYS], windows["label"].to_numpy(), windows["student"].to_numpy()
    Xf = X.copy()
    one = cross_validate(pipe, Xf, y, groups=groups, cv=GroupKFold(3), scoring="roc_auc")
    two = cross_validate(pipe, Xf, y, groups=groups, cv=GroupKFold(3), scoring="roc_auc", n_jobs=2)
    np.testing.assert_array_equal(one["test_score"], two["test_score"])
    search = GridSearchCV(pipe, {"model__C": [0.1, 1.0]}, cv=GroupKFold(3), scoring="roc_auc", n_jobs=2)
    search.fit(Xf, y, groups=groups)
    assert search.best_estimator_.named_steps["rules"].log is log


def test_parallel_evaluation_with_fitted_prototypes_matches_sequential(trained):
    # The library ships the logs to its workers beside the transformers, so even a fitted prototype
    # (which pickles without its log) is rebuilt there reading the same events.
    from rulefeat.evaluate.value.engine import compute_incremental_value

    _, windows, log, _ = trained
    X, y = windows[KEYS].reset_index(drop=True), windows["label"].to_numpy()
    rf = rulefeat.RuleFeatures(rules=rules(), log=log).fit(X)
    mined = rulefeat.LogFeatures(log, families=["volume", "timing"], random_state=0).fit(X)
    model = make_pipeline(SimpleImputer(), StandardScaler(), LogisticRegression(max_iter=300))
    kw = dict(model=model, mined=mined, cv=3, random_state=1, n_boot=50, repeats=1,
              transfer=False, learning_curve=None, ablation=False)
    a, oof_a, _ = compute_incremental_value(log, X, y, rf, **kw)
    b, oof_b, _ = compute_incremental_value(log, X, y, rf, n_jobs=2, **kw)
    assert {k: v for k, v in a.items() if k != "timing"} == {k: v for k, v in b.items() if k != "timing"}
    pd.testing.assert_frame_equal(oof_a, oof_b)


@pytest.mark.parametrize("key", ["student", "session"])
def test_norms_per_student_or_session_are_refused(trained, key):
    log = trained[2]
    rule = rulefeat.Rule("own_pace", when=f"duration > typical(duration, per='{key}')")
    with pytest.raises(RuleCheckError, match=rf"per='{key}': a norm per {key} would be learned from the "
                                             r"training students' own events"):
        rulefeat.RuleSet([rule]).bind(log)


def test_mined_settings_do_not_hold_ids(trained):
    events, windows, log, _ = trained
    mined = rulefeat.LogFeatures(log, **MINED, random_state=0).fit(windows[KEYS])
    state = pickle.dumps(mined.family_state_)
    assert b"stu-ZQ81" not in state and len(state) < 50_000
