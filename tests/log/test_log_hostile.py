"""Hostile and careless event tables: each bad input gets the library's own error naming the rows, and a fuzz
of EventLog constructors accepts only a RulefeatError or a log that accounts for every input row."""

import warnings

import numpy as np
import pandas as pd
import pytest
from _log_data import build, frame
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rulefeat import (
    EventLog,
    LogSchemaError,
    ParameterError,
    Rule,
    RulefeatError,
    RuleFeatures,
    RuleSet,
    UnitError,
)


# -- times: outside the datetime range, infinite, mixed zones ------------------------------------------------
@pytest.mark.parametrize("times, rows", [
    (["0001-01-01", "2026-03-02T09:00:00", "2026-03-02T09:00:05"], "row 0: '0001-01-01'"),
    (["2026-03-02T09:00:00", "2400-01-01T00:00:00", "9999-12-31"], "row 1: '2400-01-01T00:00:00', row 2"),
    (pd.to_datetime(pd.Series(["2026-03-02", "1500-06-01", "2026-03-03"]), format="ISO8601"), "row 1"),
])
def test_times_outside_the_datetime_range_are_refused_naming_the_rows(times, rows):
    with pytest.raises(LogSchemaError, match=r"column 'time': \d times lie outside the years 1678 to 2261.*" + rows):
        build(frame(time=times))


def test_infinite_times_and_durations_are_refused_naming_the_rows():
    with pytest.raises(LogSchemaError, match=r"column 'time': times must be finite.*row 1"):
        build(frame(time=[0.0, np.inf, 1.0]))
    with pytest.raises(LogSchemaError, match=r"column 'duration': 1 durations are infinite.*row 2: "):
        build(frame(duration=[1.0, 2.0, -np.inf]))
    with pytest.raises(LogSchemaError, match=r"column 'secs': 1 durations are infinite.*row 0"):
        build(frame(secs=[np.inf, 2.0, 1.0]), columns={"duration": "secs"})


def test_mixed_naive_and_offset_times_are_refused_naming_both_kinds():
    times = ["2026-03-02T09:00:00", "2026-03-02T09:00:05+01:00", "2026-03-02T09:00:09Z"]
    with pytest.raises(LogSchemaError, match=r"2 times carry a UTC offset \(e\.g\. rows 1, 2\) and 1 do not "
                                             r"\(e\.g\. row 0\).*utc=True"):
        build(frame(time=times))


def test_dates_without_a_time_are_not_taken_for_offsets():
    log = build(frame(time=["2026-03-02", "2026-03-04", "2026-03-03"]))  # "-02" is the day, not an offset
    assert log.settings["time_zone"] == "naive" and log.values("time").tolist() == [0.0, 172800.0, 86400.0]
    aware = build(frame(time=["2026-03-02T09:00:00Z", "2026-03-02T10:00:05+01:00", "2026-03-02T09:00:01Z"]))
    assert aware.settings["time_zone"] == "aware" and aware.values("time").tolist() == [0.0, 5.0, 1.0]


# -- options of the wrong kind ----------------------------------------------------------------------------
@pytest.mark.parametrize("options, match", [
    ({"columns": ["student", "time"]}, r"'columns' parameter of EventLog must be None or a mapping.*"
                                        r"Got \['student', 'time'\]"),
    ({"actions": ["hint"]}, r"'actions' parameter of EventLog must be None or a mapping.*Got \['hint'\]"),
    ({"actions": "hint"}, r"'actions' parameter of EventLog must be None or a mapping"),
    ({"correct_values": ("Y", "Y")}, r"two different codes; both are 'Y'"),
    ({"correct_values": (1, "1")}, r"two different codes; both are '1'"),
    ({"correct_values": "YN"}, r"must be a pair \(<correct value>, <wrong value>\).*Got 'YN'"),
    ({"correct_values": ("Y", "N", "?")}, r"must be a pair"),
    ({"correct_values": 1}, r"must be a pair"),
])
def test_options_of_the_wrong_kind_are_parameter_errors(options, match):
    with pytest.raises(ParameterError, match=match):
        build(frame(correct=["Y", None, "N"]), **options)


# -- unit times against the log's time axis -----------------------------------------------------------------
NAIVE = frame(time=["2026-03-02T09:00:00", "2026-03-02T09:00:05", "2026-03-02T09:00:01"])
AWARE = frame(time=["2026-03-02T09:00:00Z", "2026-03-02T09:00:05Z", "2026-03-02T09:00:01Z"])


