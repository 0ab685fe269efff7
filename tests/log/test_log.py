"""EventLog: parsing, accounting of every row, sorting, derived fields, sharing."""

import copy
import pickle
import warnings
from datetime import datetime, timezone

import numpy as np
import pandas as pd
import pytest
from _log_data import build, frame
from hypothesis import given, settings
from hypothesis import strategies as st

from rulefeat import EventLog, LogRepairWarning, LogSchemaError, read_events


def issue(log, start):
    hits = [i for i in log.issues if i.what.startswith(start)]
    assert len(hits) == 1, [str(i) for i in log.issues]
    return hits[0]


# -- bad input: each refused with a clear error -------------------------------------------------------
BAD_INPUTS = [
    (pd.DataFrame({"learner": ["a"], "time": [0.0], "action": ["hint"]}), {},
     r"required field 'student' is missing.*columns=\{'student'"),
    (pd.DataFrame({"studnt": ["a"], "time": [0.0], "action": ["hint"]}), {}, r"Did you mean 'studnt'"),
    (pd.DataFrame({"student": [], "time": [], "action": []}), {}, r"empty \(0 rows\)"),
    (frame(time=["2026-01-05T10:00:00", "yesterday", "2026-01-05T10:00:09"]), {},
     r"column 'time': 1 times could not be parsed.*row 1: 'yesterday'"),
    (frame(student=["a", None, "b"]), {}, r"column 'student': 1 rows have no student id.*row 1"),
    (frame(correct=["RIGHT", "WRONG", "maybe"]), {"correct_values": ("RIGHT", "WRONG")},
     r"column 'correct': values must be 'RIGHT' \(correct\) or 'WRONG'.*row 2: 'maybe'"),
    (frame(correct=[1, 0, 2]), {}, r"numeric values must be 0 or 1.*correct_values"),
    (frame(correct=["yes", "no", "yes"]), {}, r"text values must be 'true'/'false'"),
    (frame(duration=[1.0, -2.0, 3.0]), {}, r"column 'duration': 1 durations are negative.*row 1"),
    (frame(t2=[0.0, 1.0, 2.0]), {"columns": {"time": "t2", "duration": "t2"}},
     r"points both 'time' and 'duration' at column 't2'"),
    (pd.DataFrame([["a", 0.0, "hint", 1]], columns=["student", "time", "action", "student"]), {},
     r"column names must be unique; \['student'\]"),
    (frame(), {"columns": {"studnt": "student"}}, r"unknown field 'studnt'.*Did you mean 'student'"),
    (frame(), {"columns": {"skill": "kc"}}, r"maps 'skill' to 'kc', which is not a column"),
    (frame(time=[0.0, np.nan, 1.0]), {}, r"column 'time': 1 rows have no time.*row 1"),
    (frame(action=["attempt", None, "hint"]), {}, r"column 'action': 1 rows have no action"),
    (frame(gap=[1, 2, 3]), {}, r"column 'gap' has the name of a field the log derives itself"),
    ("not a frame", {}, r"expected a pandas DataFrame"),
    (frame(), {"duplicates": "remove"}, r"'duplicates' parameter of EventLog must be one of"),
    (frame(), {"session_gap": -1}, r"'session_gap' parameter of EventLog must be a positive number"),
    (frame(), {"time_unit": "fortnight"}, r"time_unit must be one of"),
]


@pytest.mark.parametrize(("data", "kw", "message"), BAD_INPUTS)
def test_bad_input_is_refused_with_a_clear_error(data, kw, message):
    with pytest.raises(LogSchemaError, match=message):
        EventLog(data, **kw)


def test_field_mapped_elsewhere_but_column_of_that_name_exists():
    data = frame(ts=[1.0, 2.0, 3.0])
    with pytest.raises(LogSchemaError, match=r"also has a column named 'time'"):
        EventLog(data, columns={"time": "ts"})


# -- repairs: kept or dropped, always recorded ---------------------------------------------------------
def test_duplicates_kept_by_default_and_reported():
    data = pd.DataFrame({"student": ["a", "a", "a", "b"], "time": [1.0, 1.0, 2.0, 0.0],
                         "action": ["attempt", "attempt", "hint", "hint"], "correct": [1, 1, None, None]})
    with pytest.warns(LogRepairWarning, match="exact duplicate events: 1"):
        log = EventLog(data)
    assert len(log) == 4 and list(issue(log, "exact duplicate").rows) == [1]
    assert issue(log, "exact duplicate").action == "kept"


