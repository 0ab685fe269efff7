"""Live per-event scoring equals batch scoring (contract 9): firings, unit features, probabilities.

The property test draws random logs (missing values, ties, sessions, events out of order within the
tolerance, random call sizes) with a rule set using every history function live scoring supports.
The suite runs a modest number of examples (40 and 20); ``RULEFEAT_LIVE_EXAMPLES=10000 pytest
tests/ship/test_ship_live.py -k equal_batch`` runs 10^4 (10,000 step-unit and 5,000 window examples took 826 s,
niced beside the test suite on 2 cores: not in CI).
"""

from __future__ import annotations

import os
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.pipeline import Pipeline
from sklearn.tree import DecisionTreeClassifier

import rulefeat
from rulefeat import EventLog, LateEventError, LiveError, LiveScorer, RuleFeatures, RuleSet

RULES = RuleSet.from_toml("""
[rules.quick_hint]
when = "action == 'hint' and gap < 2s"
report = ["count", "rate"]

[rules.again]
when = "action == 'attempt' and prev(action, within='step') == 'attempt' and not prev(correct, 2, within='session')"
report = ["count", "any", "first_seconds"]

[rules.stuck]
when = "count_before(action == 'attempt' and not correct, within='step') >= 2 and count_before(action == 'hint', within='step') == 0"
report = ["count", "longest_streak"]

[rules.burst]
when = "count_recent(action == 'attempt', seconds=5s, within='student') >= 3 or count_recent(correct, actions=3, within='step') >= 2"
report = ["rate", "first_position"]

[rules.run]
when = "streak(not correct, within='step') >= 2 or first(action == 'hint', within='session')"
report = ["count", "any"]

[rules.slow]
when = "duration > 2 * typical(duration, per='step') or zscore(gap, per='step') > 1"
report = ["count", "rate"]

[rules.ahead]
when = "next(action, within='student') == 'hint' and missing(correct)"
report = ["count"]

[rules.nested]
when = "prev(again, within='student') and step_position > 2"
report = ["count", "any"]

[rules.later]
when = "next(correct, 2, within='session')"
report = ["count"]
""")
SESSION_GAP = 60.0
EXAMPLES = int(os.environ.get("RULEFEAT_LIVE_EXAMPLES", "40"))


def random_events(rng: np.random.Generator, n_students: int, max_events: int, *, tolerance: float = 0.0,
                  first_step: int = 0) -> pd.DataFrame:
    """Events in order of arrival: steps in runs (never revisited), missing values, ties, long pauses."""
    parts = []
    for s in range(n_students):
        n = int(rng.integers(1, max_events + 1))
        steps = np.cumsum(rng.random(n) < 0.3) + first_step
        step = np.array([f"s{k}" for k in steps], dtype=object)
        step[rng.random(n) < 0.08] = None
        gaps = rng.choice([0.0, 0.5, 1.0, 1.5, 3.0, 7.0, 90.0], size=n, p=[.08, .2, .2, .2, .15, .12, .05])
        moved = np.concatenate([[False], steps[1:] != steps[:-1]])
        gaps[moved] = np.maximum(gaps[moved], 0.5)  # ties arriving swapped would revisit a step
        action = np.where(rng.random(n) < 0.35, "hint", "attempt")
        correct = np.where(rng.random(n) < 0.5, 1.0, 0.0)
        correct[(action == "hint") | (rng.random(n) < 0.1)] = np.nan
        parts.append(pd.DataFrame({"student": f"st{s}", "time": 1000.0 + np.cumsum(gaps), "action": action,
                                   "correct": correct, "step": step}))
    events = pd.concat(parts, ignore_index=True)
    arrival = events["time"].to_numpy() + rng.uniform(0, tolerance, len(events)) * (tolerance > 0)
    events = events.iloc[np.argsort(arrival, kind="stable")].reset_index(drop=True)
    events["correct"] = events["correct"].astype("boolean")
    return events