def test_unit_times_out_of_range_infinite_or_in_another_zone_are_unit_errors():
    naive, aware, numeric = build(NAIVE), build(AWARE), build(frame())
    with pytest.raises(UnitError, match=r"1 values lie outside the years 1678 to 2261.*row 1: '2400-01-01'"):
        naive.to_seconds(pd.Series(["2026-03-02T09:00:00", "2400-01-01"]), what="column 'end'")
    with pytest.raises(UnitError, match=r"column 'end': 1 values are infinite.*row 0: "):
        numeric.to_seconds(pd.Series([np.inf, 3.0]), what="column 'end'")
    with pytest.raises(UnitError, match=r"zone-naive but the log's are zone-aware"):
        aware.to_seconds(pd.Series(["2026-03-02T09:00:00"]))
    with pytest.raises(UnitError, match=r"zone-aware but the log's are zone-naive"):
        naive.to_seconds(pd.to_datetime(pd.Series(["2026-03-02T09:00:00Z"]), utc=True))
    with pytest.raises(UnitError, match=r"1 times carry a UTC offset \(row 1\) and 1 do not \(row 0\)"):
        aware.to_seconds(pd.Series(["2026-03-02T09:00:00", "2026-03-02T09:00:00Z"]))
    assert aware.to_seconds(pd.Series(["2026-03-02T10:00:01+01:00", None])).tolist()[0] == 1.0


def test_a_window_ending_in_2400_is_refused_by_the_transformer():
    log = build(NAIVE)
    windows = pd.DataFrame({"student": ["a", "b"], "start": ["2026-03-02T09:00:00"] * 2,
                            "end": ["2026-03-02T10:00:00", "2400-01-01T00:00:00"]})
    features = RuleFeatures(log, RuleSet([Rule("quick", when="gap < 3s")]), unit="window")
    with pytest.raises(UnitError, match=r"column 'end'.*row 1: '2400-01-01T00:00:00'"):
        features.fit_transform(windows)


# -- the fuzz: a RulefeatError or every row accounted for ---------------------------------------------------
TIMES = st.one_of(
    st.lists(st.floats(allow_nan=True, allow_infinity=True), min_size=1, max_size=6),
    st.lists(st.integers(-2**62, 2**62), min_size=1, max_size=6),
    st.lists(st.sampled_from(["2026-03-02T09:00:00", "2026-03-02T09:00:05+02:00", "2026-03-02 09:01Z", "2026-03-02",
                              "0001-01-01", "2400-01-01T00:00:00", "9999-12-31T23:59:59Z", "yesterday", "", None,
                              "2026-13-45", "1677-09-21T00:12:43", "2262-04-11T23:47:17"]), min_size=1, max_size=6),
    st.lists(st.datetimes(timezones=st.sampled_from([None])), min_size=1, max_size=6),
)
CELLS = st.one_of(st.none(), st.booleans(), st.integers(-3, 3), st.floats(allow_nan=True, allow_infinity=True),
                  st.sampled_from(["attempt", "hint", "done", "true", "false", "Y", "N", "", "=1+1", "\x00", "\u202e"]))
OPTIONS = st.fixed_dictionaries({}, optional={
    "correct_values": st.sampled_from([None, ("Y", "N"), ("Y", "Y"), "YN", (True, False), (1, 0, 2)]),
    "actions": st.sampled_from([None, {"hint": ["help", "Y"]}, {"attempt": "try"}, ["hint"], "hint"]),
    "columns": st.sampled_from([None, {"student": "who"}, {"duration": "secs"}, ["student"], {"nonsense": "x"}]),
    "time_unit": st.sampled_from(["s", "ms", "min", "fortnight"]),
    "duplicates": st.sampled_from(["keep", "drop", "explode"]),
    "session_gap": st.sampled_from([1800.0, 0.5, -1.0, float("inf"), float("nan")]),
})


@st.composite
def event_tables(draw):
    times = draw(TIMES)
    n = len(times)
    column = st.lists(CELLS, min_size=n, max_size=n)
    data = {"time": times, "action": draw(st.one_of(column, st.lists(st.sampled_from(["attempt", "hint", "help"]),
                                                                      min_size=n, max_size=n)))}
    data[draw(st.sampled_from(["student", "who"]))] = draw(st.one_of(
        column, st.lists(st.sampled_from(["a", "b", 3, 4.5]), min_size=n, max_size=n)))
    for name in draw(st.sets(st.sampled_from(["correct", "duration", "secs", "skill", "step", "extra"]))):
        data[name] = draw(column)
    table = pd.DataFrame(data)
    dtypes = draw(st.dictionaries(st.sampled_from(list(table.columns)),
                                  st.sampled_from(["object", "string", "category", "float64"]), max_size=2))
    for name, dtype in dtypes.items():
        try:
            table[name] = table[name].astype(dtype)
        except (TypeError, ValueError, OverflowError):
            pass  # a cast that cannot hold these values: keep the column as drawn
    return table


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(event_tables(), OPTIONS)
def test_event_log_fuzz_refuses_with_its_own_error_or_accounts_for_every_row(table, options):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            log = EventLog(table, **options)
        except RulefeatError:
            return
    assert len(table) == len(log) + len(log.dropped_rows)
    assert np.isfinite(log.values("time")).all()