def test_duplicates_dropped_on_request_and_listed():
    data = pd.DataFrame({"student": ["a", "a", "a"], "time": [1.0, 1.0, 1.0],
                         "action": ["attempt", "attempt", "hint"], "correct": [0, 0, None]})
    log = build(data, duplicates="drop")
    assert len(log) == 2 and list(log.dropped_rows) == [1]
    assert len(data) == len(log) + len(log.dropped_rows)
    assert issue(log, "events sharing").count == 2


def test_out_of_order_rows_are_resorted_and_reported():
    data = frame(time=[5.0, 0.0, 1.0])
    log = build(data)
    assert list(log.row_numbers) == [1, 0, 2]
    assert list(issue(log, "rows out of time order").rows) == [1]


def test_hints_with_correct_values_are_set_missing():
    log = build(frame(correct=[1, 1, 0]))
    assert list(issue(log, "hints with a 'correct'").rows) == [1]
    assert log.values("correct").tolist() == [1, -1, 0]


def test_unknown_action_kinds_kept_and_flagged():
    log = build(frame(action=["attempt", "glossary", "attempt"]))
    assert list(issue(log, "actions of a kind").rows) == [1]
    assert "glossary" in list(log.categories("action"))


def test_action_mapping_renames_labels():
    log = build(frame(action=["ANSWER", "HELP", "ANSWER"]), actions={"attempt": "ANSWER", "hint": ["HELP"]})
    assert log.decoded("action").tolist() == ["attempt", "hint", "attempt"]
    assert not log.issues


def test_derived_duration_capped_and_recorded():
    data = frame(time=[0.0, 700.0, 1.0])
    log = build(data, duration_cap=600, session_gap=1800)
    assert list(issue(log, "derived durations longer").rows) == [0]
    assert log.values("duration")[0] == 600.0


def test_warns_once_for_all_issues():
    data = pd.DataFrame({"student": ["a", "a", "a"], "time": [2.0, 1.0, 1.0],
                         "action": ["hint", "attempt", "attempt"], "correct": [1, 0, 0]})
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        EventLog(data)
    repair = [w for w in caught if issubclass(w.category, LogRepairWarning)]
    assert len(repair) == 1


# -- derived fields against a hand-computed table ------------------------------------------------------
def test_sessions_gaps_durations_positions_by_hand():
    data = pd.DataFrame({
        "student": ["a"] * 5 + ["b"] * 2,
        "time": [0.0, 10.0, 15.0, 2000.0, 2004.0, 3.0, 4.0],
        "action": ["attempt", "hint", "attempt", "attempt", "attempt", "hint", "attempt"],
        "step": ["s1", "s1", "s1", "s2", "s1", "s1", "s1"],
    })
    log = build(data, session_gap=1800, duration_cap=600)
    # hand-computed: a's pause 15 -> 2000 (1985 s) opens a second session; b is its own session.
    assert log.values("session").tolist() == [0, 0, 0, 1, 1, 2, 2]
    np.testing.assert_array_equal(log.values("gap"), [np.nan, 10, 5, np.nan, 4, np.nan, 1])
    np.testing.assert_array_equal(log.values("duration"), [10, 5, np.nan, 4, np.nan, 1, np.nan])
    assert log.values("step_position").tolist() == [1, 2, 3, 1, 4, 1, 2]


def test_given_duration_and_session_are_kept():
    log = build(frame(duration=[1.5, 2.5, 0.0], session=["x", "x", "y"]))
    assert log.values("duration").tolist() == [1.5, 2.5, 0.0]
    assert log.decoded("session").tolist() == ["x", "x", "y"]
    assert log.settings["duration_derived"] is False


# -- time parsing ----------------------------------------------------------------------------------------
def test_iso_times_match_datetime_fromisoformat():
    texts = ["2026-03-02T09:15:00", "2026-03-02T09:15:07.250000", "2026-03-02T10:00:00"]
    log = build(pd.DataFrame({"student": ["a"] * 3, "time": texts, "action": ["hint"] * 3}))
    expected = [(datetime.fromisoformat(t) - datetime.fromisoformat(texts[0])).total_seconds() for t in texts]
    np.testing.assert_allclose(log.values("time"), expected)  # reference: Python's datetime.fromisoformat
    assert log.decoded("time").tolist() == [pd.Timestamp(t) for t in texts]


def test_zone_aware_iso_times_are_converted_to_utc():
    texts = ["2026-03-02T09:00:00+01:00", "2026-03-02T08:30:00+00:00"]
    log = build(pd.DataFrame({"student": ["a", "a"], "time": texts, "action": ["hint", "hint"]}))
    ref = [datetime.fromisoformat(t).astimezone(timezone.utc) for t in texts]
    assert (ref[1] - ref[0]).total_seconds() == 1800
    np.testing.assert_allclose(log.values("time"), [0.0, 1800.0])


