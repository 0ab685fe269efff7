"""The compiled passes of the log build agree with the plain numpy / pandas expressions they replace."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from rulefeat import EventLog, LogRepairWarning
from rulefeat.log import passes


def _order(student, time, n_students):
    n = len(student)
    order, t, back = np.empty(n, dtype=np.int64), np.empty(n), np.empty(n, dtype=bool)
    local, unsorted = np.empty(n, dtype=np.int64), np.empty(n_students, dtype=bool)
    start = passes.student_time_order(student, time, n_students, order, t, back, local, unsorted)
    for values in (time, np.arange(n, dtype=np.int32), (np.arange(n) % 3 - 1).astype(np.int8)):
        moved = passes.permute(values, student, start, local, unsorted, np.empty(n, dtype=values.dtype))
        np.testing.assert_array_equal(moved, values[order])  # every field moves the way the rows did
    return order, t, back, start


# Few distinct times and students, so ties, out-of-order rows and sorted runs all occur.
events = st.integers(1, 300).flatmap(lambda n: st.tuples(
    st.lists(st.integers(0, 6), min_size=n, max_size=n),
    st.lists(st.sampled_from([0.0, -0.0, 1.0, 1.5, 2.0, 7.25, -3.0, 1e9]), min_size=n, max_size=n),
))


@settings(max_examples=150, deadline=None)
@given(events)
def test_sort_is_lexsort_by_student_then_time_with_input_order_for_ties(data):
    student, time = np.array(data[0], dtype=np.int32), np.array(data[1])
    order, t, back, start = _order(student, time, 7)
    expected = np.lexsort((time, student))  # numpy's own stable sort by (student, time)
    np.testing.assert_array_equal(order, expected)
    np.testing.assert_array_equal(t, time[expected])
    np.testing.assert_array_equal(start, np.searchsorted(student[expected], np.arange(8)))
    # A row is out of order when an earlier row of its student has a later time.
    by_student = np.argsort(student, kind="stable")
    s, tt = student[by_student], time[by_student]
    drop = np.flatnonzero((s[1:] == s[:-1]) & (tt[1:] < tt[:-1])) + 1
    np.testing.assert_array_equal(np.flatnonzero(back), np.sort(by_student[drop]))


def test_long_student_runs_are_merged_stably():
    rng = np.random.default_rng(5)
    student = rng.integers(0, 3, 5000).astype(np.int32)  # runs far longer than the insertion-sorted ones
    time = rng.integers(0, 400, 5000).astype(np.float64)
    order, t, _, _ = _order(student, time, 3)
    np.testing.assert_array_equal(order, np.lexsort((time, student)))


@settings(max_examples=100, deadline=None)
@given(st.integers(1, 200).flatmap(lambda n: st.tuples(
    st.lists(st.integers(0, 4), min_size=n, max_size=n), st.lists(st.integers(-1, 5), min_size=n, max_size=n))))
def test_group_positions_match_factorize_and_cumcount(data):
    student = np.sort(np.array(data[0], dtype=np.int32))  # the log's order: each student one run
    codes = np.array(data[1], dtype=np.int32)
    ids, pos = np.empty(len(codes), dtype=np.int64), np.empty(len(codes))
    passes.group_positions(student, codes, 6, ids, pos)
    expected, _ = pd.factorize(student.astype(np.int64) * 10 + codes + 1, sort=False)
    np.testing.assert_array_equal(ids, np.where(codes >= 0, expected, -1))
    count = pd.Series(codes).groupby([student, codes]).cumcount().to_numpy() + 1.0
    np.testing.assert_array_equal(pos, np.where(codes >= 0, count, np.nan))


@settings(max_examples=100, deadline=None)
@given(st.lists(st.sampled_from([0.0, 1.0, 1.0, 2.5, 4.0, np.nan, -1.0, 9.0]), min_size=1, max_size=40),
       st.booleans())
def test_time_search_inside_each_student_matches_searchsorted(queries, right):
    time = np.array([0.0, 1.0, 1.0, 3.0, 1.0, 2.5, 2.5, 9.0])  # student 0: [0, 4), 1: [4, 8), 2: empty
    first, last = np.array([0, 4, 8]), np.array([4, 8, 8])
    times = np.array(queries)
    students = np.arange(len(times)) % 4 - 1  # -1 (no student), 0, 1, 2
    out = np.empty(len(times), dtype=np.int64)
    passes.search_times(time, first, last, students.astype(np.int64), times, right, out)
    side = "right" if right else "left"
    for q, s in enumerate(students):
        want = 0 if s < 0 else first[s] + np.searchsorted(time[first[s]:last[s]], times[q], side=side)
        assert out[q] == want, (q, s, times[q])


def test_shuffled_input_builds_the_same_log_as_sorted_input():
    rng = np.random.default_rng(2)
    n = 3000
    raw = pd.DataFrame({"student": rng.choice(["u", "v", "w", "x"], n), "time": rng.integers(0, 500, n) * 1.0,
                        "action": rng.choice(["attempt", "hint"], n), "step": rng.choice(["a", "b", None], n)})
    sorted_raw = raw.sort_values(["student", "time"], kind="stable")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        shuffled, ordered = EventLog(raw), EventLog(sorted_raw.reset_index(drop=True))
    np.testing.assert_array_equal(shuffled.row_numbers, sorted_raw.index.to_numpy())
    for name in shuffled.fields:
        np.testing.assert_array_equal(shuffled.values(name), ordered.values(name))
    assert "rows out of time order within a student" in [i.what for i in shuffled.issues]
    assert "rows out of time order within a student" not in [i.what for i in ordered.issues]
