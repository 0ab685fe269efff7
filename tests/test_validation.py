"""Parameter validation as data (rulefeat._validation): constraint words, the one message format, hints."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from rulefeat import EventLog, LogFeatures, RuleFeatures
from rulefeat._validation import Constraint, Flag, InstanceOf, Interval, Options, Satisfies, validate
from rulefeat.errors import EvaluationError, ParameterError


@pytest.mark.parametrize("constraint, good, bad, text", [
    (Interval(int, 1), [1, 7, np.int64(3)], [0, 1.0, True, "2", None], "an int >= 1"),
    (Interval(int, 0, none=True, noun="an integer"), [None, 0], [-1, 0.5], "None or an integer >= 0"),
    (Interval(float, 0, 1, closed="neither"), [0.5, 1e-9], [0, 1, True, "0.5"], "a float strictly between 0 and 1"),
    (Interval(float, 0, 1, closed="right"), [1.0, 0.1], [0.0, 1.5], "a float in (0, 1]"),
    (Interval(float, high=10, closed="neither"), [9.9, -3], [10, 11], "a float < 10"),
    (Options(("error", "empty")), ["error", "empty"], ["Error", None, np.array(["error"])], "one of ['error', 'empty']"),
    (Flag(), [True, False, np.True_], [1, 0, "yes", None], "True or False"),
    (InstanceOf(dict, "a dict", none=True), [None, {}], [[], "x"], "None or a dict"),
    (Satisfies(lambda v: v != 0, "non-zero"), [1, -1], [0], "non-zero"),
])
def test_constraints_accept_and_refuse_and_say_what_is_valid(constraint, good, bad, text):
    assert constraint.text == text
    assert all(constraint.test(v) for v in good)
    assert not any(constraint.test(v) for v in bad)


def test_the_message_names_parameter_function_rule_and_value_with_a_hint():
    with pytest.raises(ParameterError, match=r"^The 'alternative' parameter of f must be one of \['greater', "
                                             r"'two-sided'\]\. Got 'greatr' instead\. Did you mean 'greater'\?$"):
        validate("f", {"alternative": "greatr"}, {"alternative": Options(("greater", "two-sided"))})


def test_constraints_are_checked_in_order_with_the_chosen_error_and_plain_tuples_still_work():
    constraints = {"a": Interval(int, 1), "b": (lambda v: v == "x", "the letter x")}
    with pytest.raises(EvaluationError, match="'a' parameter of g must be an int >= 1. Got 0"):
        validate("g", {"a": 0, "b": "y"}, constraints, error=EvaluationError)
    with pytest.raises(ParameterError, match="'b' parameter of g must be the letter x. Got 'y' instead."):
        validate("g", {"a": 1, "b": "y"}, constraints)
    validate("g", {"a": 1, "b": "x"}, constraints)
    assert isinstance(Options(("x",)), Constraint)


def test_both_transformers_share_order_defaults_and_checks(tiny_log):
    rule_params = list(RuleFeatures.__init__.__code__.co_varnames[1:RuleFeatures.__init__.__code__.co_argcount])
    mined_params = list(LogFeatures.__init__.__code__.co_varnames[1:LogFeatures.__init__.__code__.co_argcount])
    assert rule_params == ["log", "rules"] and mined_params == ["log"]  # the rest is keyword-only
    r, m = RuleFeatures(tiny_log).get_params(), LogFeatures(tiny_log).get_params()
    assert {k: r[k] for k in ("unit", "missing_students")} == {k: m[k] for k in ("unit", "missing_students")}
    with pytest.raises(TypeError):
        LogFeatures(tiny_log, "window")  # options by keyword only
    for transformer in (RuleFeatures(tiny_log, [], missing_students="drop"), LogFeatures(tiny_log, missing_students="drop")):
        with pytest.raises(ParameterError, match=r"The 'missing_students' parameter of \w+Features must be one of "
                                                 r"\['error', 'empty'\]\. Got 'drop' instead\."):
            transformer.fit(pd.DataFrame({"student": ["a"]}))


@pytest.fixture
def tiny_log():
    return EventLog(pd.DataFrame({"student": ["a", "a"], "time": [0.0, 1.0], "action": ["attempt", "hint"]}))
