"""Units map rows of X to events; the shared aggregations agree with plain pandas."""

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rulefeat import EventLog, LogRepairWarning, RulefeatWarning, UnitError
from rulefeat._aggregate import Aggregator
from rulefeat.units import LastActions, Problem, Session, Step, Student, Window, as_unit


@pytest.fixture(scope="module")
def log():
    data = pd.DataFrame({
        "student": ["a", "a", "a", "a", "b", "b", "c"],
        "time": [0.0, 1.0, 2.0, 10.0, 0.0, 5.0, 3.0],
        "action": ["attempt", "hint", "hint", "attempt", "attempt", "attempt", "hint"],
        "problem": ["p1", "p1", "p2", "p1", "p1", "p1", "p2"],
        "step": ["x", "x", "y", "x", "x", "x", "y"],
    })
    return EventLog(data)


def covered(index):
    return [index.events[index.indptr[i]:index.indptr[i + 1]].tolist() for i in range(index.n_units)]


def test_windows_are_half_open_and_may_overlap(log):
    X = pd.DataFrame({"student": ["a", "a", "b"], "start": [0.0, 1.0, 0.0], "end": [2.0, 10.0, 5.0]})
    assert covered(Window().resolve(log, X)) == [[0, 1], [1, 2], [4]]


def test_last_actions_up_to_and_including_time(log):
    X = pd.DataFrame({"student": ["a", "a", "b"], "time": [2.0, 0.5, 99.0]})
    assert covered(LastActions(n=2).resolve(log, X)) == [[1, 2], [0], [4, 5]]


def test_keyed_units_collect_non_contiguous_events(log):
    assert covered(Step().resolve(log, pd.DataFrame({"student": ["a", "b"], "step": ["x", "x"]}))) == \
        [[0, 1, 3], [4, 5]]
    assert covered(Problem().resolve(log, pd.DataFrame({"student": ["a"], "problem": ["p2"]}))) == [[2]]
    assert covered(Student().resolve(log, pd.DataFrame({"student": ["c", "a"]}))) == [[6], [0, 1, 2, 3]]
    assert covered(Session().resolve(log, pd.DataFrame({"student": ["b"], "session": [1]}))) == [[4, 5]]


def test_renamed_key_columns(log):
    X = pd.DataFrame({"who": ["a"], "from": [0.0], "to": [1.5]})
    assert covered(Window(student="who", start="from", end="to").resolve(log, X)) == [[0, 1]]


def test_datetime_windows_on_datetime_log():
    t0 = pd.Timestamp("2026-02-01 08:00:00")
    data = pd.DataFrame({"student": ["a"] * 3, "time": [t0 + pd.Timedelta(seconds=s) for s in (0, 30, 90)],
                         "action": ["hint"] * 3})
    dlog = EventLog(data)
    X = pd.DataFrame({"student": ["a"], "start": [t0 + pd.Timedelta(seconds=10)], "end": ["2026-02-01T08:01:30"]})
    assert covered(Window().resolve(dlog, X)) == [[1]]


def test_unit_errors(log):
    with pytest.raises(UnitError, match=r"lacks the key column 'end'.*Did you mean 'ends'"):
        Window().resolve(log, pd.DataFrame({"student": ["a"], "start": [0.0], "ends": [1.0]}))
    with pytest.raises(UnitError, match=r"1 windows end before they start \(row 1\)"):
        Window().resolve(log, pd.DataFrame({"student": ["a", "a"], "start": [0.0, 5.0], "end": [1.0, 2.0]}))
    with pytest.raises(UnitError, match=r"not in the event log \(row 0: 'zed'\).*missing_students='empty'"):
        Student().resolve(log, pd.DataFrame({"student": ["zed"]}))
    with pytest.raises(UnitError, match=r"must be a pandas DataFrame"):
        Student().resolve(log, np.zeros((2, 1)))
    with pytest.raises(UnitError, match=r"not steps of the log"):
        Step().resolve(log, pd.DataFrame({"student": ["a"], "step": ["nope"]}))
    with pytest.raises(UnitError, match=r"must be one of .*Did you mean 'window'"):
        as_unit("windw")
    with pytest.raises(UnitError, match=r"LastActions: n must be a positive integer"):
        LastActions(n=0).resolve(log, pd.DataFrame({"student": ["a"], "time": [1.0]}))


def test_absent_students_and_empty_units_are_reported_not_dropped(log):
    X = pd.DataFrame({"student": ["zed", "a"], "start": [0.0, 50.0], "end": [1.0, 60.0]})
    with pytest.warns(RulefeatWarning, match=r"2 of 2 window units cover no events"):
        index = Window().resolve(log, X, missing_students="empty")
    assert index.n_units == 2 and index.empty.all()


# -- aggregations vs a plain pandas reference ------------------------------------------------------
events = st.lists(st.tuples(st.sampled_from("abc"), st.integers(0, 30), st.booleans(),
                            st.one_of(st.none(), st.floats(0, 100))), min_size=1, max_size=30)
windows = st.lists(st.tuples(st.sampled_from("abc"), st.integers(0, 30), st.integers(0, 15)),
                   min_size=1, max_size=8)


@settings(max_examples=100, deadline=None)
@given(events, windows)
def test_aggregations_match_pandas_reference(rows, wins):
    raw = pd.DataFrame(rows, columns=["student", "time", "hint", "value"]).astype({"time": float, "value": float})
    raw["action"] = np.where(raw["hint"], "hint", "attempt")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", (LogRepairWarning, RulefeatWarning))
        elog = EventLog(raw.drop(columns="hint"))
        X = pd.DataFrame(wins, columns=["student", "start", "length"]).astype({"start": float})
        X["end"] = X["start"] + X["length"]
        X = X[X["student"].isin(raw["student"])].reset_index(drop=True)
        if X.empty:
            return
        index = Window().resolve(elog, X)
    agg = Aggregator(index, elog.values("time"))
    hint = elog.values("action") == list(elog.categories("action")).index("hint")
    value = elog.values("value")
    frame = elog.to_frame().reset_index(drop=True)
    for i, w in X.iterrows():
        mine = frame[(frame["student"] == w["student"]) & (frame["time"] >= w["start"]) & (frame["time"] < w["end"])]
        h = (mine["action"] == "hint").to_numpy()
        v = mine["value"].astype(float)
        assert agg.count(hint)[i] == h.sum()
        assert agg.any(hint)[i] == float(h.any())
        np.testing.assert_allclose(agg.stat(value, "mean")[i], v.mean() if v.notna().any() else np.nan)
        np.testing.assert_allclose(agg.stat(value, "median")[i], v.median() if v.notna().any() else np.nan)
        np.testing.assert_allclose(agg.stat(value, "std")[i], v.std() if v.notna().sum() > 1 else np.nan)
        np.testing.assert_allclose(agg.stat(value, "max")[i], v.max() if v.notna().any() else np.nan)
        longest = max((len(r) for r in "".join("1" if x else "0" for x in h).split("0")), default=0)
        assert agg.longest_run(hint)[i] == longest
        first = np.flatnonzero(h)
        np.testing.assert_array_equal(agg.first_position(hint)[i], first[0] + 1 if len(first) else np.nan)
        np.testing.assert_allclose(agg.first_seconds(hint)[i],
                                   mine["time"].iloc[first[0]] - w["start"] if len(first) else np.nan)
        assert agg.nunique(elog.values("student"))[i] == (1 if len(mine) else 0)
