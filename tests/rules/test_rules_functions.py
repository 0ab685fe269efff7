"""Hand-computed values of every function and operator on small logs (table-driven)."""

import math
import statistics
import warnings
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from rulefeat import EventLog, LogRepairWarning
from rulefeat.errors import EvaluationError, LogSchemaError
from rulefeat.rules import FUNCTIONS, Rule, RuleSet
from rulefeat.rules import functions as functions_module

T, F, N = True, False, None

# Two students; a step label is missing on event 9. Log order = row order (already sorted).
#          0     1     2     3     4     5     6     7     8     9     10
RAW = pd.DataFrame({
    "student": ["a"] * 7 + ["b"] * 4,
    "time": [0, 1, 3, 10, 11, 12, 40, 0, 5, 20, 21],
    "action": ["attempt", "hint", "attempt", "attempt", "hint", "attempt", "attempt",
               "attempt", "attempt", "hint", "attempt"],
    "correct": [0, None, 0, 1, None, 1, 0, 1, 0, None, 1],
    "step": ["s1", "s1", "s1", "s2", "s2", "s1", "s3", "s1", "s2", None, "s2"],
    "problem": ["p1"] * 6 + ["p2", "p1", "p1", "p2", "p2"],
    "duration": [2, 1, 4, 3, 5, 6, 7, 8, None, 1, 2],
    "target": ["s1", "s2", "s2", "s2", "x", "s1", "s3", "s1", "s1", "s2", "x"],
})
LOG = EventLog(RAW)
# gap: [nan, 1, 2, 7, 1, 1, 28, nan, 5, 15, 1]


def vals(expr, log=LOG, rules=(), **kw):
    series = RuleSet(list(rules)).values(expr, log, **kw)
    out = []
    for v in series.astype(object):
        if v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v)):
            out.append(None)
        else:
            out.append(round(v, 9) if isinstance(v, float) else v)
    return out


A, H = "attempt", "hint"
LN = [round(math.log(x), 9) for x in (2, 3, 4, 5, 6)]

