"""Every mined family against the plain-pandas reference, on hand-made and hypothesis-generated logs."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_mined_reference import HAND_WINDOWS, bkt_params_of, hand_log, reference

from rulefeat import EventLog
from rulefeat.mined import FAMILIES
from rulefeat.mined.transformer import LogFeatures

pytestmark = pytest.mark.filterwarnings("ignore::rulefeat.errors.RulefeatWarning")

FAST_BKT = {"n_restarts": 1, "max_iter": 30}


def assert_matches(got: pd.DataFrame, want: pd.DataFrame) -> None:
    assert list(got.columns) == [c for c in want.columns if c in got.columns]
    assert set(got.columns) == set(want.columns)
    for col in got.columns:
        np.testing.assert_allclose(got[col].to_numpy(), want[col].to_numpy(dtype=float), rtol=1e-9,
                                   atol=1e-12, equal_nan=True, err_msg=col)


def features_and_reference(log, X, unit, train_X=None, **params):
    train_X = X if train_X is None else train_X
    feats = LogFeatures(log, unit=unit, prune=False, random_state=0, bkt_options=FAST_BKT, **params)
    got = feats.fit(train_X).transform(X)
    want = reference(log, X, unit, train_X["student"].unique(), bkt_params_of(feats, log),
                     min_norm_events=feats.min_norm_events, quantiles=feats.pause_quantiles,
                     threshold=feats.mastery_threshold)
    return got, want


# ----------------------------------------------------------------------------- hand-made log
def hand_units():
    log = hand_log()
    frame = log.to_frame()
    steps = frame[["student", "step"]].dropna().drop_duplicates()
    return log, {
        "window": HAND_WINDOWS,
        "step": steps,
        "session": frame[["student", "session"]].drop_duplicates(),
        "student": pd.DataFrame({"student": ["s2", "s1"]}),
        "last": pd.DataFrame({"student": ["s1", "s1", "s2"], "time": [12.0, 100.0, 55.0]}),
    }


@pytest.mark.parametrize("unit", ["window", "step", "session", "student", "last"])
def test_every_family_matches_reference_on_hand_log(unit):
    log, units = hand_units()
    got, want = features_and_reference(log, units[unit], unit, min_norm_events=1)
    assert_matches(got, want)


@pytest.mark.parametrize("family", list(FAMILIES))
def test_each_family_alone_matches_reference(family):
    log = hand_log()
    feats = LogFeatures(log, families=[family], prune=False, min_norm_events=2, random_state=0,
                        bkt_options=FAST_BKT)
    got = feats.fit(HAND_WINDOWS).transform(HAND_WINDOWS)
    assert all(c.startswith(f"{family}__") for c in got.columns)
    params = bkt_params_of(feats, log) if family == "mastery" else None
    want = reference(log, HAND_WINDOWS, "window", ["s1", "s2"], params, min_norm_events=2)
    assert_matches(got, want[[c for c in want if c.startswith(f"{family}__")]])


def test_norms_come_from_training_students_only_in_reference_comparison():
    log = hand_log()
    got, want = features_and_reference(log, HAND_WINDOWS, "window", train_X=HAND_WINDOWS.iloc[:2],
                                       min_norm_events=1)
    assert_matches(got, want)


# ----------------------------------------------------------------------------- generated logs
ACTIONS = ["attempt", "attempt", "hint", "pause"]  # 'pause' is a kind that is neither attempt nor hint


@st.composite
def logs_and_windows(draw):
    n_students = draw(st.integers(1, 3))
    rows, windows = [], []
    for s in range(n_students):
        n = draw(st.integers(1, 14))
        steps = draw(st.lists(st.sampled_from([0.0, 0.0, 1.0, 2.5, 40.0, 2500.0]), min_size=n, max_size=n))
        times = np.cumsum(steps)
        for i in range(n):
            action = draw(st.sampled_from(ACTIONS))
            rows.append({
                "student": f"s{s}", "time": float(times[i]), "action": action,
                "correct": draw(st.sampled_from([0, 1, 1, None])) if action == "attempt" else None,
                "step": draw(st.sampled_from(["a", "b", "c", None])),
                "skill": draw(st.sampled_from(["k1", "k2", None])),
                "duration": draw(st.sampled_from([0.0, 1.5, 7.0, 30.0, np.nan])),
                "hint_level": draw(st.sampled_from([1.0, 2.0, 3.0, np.nan])) if action == "hint" else np.nan,
                "hint_levels_total": draw(st.sampled_from([2.0, 3.0, np.nan])),
            })
        for _ in range(draw(st.integers(1, 3))):
            start = draw(st.floats(-1.0, float(times[-1]) + 1, allow_nan=False))
            length = draw(st.sampled_from([0.5, 5.0, 50.0, 1e5]))
            windows.append({"student": f"s{s}", "start": start, "end": start + length})
    events = pd.DataFrame(rows)
    events["correct"] = events["correct"].astype("Float64")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        log = EventLog(events)
    return log, pd.DataFrame(windows)


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(logs_and_windows(), st.integers(1, 3))
def test_generated_logs_match_reference(case, min_norm_events):
    log, windows = case
    got, want = features_and_reference(log, windows, "window", min_norm_events=min_norm_events,
                                       pause_quantiles=(0.5, 0.9))
    assert_matches(got, want)


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(logs_and_windows())
def test_generated_logs_step_units_match_reference(case):
    log, _ = case
    steps = log.to_frame()[["student", "step"]].dropna().drop_duplicates()
    if not len(steps):
        return
    got, want = features_and_reference(log, steps, "step")
    assert_matches(got, want)
