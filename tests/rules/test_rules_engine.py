"""The rule engine's plan: shared sub-expressions, freed arrays, rule order, work budget, fast errors.

Behaviour only (what is computed, how often, what is kept); speed lives in benchmarks/.
"""

from __future__ import annotations

import pickle
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rulefeat import EventLog, LogRepairWarning, Rule, RuleSet
from rulefeat._text import suggest
from rulefeat.errors import ParameterError, RuleCheckError
from rulefeat.rules import compile as rules_compile
from rulefeat.rules import kernels, norms, scan
from rulefeat.rules.parse import parse


def _log(n_students=3, per_student=12, seed=0, **extra) -> EventLog:
    rng = np.random.default_rng(seed)
    n = n_students * per_student
    frame = pd.DataFrame({
        "student": np.repeat([f"s{i}" for i in range(n_students)], per_student),
        "time": np.tile(np.cumsum(rng.uniform(0.5, 6.0, per_student)), n_students),
        "action": rng.choice(["attempt", "hint"], n),
        "step": rng.choice(["a", "b"], n),
        "duration": rng.uniform(0.1, 20.0, n),
    })
    for name, values in extra.items():
        frame[name] = values
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        return EventLog(frame)


# -- shared sub-expressions and freed arrays ---------------------------------------------------------------
def test_a_sub_expression_shared_by_two_rules_runs_once(monkeypatch):
    calls = []
    real = kernels.count_recent_seconds

    def counting(*args, **kw):
        calls.append(args[-1])
        return real(*args, **kw)

    monkeypatch.setattr(kernels, "count_recent_seconds", counting)
    log = _log()
    window = "count_recent(action == 'attempt', seconds=10s, within='step')"
    rules = RuleSet([Rule("a", when=f"{window} >= 2"), Rule("b", when=f"action == 'hint' and {window} >= 1")])
    program = rules.bind(log).fit(log)
    program.evaluate(log)
    assert calls == [10.0]
    alone = RuleSet([Rule("b", when=f"action == 'hint' and {window} >= 1")]).bind(log)._plan().work["b"]
    assert program._plan().work["b"] == alone - 2  # b adds only what a did not compute: not the window


def test_arrays_are_released_after_their_last_reader(monkeypatch):
    sizes = []

    class Tracked(dict):
        def __setitem__(self, key, value):
            super().__setitem__(key, value)
            sizes.append(len(self))

    log = _log()
    wide = " or ".join(f"count_recent(action == 'attempt', seconds={k + 1}s) > 2" for k in range(60))
    program = RuleSet([Rule("wide", when=wide)]).bind(log)
    ev = rules_compile.Evaluator(log, program, {}, program._plan())
    ev.memo = Tracked()
    fired = ev.rules(program._plan().names)
    assert ev.memo == {}  # nothing outlives the evaluation but the firings
    assert max(sizes) <= 6  # the fold keeps one operand's chain alive at a time, not 180 arrays
    reference = RuleSet([Rule("wide", when=wide)]).evaluate(log)["wide"].to_numpy()
    np.testing.assert_array_equal(fired["wide"], reference)


def test_keeping_every_array_gives_the_same_firings():
    log = _log()
    texts = {"base": "action == 'hint'", "twice": "base and prev(base) and not prev(base, 2)",
             "wide": " or ".join(f"count_recent(action == 'attempt', seconds={k + 1}s) > 2" for k in range(5))}
    program = RuleSet([Rule(n, when=t) for n, t in texts.items()]).bind(log)
    kept, freed = program.evaluate(log, release=False), program.evaluate(log)
    assert list(kept) == list(freed)
    for name in texts:
        np.testing.assert_array_equal(kept[name], freed[name])


def test_a_rule_used_twice_in_one_fold_stays_available():
    log = _log()
    rules = RuleSet([Rule("r0", when="action == 'hint'"), Rule("r1", when="r0 and r0 and prev(r0)")])
    fired = rules.evaluate(log)
    hint = log.values("action") == list(log.categories("action")).index("hint")
    prev = RuleSet([Rule("p", when="prev(action == 'hint')")]).evaluate(log)["p"].to_numpy()
    np.testing.assert_array_equal(fired["r1"].to_numpy(), hint & prev)


# -- rule order ----------------------------------------------------------------------------------------------
def test_rules_listed_before_their_dependencies_give_the_same_firings():
    log = _log()
    texts = {"base": "action == 'hint'", "twice": "base and prev(base)", "late": "twice or gap > 4s"}
    forward = RuleSet([Rule(n, when=t) for n, t in texts.items()]).evaluate(log)
    backward = RuleSet([Rule(n, when=t) for n, t in reversed(texts.items())]).evaluate(log)
    assert list(backward.columns) == ["late", "twice", "base"]  # output keeps the rule-set order
    pd.testing.assert_frame_equal(forward, backward[forward.columns])


def test_a_long_chain_of_rules_is_evaluated_in_dependency_order():
    log = _log()
    # c_k fires where at least k of the previous events (and this one) in the student's history are hints.
    rules = [Rule("c0", when="true")] + [Rule(f"c{k}", when=f"c{k - 1} and count_before(action == 'hint') "
                                                             f">= {k - 1}") for k in range(1, 400)]
    fired = RuleSet(list(reversed(rules))).evaluate(log)
    before = RuleSet([]).values("count_before(action == 'hint')", log).to_numpy()
    for k in (1, 5, 399):
        np.testing.assert_array_equal(fired[f"c{k}"].to_numpy(), before >= k - 1)