CASES = [
    # prev / next
    ("prev(action)", [N, A, H, A, A, H, A, N, A, A, H]),
    ("prev(action, within='step')", [N, A, H, N, A, A, N, N, N, N, A]),
    ("prev(duration, n=2, within='step')", [N, N, 2, N, N, 1, N, N, N, N, N]),
    ("prev(duration, 2, within='step')", [N, N, 2, N, N, 1, N, N, N, N, N]),
    ("prev(correct, within='problem')", [N, F, N, F, T, N, N, N, T, N, N]),
    ("next(action, within='step')", [H, A, A, H, N, N, N, N, A, N, N]),
    ("next(time, n=3)", [10, 11, 12, 40, N, N, N, 21, N, N, N]),
    ("prev(3)", [N, 3, 3, 3, 3, 3, 3, N, 3, 3, 3]),
    ("prev(gap < 3s, within='session')", [N, N, T, T, F, T, T, N, N, F, F]),
    # count_before / count_recent / streak / first
    ("count_before(action == 'hint')", [0, 0, 1, 1, 1, 2, 2, 0, 0, 0, 1]),
    ("count_before(action == 'attempt' and not correct, within='step')", [0, 1, 1, 0, 0, 2, 0, 0, 0, N, 1]),
    ("count_before(not correct)", [0, 1, 1, 2, 2, 2, 2, 0, 0, 1, 1]),  # unknown does not count
    ("count_recent(action == 'attempt', actions=2)", [1, 1, 1, 2, 1, 1, 2, 1, 2, 1, 1]),
    ("count_recent(action == 'attempt', actions=1)", [1, 0, 1, 1, 0, 1, 1, 1, 1, 0, 1]),
    ("count_recent(action == 'attempt', seconds=10s)", [1, 1, 2, 3, 2, 3, 1, 1, 2, 0, 1]),
    ("count_recent(action == 'attempt', seconds=10s, within='step')", [1, 1, 2, 1, 1, 2, 1, 1, 1, N, 1]),
    ("streak(action == 'attempt')", [1, 0, 1, 2, 0, 1, 2, 1, 2, 0, 1]),
    ("streak(action == 'attempt', within='step')", [1, 0, 1, 1, 0, 2, 1, 1, 1, N, 2]),
    ("streak(correct)", [0, 0, 0, 1, 0, 1, 0, 1, 0, 0, 1]),
    ("first()", [T, F, F, T, F, F, T, T, T, N, F]),
    ("first(within='problem')", [T, F, F, F, F, F, T, T, F, T, F]),
    ("first(action == 'hint', within='student')", [F, T, F, F, F, F, F, F, F, T, F]),
    ("first(action == 'attempt' and correct, within='problem')", [F, F, F, T, F, F, F, T, F, F, T]),
    # typical: s1 has 5 durations (median 4); s2 and s3 too few -> overall median of all 10 durations, 3.5
    ("typical(duration)", [4, 4, 4, 3.5, 3.5, 4, 3.5, 4, 3.5, 3.5, 3.5]),
    ("typical(duration, per='step', q=0.5)", [4, 4, 4, 3.5, 3.5, 4, 3.5, 4, 3.5, 3.5, 3.5]),
    # attempts only, min_count=2: s1 [2,4,6,8] -> 3.5; s2 [3,2] -> 2.25; s3 rare and no-step -> overall 2.5
    ("typical(duration, q=0.25, among=action == 'attempt')",
     [3.5, 3.5, 3.5, 2.25, 2.25, 3.5, 2.5, 3.5, 2.25, 2.5, 2.25], {"min_count": 2}),
    ("typical(duration, per='problem', q=1)", [8, 8, 8, 8, 8, 8, 8, 8, 8, 8, 8]),
    # zscore signs: p1 has 7 durations (mean 29/7); p2 has 3 < 5 -> overall mean 3.9
    ("zscore(duration, per='problem') > 0", [F, F, F, F, T, T, T, T, N, F, F]),
    # missing / abs / log / min / max
    ("missing(gap)", [T, F, F, F, F, F, F, T, F, F, F]),
    ("missing(step)", [F, F, F, F, F, F, F, F, F, T, F]),
    ("missing(correct)", [F, T, F, F, T, F, F, F, F, T, F]),
    ("missing(prev(step, within='step'))", [T, F, F, T, F, F, T, T, T, T, F]),
    ("abs(duration - 5)", [3, 4, 1, 2, 0, 1, 2, 3, N, 4, 3]),
    ("log(duration - 2)", [N, N, LN[0], 0, LN[1], LN[2], LN[3], LN[4], N, N, N]),
    ("min(duration, gap)", [N, 1, 2, 3, 1, 1, 7, N, N, 1, 1]),
    ("max(duration, 3)", [3, 3, 4, 3, 5, 6, 7, 8, N, 3, 3]),
    # operators and three-valued logic
    ("gap < 3s", [N, T, T, F, T, T, F, N, F, F, T]),
    ("not (gap < 3s)", [N, F, F, T, F, F, T, N, T, T, F]),
    ("gap < 3 or action == 'attempt'", [T, T, T, T, T, T, T, T, T, F, T]),
    ("gap < 3 and action == 'hint'", [F, T, F, F, T, F, F, F, F, F, F]),
    ("gap >= 0.1min", [N, F, F, T, F, F, T, N, F, T, F]),
    ("gap > 500ms and gap <= 0.002h", [N, T, T, T, T, T, F, N, T, F, T]),
    ("correct == false", [T, N, T, F, N, F, T, F, T, N, F]),
    ("correct != true", [T, N, T, F, N, F, T, F, T, N, F]),
    ("not correct", [T, N, T, F, N, F, T, F, T, N, F]),
    ("correct or true", [T] * 11),
    ("correct and false", [F] * 11),
    ("duration / (gap - 1)", [N, N, 4, 0.5, N, N, round(7 / 27, 9), N, N, round(1 / 14, 9), N]),
    ("-duration * 2 + 1", [-3, -1, -7, -5, -9, -11, -13, -15, N, -1, -3]),
    ("step in ['s1', 's3']", [T, T, T, F, F, T, T, T, F, N, F]),
    ("step not in ['s1', 's3']", [F, F, F, T, T, F, F, F, T, N, T]),
    ("duration in [1, 2]", [T, T, F, F, F, F, F, F, N, T, T]),
    ("duration not in [-1, 2e0]", [F, T, T, T, T, T, T, T, N, T, F]),
    ("correct in [true]", [F, N, F, T, N, T, F, T, F, N, T]),
    ("step == prev(step)", [N, T, T, F, T, F, F, N, F, N, N]),
    ("step == target", [T, F, F, T, F, T, T, T, F, N, F]),  # different fields: labels compared as text
    ("step != target", [F, T, T, F, T, F, F, F, T, N, T]),
    ("'hint' == action", [F, T, F, F, T, F, F, F, F, T, F]),
    ("1 < 2", [T] * 11),
    ("step_position == 1 and problem_position >= 1", [T, F, F, T, F, F, T, T, T, N, F]),
]


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_hand_computed_values(case):
    expr, expected, kw = (*case, {})[:3]
    assert vals(expr, **kw) == expected