def fitted(unit: str, rules=RULES):
    rng = np.random.default_rng(0)
    train = random_events(rng, 6, 40)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        log = EventLog(train, session_gap=SESSION_GAP)
        X = _step_units(log) if unit == "step" else _windows(log)
        y = np.arange(len(X)) % 2
        rules = RuleFeatures(log, rules, unit=unit)
        # A tree model scores each row on its own: its probabilities do not depend on which rows come
        # together (a linear model's BLAS products may differ in the last bit with the batch size).
        model = DecisionTreeClassifier(max_depth=4, random_state=0)  # single-threaded: quick on 2 busy cores
        detector = Pipeline([("rules", rules), ("model", model)]).fit(X, y)
    return detector


def _step_units(log: EventLog) -> pd.DataFrame:
    frame = log.to_frame()
    return frame.dropna(subset=["step"])[["student", "step"]].drop_duplicates().astype(object).reset_index(drop=True)


def _windows(log: EventLog) -> pd.DataFrame:
    frame = log.to_frame()
    bounds = frame.groupby("student", observed=True)["time"].agg(["min", "max"]).reset_index()
    rows = [(s, lo + k * 20.0, lo + (k + 1) * 20.0) for s, lo, hi in bounds.itertuples(index=False)
            for k in range(int((hi - lo) // 20.0) + 1)]
    return pd.DataFrame(rows, columns=["student", "start", "end"])


STEP_DETECTOR = fitted("step")
WINDOW_DETECTOR = fitted("window")
DEMO_RULES = RuleSet.from_toml(rulefeat.evaluate.value.engine.demo_rules_path())
DEMO_WINDOWS = fitted("window", DEMO_RULES)  # no look-ahead: firings are final at once


def replay(scorer: LiveScorer, events: pd.DataFrame, sizes) -> list:
    outs, i, k = [], 0, 0
    while i < len(events):
        size = sizes[k % len(sizes)]
        chunk = events.iloc[i:i + size]
        outs.append(scorer.feed(chunk if size > 1 else chunk.iloc[0].to_dict()))
        i, k = i + size, k + 1
    outs.append(scorer.close())
    return outs


def live_firings(outs, n: int) -> dict:
    ids = np.concatenate([o.event_id for o in outs])
    assert np.array_equal(np.sort(ids), np.arange(n)), "every event emitted exactly once"
    out = {}
    for name in RULES.names:
        values = np.concatenate([o.fired[name] for o in outs])
        by_id = np.zeros(n, dtype=bool)
        by_id[ids] = values
        out[name] = by_id
    return out


def live_units(outs) -> pd.DataFrame:
    tables = [o.units for o in outs if len(o.units)]
    return pd.concat(tables, ignore_index=True) if tables else pd.DataFrame()


def same(a, b) -> bool:
    a, b = np.asarray(a, dtype=np.float64), np.asarray(b, dtype=np.float64)
    return a.shape == b.shape and bool(np.all((a == b) | (np.isnan(a) & np.isnan(b))))


def check_identity(detector, events: pd.DataFrame, sizes, tolerance: float, keys: list, units: pd.DataFrame):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        log = EventLog(events, session_gap=SESSION_GAP)
    rules = detector.named_steps["rules"]
    windows = {"windows": units, "empty_units": "empty"} if "start" in keys else {}
    scorer = LiveScorer(detector, tolerance=tolerance, **windows)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rulefeat.RulefeatWarning)  # windows without events, as in batch
        outs = replay(scorer, events, sizes)
    batch = rules.program_.evaluate(log)
    live = live_firings(outs, len(events))
    for name in RULES.names:
        assert np.array_equal(live[name][log.row_numbers], batch[name]), name
    table = live_units(outs)
    assert len(table) == len(units)
    if not len(units):
        return
    merged = units.merge(table, on=keys, how="left", validate="one_to_one")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        features = rulefeat.bind(rules, log, empty_units="empty").transform(units)
        p = rulefeat.bind(detector, log, empty_units="empty").predict_proba(units)[:, 1]
    for name in features.columns:
        assert same(merged[name], features[name]), name
    assert same(merged["probability"], p)  # windows without events too: scored as batch scores them


@settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**32 - 1), n_students=st.integers(1, 3), max_events=st.integers(1, 30),
       tolerance=st.sampled_from([0.0, 0.0, 2.0, 10.0]), sizes=st.lists(st.sampled_from([1, 2, 5, 40]), min_size=1,
                                                                         max_size=4))