# -- the work budget -----------------------------------------------------------------------------------------
def test_a_rule_set_over_the_work_budget_is_refused_at_bind_naming_the_rule():
    log = _log()
    rules = RuleSet([Rule("small", when="gap < 3s"),
                     Rule("huge", when=" or ".join(f"count_recent(small, seconds={k}s) > 1" for k in range(1, 40)))])
    rules.bind(log)  # within the default budget
    with pytest.raises(RuleCheckError, match=r"Rule 'huge': RuleSet.bind: .*max_work=1,000") as info:
        rules.bind(log, max_work=1000)
    assert "log.for_students" in str(info.value)
    assert info.value.rule == "huge"


def test_the_budget_is_checked_again_on_a_larger_log():
    small, large = _log(n_students=1), _log(n_students=10)
    rules = RuleSet([Rule("quick", when="action == 'hint' and gap < 3s")])
    work = rules.bind(small)._plan().work["quick"]
    program = rules.bind(small, max_work=work * len(small)).fit(small)
    program.evaluate(small)
    with pytest.raises(RuleCheckError, match="Program.evaluate: .*max_work"):
        program.evaluate(large)


@pytest.mark.parametrize("bad", [0, -5, 1.5, True, "10"])
def test_a_bad_work_budget_is_refused(bad):
    with pytest.raises(ParameterError, match="'max_work' parameter of RuleSet.bind"):
        RuleSet([Rule("r", when="gap < 3s")]).bind(_log(), max_work=bad)


# -- kernels against references ------------------------------------------------------------------------------
@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(st.integers(-1, 4), st.one_of(st.floats(-1e6, 1e6), st.just(float("nan")),
                                                         st.sampled_from([0.0, 1.0, -np.inf, np.inf]))),
                min_size=0, max_size=60),
       st.sampled_from([0.0, 0.1, 0.25, 0.5, 0.9, 1.0]))
def test_per_key_quantiles_equal_numpy_quantile_to_the_bit(pairs, q):
    # Reference library: numpy.quantile(method='linear'), per key (finite values: a key at its top
    # rank takes its largest value even when infinite) and overall (any values).
    keys = np.array([k for k, _ in pairs], dtype=np.int32)
    values = np.array([v for _, v in pairs], dtype=np.float64)
    count, got = norms.grouped_quantile(values, keys, 5, q)
    ok = ~np.isnan(values)
    with np.errstate(invalid="ignore"):
        np.testing.assert_array_equal(got[5], np.quantile(values[ok], q) if ok.any() else np.nan)
    values[np.isinf(values)] = 7.5
    count, got = norms.grouped_quantile(values, keys, 5, q)
    for key in range(5):
        chosen = values[ok & (keys == key)]
        assert count[key] == len(chosen)
        want = np.quantile(chosen, q) if len(chosen) else np.nan
        np.testing.assert_array_equal(got[key], want)


@settings(max_examples=100, deadline=None)
@given(st.lists(st.integers(-1, 6), max_size=80))
def test_the_scope_permutation_is_a_stable_sort_by_group(ids):
    ids = np.array(ids, dtype=np.int64)
    order = scan.group_order(ids, int(ids.max(initial=-1)) + 1)
    np.testing.assert_array_equal(order, np.argsort(ids, kind="stable"))


# -- fast errors and log build -------------------------------------------------------------------------------
def test_suggestions_among_many_labels_find_one_edit_typos_and_nothing_unrelated():
    labels = [f"item-{k:05d}" for k in range(50_000)]
    assert suggest("itme-01234", labels) == ["item-01234"]
    assert suggest("ITEM-01234", labels) == ["item-01234"]
    assert "0123" in suggest("item-0123", labels)[0]  # a label one insertion away
    assert suggest("zebra crossing", labels) == []


def test_a_misspelt_label_of_a_field_with_many_labels_gets_a_suggestion():
    n = 3000
    log = _log(n_students=10, per_student=300, item=[f"card-{k:04d}" for k in range(n)])
    with pytest.raises(RuleCheckError, match=r"'crad-0042' is not a category of 'item'\. Did you mean 'card-0042'"):
        RuleSet([Rule("one", when="item == 'crad-0042'")]).bind(log)
    fired = RuleSet([Rule("one", when="item == 'card-0042' or item in ['card-0007']")]).evaluate(log)
    assert fired["one"].sum() == 2


def test_many_distinct_action_labels_map_to_their_own_codes():
    n = 6000
    labels = ["attempt", "hint", *(f"act{k:05d}" for k in range(n - 2))]
    frame = pd.DataFrame({"student": "s", "time": np.arange(n, dtype=float), "action": labels[::-1]})
    with pytest.warns(LogRepairWarning, match="actions of a kind other than 'attempt' or 'hint': 5998"):
        log = EventLog(frame)
    assert log.decoded("action").astype(str).tolist() == labels[::-1]


def test_a_sub_log_of_every_student_is_the_log_itself():
    log = _log()
    assert log.for_students(list(log.students)) is log
    assert len(log.for_students(["s0"])) == 12


def test_nodes_forget_their_remembered_hash_when_pickled():
    tree = parse("gap < 3s and prev(action) == 'hint'", rule="r")
    hash(tree)
    state = pickle.dumps(tree)
    assert b"_hash" not in state
    assert pickle.loads(state) == tree