def test_typical_fitted_on_training_students_only():
    # student a only, min_count=3: s1 [2,1,4,6] -> 3; everything else -> a's overall median 4.
    got = vals("typical(duration)", train=LOG.for_students(["a"]), min_count=3)
    assert got == [3, 3, 3, 4, 4, 3, 4, 3, 4, 4, 4]


def test_zscore_against_statistics_module():
    # Reference: Python's statistics.mean / statistics.stdev (sample sd, n - 1).
    got = RuleSet([]).values("zscore(duration, per='problem')", LOG, min_count=3).tolist()
    p1, p2 = [2, 1, 4, 3, 5, 6, 8], [7, 1, 2]
    problem = RAW["problem"].tolist()
    for i, (d, p) in enumerate(zip(RAW["duration"], problem, strict=True)):
        ref = p1 if p == "p1" else p2
        if pd.isna(d):
            assert math.isnan(got[i])
        else:
            assert got[i] == pytest.approx((d - statistics.mean(ref)) / statistics.stdev(ref), rel=1e-12)


def test_zscore_fallbacks():
    # s1 has 5 values; s2 and s3 fall back to overall moments; a key with sd 0 takes the overall sd.
    raw = pd.DataFrame({"student": ["a"] * 6, "time": range(6), "action": ["attempt"] * 6,
                        "step": ["s1", "s1", "s1", "s2", "s2", "s3"], "duration": [4, 4, 4, 1, 3, 8]})
    log = EventLog(raw)
    every = [4, 4, 4, 1, 3, 8]
    m, sd = statistics.mean(every), statistics.stdev(every)
    got = vals("zscore(duration)", log=log, min_count=3)
    assert got == pytest.approx([0, 0, 0, (1 - m) / sd, (3 - m) / sd, (8 - m) / sd])
    got = vals("zscore(duration)", log=log, min_count=2)
    assert got == pytest.approx([0, 0, 0, -1 / math.sqrt(2), 1 / math.sqrt(2), (8 - m) / sd])
    flat = EventLog(raw.assign(duration=5.0))
    assert vals("zscore(duration)", log=flat, min_count=1) == [None] * 6  # overall sd 0: nothing to scale by


def test_count_recent_seconds_excludes_ties_after_current_event():
    raw = pd.DataFrame({"student": ["a"] * 4, "time": [0, 5, 5, 5], "action": ["attempt"] * 4})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        log = EventLog(raw)
    assert vals("count_recent(action == 'attempt', seconds=1s)", log=log) == [1, 1, 2, 3]
    assert vals("count_recent(action == 'attempt', seconds=5s)", log=log) == [1, 2, 3, 4]


def test_category_field_without_labels():
    # Regression (found by the reference test): comparing with a field that has no labels at all.
    log = EventLog(RAW.assign(tag=pd.Series([None] * 11, dtype=object)))
    assert vals("step == tag", log=log) == [None] * 11
    assert vals("missing(tag) and first(within='student')", log=log) == [T] + [F] * 6 + [T] + [F] * 3


def test_norms_with_no_training_values_are_missing():
    got = vals("typical(duration, among=action == 'hint' and action == 'attempt')")
    assert got == [None] * 11


RULES = [Rule("quick", when="gap < 3s"), Rule("after_quick", when="prev(quick) and action == 'attempt'")]


def test_rule_references_are_definite():
    assert vals("quick", rules=RULES) == [F, T, T, F, T, T, F, F, F, F, T]
    assert vals("not quick", rules=RULES) == [T, F, F, T, F, F, T, T, T, T, F]
    assert vals("prev(quick)", rules=RULES) == [N, F, T, T, F, T, T, N, F, F, F]
    assert vals("after_quick", rules=RULES) == [F, F, T, T, F, T, T, F, F, F, F]