def test_numeric_times_with_unit_and_datetimes():
    log = build(frame(time=[0, 5000, 1000]), time_unit="ms")
    assert log.values("time").tolist() == [0.0, 5.0, 1.0]
    stamps = pd.to_datetime(["2026-01-01 10:00:00", "2026-01-01 10:00:05", "2026-01-01 10:00:01"])
    log = build(frame(time=stamps))
    assert log.values("time").tolist() == [0.0, 5.0, 1.0] and log.time_kind == "datetime"


def test_correct_codings():
    assert build(frame(correct=[True, None, False])).values("correct").tolist() == [1, -1, 0]
    assert build(frame(correct=pd.array([True, None, False], dtype="boolean"))).values("correct").tolist() == [1, -1, 0]
    assert build(frame(correct=["Y", None, "N"]), correct_values=("Y", "N")).values("correct").tolist() == [1, -1, 0]
    assert build(frame(correct=["True", None, "false"])).values("correct").tolist() == [1, -1, 0]


# -- immutability, sharing, files -------------------------------------------------------------------------
def test_arrays_are_read_only_and_deepcopy_shares():
    log = build(frame(extra=[1, 2, 3]))
    with pytest.raises(ValueError):
        log.values("time")[0] = 3.0
    assert copy.deepcopy(log) is log and copy.copy(log) is log
    again = pickle.loads(pickle.dumps(log))
    assert again.token == log.token and not again.values("extra").flags.writeable
    pd.testing.assert_frame_equal(again.to_frame(), log.to_frame())


def test_extra_columns_are_kept_with_kinds():
    log = build(frame(pace=[1.0, 2.0, 3.0], tag=["x", None, "y"], flag=[True, False, True]))
    assert log.kind("pace") == "number" and log.kind("tag") == "category" and log.kind("flag") == "bool"
    assert log.decoded("tag").isna().tolist() == [False, True, False]


def test_for_students_is_a_cheap_consistent_subset():
    log = build(frame())
    sub = log.for_students(["b"])
    assert len(sub) == 1 and sub.decoded("student").tolist() == ["b"]
    assert sub.categories("student").equals(log.categories("student"))
    with pytest.raises(Exception, match="not in the event log"):
        log.for_students(["zz"])


def test_unknown_field_suggests():
    log = build(frame())
    with pytest.raises(LogSchemaError, match="Did you mean 'duration'"):
        log.values("duraton")


def test_read_events_csv_and_parquet(tmp_path):
    data = frame(correct=[1, None, 0])
    data.to_csv(tmp_path / "e.csv", index=False)
    data.to_parquet(tmp_path / "e.parquet")
    a = read_events(tmp_path / "e.csv")
    b = read_events(tmp_path / "e.parquet")
    pd.testing.assert_frame_equal(a.to_frame(), b.to_frame())
    with pytest.raises(LogSchemaError, match="cannot tell the format"):
        read_events(tmp_path / "e.xlsx")


# -- properties: random tables -----------------------------------------------------------------------------
rows = st.lists(
    st.tuples(st.sampled_from(["s1", "s2", "s3"]), st.integers(0, 40), st.sampled_from(["attempt", "hint"])),
    min_size=1, max_size=40,
)


@settings(max_examples=150, deadline=None)
@given(rows, st.booleans())
def test_random_tables_sorted_counted_and_gaps_match_reference(data, drop):
    raw = pd.DataFrame(data, columns=["student", "time", "action"]).astype({"time": float})
    log = build(raw, duplicates="drop" if drop else "keep", session_gap=15)
    assert len(raw) == len(log) + len(log.dropped_rows)
    assert sorted(set(log.row_numbers) | set(log.dropped_rows)) == list(range(len(raw)))
    out = log.to_frame()
    key = list(zip(out["student"].astype(str), out["time"], log.row_numbers, strict=True))
    assert key == sorted(key)
    # reference: plain per-student loop
    ref = []
    for _, group in raw.drop(index=log.dropped_rows).assign(r=lambda d: d.index).sort_values(
            ["student", "time", "r"], kind="stable").groupby("student", sort=True):
        prev = None
        for t in group["time"]:
            ref.append(np.nan if prev is None or t - prev > 15 else t - prev)
            prev = t
    np.testing.assert_array_equal(log.values("gap"), np.array(ref))
