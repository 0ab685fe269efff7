"""Scoring new logs: a fitted detector bound to another log scores units as if their events joined the training log."""

import warnings

import numpy as np
import pandas as pd
import pytest
from _ship_data import KEYS, as_seconds, fitted_detector, quiet_log, simulated

import rulefeat
from rulefeat.errors import LogSchemaError, ParameterError, RulefeatWarning, UnitError


@pytest.fixture(scope="module")
def two_logs():
    """Log A (training) and log B (new students), times as seconds since 1970, and a detector fitted on A."""
    ev_a, win_a = simulated(40, seed=11, prefix="stu-A")
    ev_b, win_b = simulated(15, seed=12, prefix="stu-B")
    ev_a, ev_b = as_seconds(ev_a, ["time"]), as_seconds(ev_b, ["time"])
    win_a, win_b = as_seconds(win_a, ["start", "end"]), as_seconds(win_b, ["start", "end"])
    log_a, log_b = quiet_log(ev_a), quiet_log(ev_b)
    log_ab = quiet_log(pd.concat([ev_a, ev_b], ignore_index=True))
    return {"a": log_a, "b": log_b, "ab": log_ab, "win_a": win_a, "win_b": win_b,
            "ev_b": ev_b, "detector": fitted_detector(log_a, win_a)}


def test_bound_scores_equal_scores_with_the_students_appended_to_the_training_log(two_logs):
    detector, Xb = two_logs["detector"], two_logs["win_b"][KEYS]
    on_b = rulefeat.bind(detector, two_logs["b"])
    on_ab = rulefeat.bind(detector, two_logs["ab"])
    features_b = on_b[:-1].transform(Xb)
    features_ab = on_ab[:-1].transform(Xb)
    assert any(c.endswith("__first_seconds") for c in features_b.columns)  # first firings, relative to the unit
    assert any(c.startswith("mined__mastery") for c in features_b.columns)  # BKT by skill label
    pd.testing.assert_frame_equal(features_b, features_ab)
    np.testing.assert_array_equal(on_b.predict_proba(Xb), on_ab.predict_proba(Xb))
    # The detector itself still reads its training log.
    assert detector.named_steps["features"].transformer_list[1][1].log is two_logs["a"]


def test_bound_scores_are_not_one_constant(two_logs):
    p = rulefeat.bind(two_logs["detector"], two_logs["b"]).predict_proba(two_logs["win_b"][KEYS])[:, 1]
    assert len(np.unique(p)) > len(p) // 2


def test_datetime_logs_agree_to_float_precision():
    # With datetimes each log counts seconds from its own earliest event, so the same events carry times that
    # differ by a constant; differences of those floats agree to rounding, not always to the last bit.
    ev_a, win_a = simulated(30, seed=21, prefix="stu-A")
    ev_b, win_b = simulated(10, seed=22, prefix="stu-B")
    detector = fitted_detector(quiet_log(ev_a), win_a)
    log_b, log_ab = quiet_log(ev_b), quiet_log(pd.concat([ev_a, ev_b], ignore_index=True))
    a = rulefeat.bind(detector, log_b)[:-1].transform(win_b[KEYS])
    b = rulefeat.bind(detector, log_ab)[:-1].transform(win_b[KEYS])
    np.testing.assert_allclose(a.to_numpy(), b.to_numpy(), rtol=1e-9, atol=1e-6)


def test_windows_of_new_students_on_the_training_log_are_refused_naming_them(two_logs):
    # The case: the fitted detector still reads the training log, where the new units have no events.
    # Here the new students happen to share ids with training students (two simulations number them alike).
    clash = two_logs["win_b"].assign(student=[s.replace("stu-B-12", "stu-A-11") for s in two_logs["win_b"]["student"]])
    with pytest.raises(UnitError, match=r"units cover no events of the log this transformer reads \(row \d+: "
                                        r"student='stu-A-11-\d+'.*rulefeat\.bind\(detector, new_log\)"):
        two_logs["detector"].predict_proba(clash[KEYS])
    with pytest.raises(UnitError, match=r"rows name students that are not in the event log \(row 0: "
                                        r"'stu-B-12-\d+',.*rulefeat\.bind\(detector, new_log\)"):
        two_logs["detector"].predict_proba(two_logs["win_b"][KEYS])


def test_units_without_events_in_the_bound_log_raise_or_are_flagged(two_logs):
    Xb = two_logs["win_b"][KEYS].reset_index(drop=True)
    late = Xb.iloc[:2].assign(start=Xb["end"].max() + 1e6, end=Xb["end"].max() + 2e6)
    mixed = pd.concat([Xb.iloc[:3], late, pd.DataFrame({"student": ["stu-nobody"], "start": [0.0], "end": [1.0]})],
                      ignore_index=True)
    bound = rulefeat.bind(two_logs["detector"], two_logs["b"])
    with pytest.raises(UnitError, match=r"not in the event log \(row 5: 'stu-nobody'\)"):
        bound.predict_proba(mixed)
    with pytest.raises(UnitError, match=r"2 of 5 window units cover no events .*row 3: student="):
        bound.predict_proba(mixed.iloc[:5])
    lenient = rulefeat.bind(two_logs["detector"], two_logs["b"], empty_units="empty")
    with pytest.warns(RulefeatWarning, match=r"3 of 6 window units cover no events \(rows 3, 4, 5\)"):
        p = lenient.predict_proba(mixed)[:, 1]
    strict = bound.predict_proba(Xb.iloc[:3])[:, 1]
    np.testing.assert_array_equal(p[:3], strict)


def test_a_log_with_another_schema_is_refused_listing_every_difference(two_logs):
    frame = two_logs["ev_b"].drop(columns=["skill"]).assign(hint_level="first")
    other = quiet_log(frame)
    with pytest.raises(LogSchemaError, match=r"rulefeat.bind: the log does not have the schema the detector was "
                                             r"fitted on: 'skill' \(category\) is missing; 'hint_level' is a "
                                             r"category field, expected number\. Build the log"):
        rulefeat.bind(two_logs["detector"], other)


def test_bind_on_transformers_and_bad_arguments(two_logs):
    rf = two_logs["detector"].named_steps["features"].transformer_list[1][1]
    Xb = two_logs["win_b"][KEYS]
    direct = rf.bind(two_logs["b"]).transform(Xb)
    via = rulefeat.bind(rf, two_logs["b"]).transform(Xb)
    pd.testing.assert_frame_equal(direct, via)
    with pytest.raises(ParameterError, match="log must be a rulefeat.EventLog. Got DataFrame"):
        rulefeat.bind(rf, two_logs["ev_b"])
    with pytest.raises(ParameterError, match="holds no rulefeat transformer"):
        from sklearn.linear_model import LogisticRegression
        rulefeat.bind(LogisticRegression(), two_logs["b"])
    with pytest.raises(ParameterError, match=r"'empty_units' parameter of rulefeat.bind must be one of"):
        rulefeat.bind(rf, two_logs["b"], empty_units="skip")


def test_binding_an_unfitted_transformer_sets_its_log(two_logs):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        rf = rulefeat.RuleFeatures(rules=[rulefeat.Rule("hint", when="action == 'hint'")], log=two_logs["a"])
        assert rulefeat.bind(rf, two_logs["b"]).log is two_logs["b"] and rf.log is two_logs["a"]