def test_evaluate_returns_bool_arrays_in_log_order_for_sub_logs():
    rules = RuleSet(RULES)
    program = rules.bind(LOG)
    assert program.is_fitted  # no norms: no fit needed
    full = program.evaluate(LOG)
    sub = program.evaluate(LOG.for_students(["b"]))
    assert list(full) == ["quick", "after_quick"]
    assert full["quick"].dtype == bool and full["quick"].tolist()[7:] == sub["quick"].tolist()
    frame = rules.evaluate(LOG)
    assert frame.index.name == "input_row" and frame.index.tolist() == LOG.row_numbers.tolist()
    assert frame["quick"].tolist() == full["quick"].tolist()


def test_program_needs_fit_when_rules_use_norms():
    program = RuleSet([Rule("slow", when="duration > 2 * typical(duration)")]).bind(LOG)
    assert not program.is_fitted and program.norms_ == {}
    with pytest.raises(EvaluationError, match=r"uses? fitted norms \(typical\(duration, per='step', q=0.5\)\); "
                                              r"call program.fit\(train_log\) first"):
        program.evaluate(LOG)
    program.fit(LOG)
    assert program.is_fitted
    state = program.norms_["typical(duration, per='step', q=0.5)"]
    assert state["function"] == "typical" and state["per"] == "step" and state["overall"] == 3.5
    assert state["count"].tolist() == [5, 3, 1] and state["value"].tolist() == [4, 3.5, 3.5]


def test_log_with_other_labels_is_matched_by_label_and_other_schema_is_refused():
    program = RuleSet([Rule("s1", when="step == 's1'"),
                       Rule("slow", when="duration > typical(duration, per='step', q=1)")]).bind(LOG, min_count=1)
    program.fit(LOG)
    # Another log numbers its steps its own way: 's0' comes first and 's3' is gone.  Labels, not codes, decide.
    relabelled = RAW.assign(step=RAW["step"].replace({"s3": "s4"}))
    other_raw = pd.concat([RAW.iloc[:1].assign(student="z", step="s0"), relabelled], ignore_index=True)
    other = EventLog(other_raw)
    got = program.evaluate(other)
    expected = program.evaluate(LOG)
    rows = np.argsort(other.row_numbers)[1:]  # the events of RAW, in input order
    back = np.argsort(LOG.row_numbers)
    np.testing.assert_array_equal(got["s1"][rows], expected["s1"][back])
    kept = (relabelled["step"] != "s4").to_numpy()  # 's4' is unseen: it takes the overall norm instead
    np.testing.assert_array_equal(got["slow"][rows][kept], expected["slow"][back][kept])
    with pytest.raises(LogSchemaError, match=r"Program.fit: .*'step' is a category field, but in this log it is "
                                             r"missing"):
        program.fit(EventLog(RAW.drop(columns=["step"])))


def test_shared_sub_expressions_are_computed_once(monkeypatch):
    calls = []
    spec = FUNCTIONS["prev"]

    def counting(ev, call):
        calls.append(call)
        return spec.kernel(ev, call)

    monkeypatch.setitem(functions_module.FUNCTIONS, "prev", replace(spec, kernel=counting))
    rules = RuleSet([
        Rule("two_hints", when="action == 'hint' and prev(action, within='step') == 'hint'"),
        Rule("hint_then_try", when="action == 'attempt' and prev(action, within = 'step', n=1) == 'hint'"),
        Rule("after_two", when="prev(action, within='step') == 'hint' and two_hints"),
    ])
    program = rules.bind(LOG)
    program.evaluate(LOG)
    assert len(calls) == 1  # one shared prev(action, within='step') for three rules
    program.evaluate(LOG)
    assert len(calls) == 2  # memo lives for one evaluate() call only


def test_scope_orderings_are_cached_on_the_log():
    log = EventLog(RAW)
    RuleSet([Rule("x", when="prev(action, within='step') == 'hint'")]).bind(log).evaluate(log)
    groups = log.cached(("rulefeat.rules", "groups", "step"), lambda: None)
    assert groups is not None
    assert groups.order.tolist() == [9, 0, 1, 2, 5, 3, 4, 6, 7, 8, 10]  # ungrouped first, then by group


def test_every_function_has_a_hand_computed_case():
    tested = {expr.split("(")[0].split()[-1] for expr, *_ in CASES}
    assert set(FUNCTIONS) <= tested