def test_live_step_units_equal_batch(seed, n_students, max_events, tolerance, sizes):
    events = random_events(np.random.default_rng(seed), n_students, max_events, tolerance=tolerance)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        units = _step_units(EventLog(events, session_gap=SESSION_GAP))
    check_identity(STEP_DETECTOR, events, sizes, tolerance, ["student", "step"], units)


@settings(max_examples=max(EXAMPLES // 2, 5), deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**32 - 1), n_students=st.integers(1, 3), max_events=st.integers(1, 30),
       tolerance=st.sampled_from([0.0, 3.0]), sizes=st.lists(st.sampled_from([1, 3, 50]), min_size=1, max_size=3))
def test_live_windows_equal_batch(seed, n_students, max_events, tolerance, sizes):
    events = random_events(np.random.default_rng(seed), n_students, max_events, tolerance=tolerance)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        units = _windows(EventLog(events, session_gap=SESSION_GAP))
    check_identity(WINDOW_DETECTOR, events, sizes, tolerance, ["student", "start", "end"], units)


def test_a_late_event_is_refused_naming_it_and_nothing_of_the_call_is_taken():
    scorer = LiveScorer(STEP_DETECTOR, tolerance=2.0)
    scorer.feed({"student": "a", "time": 10.0, "action": "attempt", "correct": True, "step": "s1"})
    scorer.feed({"student": "a", "time": 8.5, "action": "hint", "step": "s1"})  # 1.5 s late: inserted
    with pytest.raises(LateEventError, match=r"event 3 \(student 'a', time 7\.0\).*3 s behind.*tolerance=2"):
        scorer.feed([{"student": "b", "time": 0.0, "action": "hint", "step": "s1"},
                     {"student": "a", "time": 7.0, "action": "hint", "step": "s1"}])
    assert scorer.buffer_sizes()["a"] == 2 and scorer.buffer_sizes().get("b", 0) == 0  # b's was not taken either
    out = scorer.feed({"student": "b", "time": 0.0, "action": "hint", "step": "s1"})
    assert out.event_id.tolist() == [] and scorer.close().event_id.tolist() == [1, 0, 2]


def test_a_step_the_student_had_left_is_refused():
    scorer = LiveScorer(STEP_DETECTOR)
    scorer.feed([{"student": "a", "time": t, "action": "attempt", "correct": False, "step": s}
                 for t, s in ((0, "s1"), (1, "s2"), (2, None))])
    with pytest.raises(LiveError, match=r"event 3 \(student 'a'\) returns to step 's1'"):
        scorer.feed({"student": "a", "time": 3.0, "action": "attempt", "correct": True, "step": "s1"})


@pytest.mark.parametrize(("when", "match"), [
    ("count_before(action == 'hint', within='student') > 2", r"whole history.*within='session'"),
    ("streak(not correct) > 2", r"streak\(not correct, within='student'\).*never closes"),
    ("next(action, within='step') == 'hint'", r"looks ahead within 'step'"),
])
def test_rules_live_scoring_cannot_bound_are_refused_at_construction(when, match):
    rules = RuleSet.from_toml(f'[rules.bad]\nwhen = "{when}"\n')
    detector = RuleFeatures(STEP_DETECTOR.named_steps["rules"].log, rules, unit="step")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        log = EventLog(random_events(np.random.default_rng(1), 2, 10), session_gap=SESSION_GAP)
        detector = RuleFeatures(log, rules, unit="step").fit(_step_units(log))
    with pytest.raises(LiveError, match=match) as info:
        LiveScorer(detector)
    assert "in rule 'bad'" in "".join(getattr(info.value, "__notes__", []))


def test_detectors_live_scoring_cannot_run_are_refused():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        log = EventLog(random_events(np.random.default_rng(2), 2, 10), session_gap=SESSION_GAP)
    students = pd.DataFrame({"student": ["st0", "st1"]})
    with pytest.raises(LiveError, match=r"'student' units, which do not close"):
        LiveScorer(RuleFeatures(log, RULES, unit="student").fit(students))
    with pytest.raises(LiveError, match="not fitted"):
        LiveScorer(RuleFeatures(log, RULES, unit="step"))
    union = rulefeat.make_detector(log, RULES, unit="step", random_state=0)
    with pytest.raises(LiveError, match=r"mined features.*mined=False"):
        LiveScorer(union.fit(_step_units(log), [0, 1] * (len(_step_units(log)) // 2) + [0] * (len(_step_units(log)) % 2)))


def test_look_ahead_delays_the_firing_until_the_next_event():
    scorer = LiveScorer(STEP_DETECTOR)
    first = scorer.feed({"student": "a", "time": 0.0, "action": "attempt", "correct": None, "step": "s1"})
    assert first.event_id.tolist() == []  # 'ahead' and 'later' read the next events
    second = scorer.feed({"student": "a", "time": 1.0, "action": "hint", "step": "s1"})
    assert second.event_id.tolist() == [] and len(scorer.feed(
        {"student": "a", "time": 2.0, "action": "hint", "step": "s1"}).event_id) == 1
    rest = scorer.close()
    assert rest.event_id.tolist() == [1, 2]


def test_a_restored_checkpoint_loses_and_repeats_no_event(tmp_path):
    events = random_events(np.random.default_rng(5), 3, 40, tolerance=2.0)
    whole = replay(LiveScorer(STEP_DETECTOR, tolerance=2.0), events, [7])
    first = LiveScorer(STEP_DETECTOR, tolerance=2.0)
    cut = len(events) // 2
    before = [first.feed(events.iloc[i:min(i + 7, cut)]) for i in range(0, cut, 7)]
    saved = first.checkpoint(tmp_path / "live.ckpt")
    del first  # the process dies; a new one restores from the file
    restored = LiveScorer.restore(tmp_path / "live.ckpt")
    assert LiveScorer.restore(saved).buffer_sizes() == restored.buffer_sizes()
    after = [restored.feed(events.iloc[i:i + 7]) for i in range(cut, len(events), 7)] + [restored.close()]
    for name in RULES.names:
        assert np.array_equal(live_firings(before + after, len(events))[name], live_firings(whole, len(events))[name])
    a, b = live_units(before + after), live_units(whole)
    pd.testing.assert_frame_equal(a.sort_values(["student", "step"]).reset_index(drop=True),
                                  b.sort_values(["student", "step"]).reset_index(drop=True))


def test_a_checkpoint_holds_fitted_state_and_open_buffers_only():
    scorer = LiveScorer(STEP_DETECTOR)
    replay_events = random_events(np.random.default_rng(6), 1, 400)
    for i in range(0, len(replay_events), 50):
        scorer.feed(replay_events.iloc[i:i + 50])
    saved = scorer.checkpoint()
    training = STEP_DETECTOR.named_steps["rules"]
    assert training.log is not None and b"st5" not in saved  # no training student travels with it
    with pytest.raises(LiveError, match="not a live scorer checkpoint"):
        LiveScorer.restore(b"\x80\x04N.")


@pytest.mark.parametrize(("detector", "bound"), [
    # what the rules read, times 1.5 + 8: the buffer is cut back after it grew by half (LiveScorer._trim)
    (fitted("step", DEMO_RULES), 20),  # the demo rules read the open step (6 events) and one before it
    (STEP_DETECTOR, 460),  # first(..., within='session') reads the open session: 300 events here
])
def test_memory_per_student_is_bounded_by_the_open_scopes_not_by_history(detector, bound):
    rng = np.random.default_rng(7)
    n = 2400
    gaps = rng.choice([0.5, 1.0, 4.0], n)
    gaps[::300] = 100.0  # a new session every 300 events (session_gap is 60 s)
    events = pd.DataFrame({"student": "a", "time": np.cumsum(gaps),
                           "action": np.where(rng.random(n) < 0.3, "hint", "attempt"),
                           "correct": rng.random(n) < 0.5, "step": [f"s{k // 6}" for k in range(n)]})
    scorer, largest, emitted = LiveScorer(detector), 0, 0
    for i in range(0, n, 40):
        emitted += len(scorer.feed(events.iloc[i:i + 40]).event_id)
        largest = max(largest, scorer.buffer_sizes()["a"])
    assert largest <= bound and emitted + len(scorer.close().event_id) == n


def test_advance_closes_windows_without_new_events_and_bad_input_is_named():
    units = pd.DataFrame({"student": ["a"], "start": [0.0], "end": [30.0]})
    scorer = LiveScorer(DEMO_WINDOWS, windows=units)
    scorer.feed({"student": "a", "time": 1.0, "action": "attempt", "correct": 1, "step": "s1"})
    assert scorer.advance(29.0).units.empty
    closed = scorer.advance(31.0).units
    assert closed[["student", "start", "end", "n_events"]].values.tolist() == [["a", 0.0, 30.0, 1]]
    with pytest.raises(LiveError, match=r"event 1 has correct='maybe'"):
        scorer.feed({"student": "a", "time": 40.0, "action": "attempt", "correct": "maybe"})
    with pytest.raises(LiveError, match=r"lacks the columns \['correct', 'step'\]"):
        scorer.feed(pd.DataFrame({"student": ["a"], "time": [41.0], "action": ["hint"]}))
    with pytest.raises(LiveError, match=r"no 'time' field"):
        scorer.feed({"student": "a", "action": "attempt"})
    with pytest.raises(LiveError, match=r"event 1 has a missing time"):
        scorer.feed({"student": "a", "time": None, "action": "attempt"})
    scorer.close()
    with pytest.raises(LiveError, match="closed"):
        scorer.feed({"student": "a", "time": 50.0, "action": "attempt"})


def _session_units(log: EventLog) -> pd.DataFrame:
    frame = log.to_frame()
    return frame.groupby(["student", "session"], observed=True)["time"].min().rename("unit_start").reset_index()


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_live_session_units_equal_batch(seed):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        train = EventLog(random_events(np.random.default_rng(0), 6, 40), session_gap=SESSION_GAP)
        units = _session_units(train)
        rules = RuleFeatures(train, DEMO_RULES, unit="session").fit(units[["student", "session"]].astype(object))
        events = random_events(np.random.default_rng(seed), 3, 60, tolerance=1.0)
        log = EventLog(events, session_gap=SESSION_GAP)
        sessions = _session_units(log)
        batch = rulefeat.bind(rules, log).transform(sessions[["student", "session"]].astype(object))
    scorer = LiveScorer(rules, tolerance=1.0)
    outs = replay(scorer, events, [1, 4, 9])
    table = live_units(outs)
    assert table["session"].isna().all() and len(table) == len(sessions)  # derived sessions: named by start
    merged = sessions.join(batch).merge(table, on=["student", "unit_start"], suffixes=("", "_live"))
    assert len(merged) == len(sessions)
    for name in batch.columns:
        assert same(merged[f"{name}_live"], merged[name]), name


def test_a_session_closes_when_the_clock_passes_the_session_gap():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        train = EventLog(random_events(np.random.default_rng(0), 6, 40), session_gap=SESSION_GAP)
        units = _session_units(train)[["student", "session"]].astype(object)
        rules = RuleFeatures(train, DEMO_RULES, unit="session").fit(units)
    scorer = LiveScorer(rules)
    scorer.feed([{"student": "a", "time": t, "action": "hint", "step": "s1"} for t in (0.0, 1.0, 2.0)])
    assert scorer.advance(SESSION_GAP + 1.0).units.empty  # 59 s after the last event: may go on
    closed = scorer.advance(SESSION_GAP + 3.0).units
    assert closed[["student", "unit_start", "n_events", "skimmed_hint__count"]].values.tolist() == [["a", 0.0, 3, 2.0]]


def test_a_rules_only_detector_of_make_detector_scores_live_as_in_batch():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        train = EventLog(random_events(np.random.default_rng(0), 6, 40), session_gap=SESSION_GAP)
        X = _step_units(train)
        detector = rulefeat.make_detector(train, DEMO_RULES, unit="step", mined=False, random_state=0)
        detector.fit(X, np.arange(len(X)) % 2)
        events = random_events(np.random.default_rng(21), 3, 30)
        log = EventLog(events, session_gap=SESSION_GAP)
        units = _step_units(log)
        batch = rulefeat.bind(detector, log).predict_proba(units)[:, 1]
    assert [name for name, _ in detector.named_steps["features"].transformer_list] == ["rules"]
    fast = LiveScorer(detector, predict_params={"num_threads": 1})
    assert fast._proba.__name__ == "through_booster"  # LightGBM asked through its booster
    table = live_units(replay(fast, events, [3]))
    merged = units.assign(batch=batch).merge(table, on=["student", "step"])
    assert len(merged) == len(units) and same(merged["probability"], merged["batch"])
    assert "rules__skimmed_hint__count" in table.columns
    wrapped = LiveScorer(detector, predict_params={"nthread": 1})  # a parameter the fast path does not read
    assert wrapped._proba.__name__ == "through_pipeline"
    pd.testing.assert_frame_equal(live_units(replay(wrapped, events, [3])), table)


def test_events_named_otherwise_are_read_through_a_columns_mapping():
    names = {"student": "learner", "time": "ts", "step": "item"}
    events = random_events(np.random.default_rng(8), 2, 25)
    plain = replay(LiveScorer(STEP_DETECTOR), events, [1, 6])
    renamed = replay(LiveScorer(STEP_DETECTOR, columns=names), events.rename(columns=names), [1, 6])
    for name in RULES.names:
        assert np.array_equal(live_firings(renamed, len(events))[name], live_firings(plain, len(events))[name])
    pd.testing.assert_frame_equal(live_units(renamed), live_units(plain))
    with pytest.raises(rulefeat.LogSchemaError, match=r"LiveScorer: unknown field 'stepp' in 'columns'"):
        LiveScorer(STEP_DETECTOR, columns={"stepp": "item"})
    with pytest.raises(rulefeat.errors.ParameterError, match=r"'columns' parameter of LiveScorer must be"):
        LiveScorer(STEP_DETECTOR, columns=["learner"])
    with pytest.raises(LiveError, match=r"no 'time' field \(named 'ts' by the 'columns' mapping\)"):
        LiveScorer(STEP_DETECTOR, columns=names).feed({"learner": "a", "time": 1.0, "action": "hint"})


def test_a_window_without_events_is_refused_as_in_batch_or_scored_empty():
    units = pd.DataFrame({"student": ["a", "a"], "start": [0.0, 10.0], "end": [5.0, 20.0]})
    scorer = LiveScorer(DEMO_WINDOWS, windows=units)
    scorer.feed({"student": "a", "time": 1.0, "action": "attempt", "correct": 1, "step": "s1"})
    with pytest.raises(rulefeat.UnitError, match=r"LiveScorer.feed: 1 windows of student 'a' close without "
                                                 r"events \(window row 1: start 10.0, end 20.0\).*empty_units"):
        scorer.feed({"student": "a", "time": 25.0, "action": "hint", "step": "s1"})
    assert scorer.buffer_sizes()["a"] == 1  # nothing of the refused call was taken
    with pytest.raises(rulefeat.UnitError, match=r"LiveScorer.close: 1 windows"):
        scorer.close()
    scorer.empty_units = "empty"
    with pytest.warns(rulefeat.RulefeatWarning, match=r"1 of 2 windows closed without events"):
        out = scorer.feed({"student": "a", "time": 25.0, "action": "hint", "step": "s1"})
    events = pd.DataFrame({"student": "a", "time": [1.0, 25.0], "action": ["attempt", "hint"],
                           "correct": pd.array([True, pd.NA], dtype="boolean"), "step": "s1"})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        batch = rulefeat.bind(DEMO_WINDOWS, EventLog(events, session_gap=SESSION_GAP),
                              empty_units="empty").predict_proba(units)[:, 1]
    assert out.units["n_events"].tolist() == [1, 0] and same(out.units["probability"], batch)
    with pytest.raises(rulefeat.errors.ParameterError, match=r"'empty_units' parameter of LiveScorer"):
        LiveScorer(DEMO_WINDOWS, empty_units="skip")
