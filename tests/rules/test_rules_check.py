"""Check errors: every refusal names the rule, says what is wrong and puts a caret under the span."""

import re

import pandas as pd
import pytest

from rulefeat import EventLog
from rulefeat.errors import ParameterError, RuleCheckError, RulefeatError
from rulefeat.rules import Rule, RuleSet

LOG = EventLog(pd.DataFrame({
    "student": ["a", "a", "b"], "time": [0.0, 2.0, 1.0], "action": ["attempt", "hint", "attempt"],
    "correct": [1, None, 0], "step": ["s1", "s1", "s2"], "duration": [3.0, 1.0, 2.0],
}))


def underlined(message: str) -> str:
    """The text the caret line of an error message underlines."""
    source, carets = message.split("\n")[-2:]
    start = carets.index("^")
    return source[start:start + carets.count("^")]


def refuse(when, pattern, under=None, log=LOG, extra=()):
    rules = RuleSet([Rule("r", when=when), *extra])
    with pytest.raises(RuleCheckError, match=pattern) as info:
        rules.bind(log)
    message = str(info.value)
    assert message.startswith("Rule 'r': ") or message.startswith("Rule '")
    if under is not None:
        assert underlined(message) == under, message
    return message


# (condition, message pattern, text under the caret)
CHECK_ERRORS = [
    ("gapp < 3", r"unknown field or rule 'gapp'\. Did you mean 'gap'\?", "gapp"),
    ("skil == 'x'", r"unknown field or rule 'skil'", "skil"),
    ("step_position < 2 and problem == 'p'", r"unknown field 'problem': the log has no 'problem' field", "problem"),
    ("prv(action) == 'hint'", r"unknown function 'prv'\. Did you mean 'prev'\?", "prv"),
    ("open('x')", r"unknown function 'open'", "open"),
    ("__import__('os')", r"unknown function '__import__'", "__import__"),
    ("gap(3) > 1", r"'gap' is a field or rule, not a function", "gap"),
    ("prev > 1", r"'prev' is a function; call it with parentheses: prev\(expr, n=1, \*, within='student'\)",
     "prev"),
    ("prev(action, witin='step') == 'hint'", r"prev\(\) has no argument 'witin'\. Did you mean 'within'\?",
     "witin='step'"),
    ("prev(action, 1, 'step') == 'hint'", r"prev\(\) takes 2 positional argument\(s\) \(expr, n\), got 3",
     "'step'"),
    ("prev() == 'hint'", r"prev\(\) needs its 'expr' argument", "prev()"),
    ("prev(action, 2, n=3) == 'hint'", r"prev\(\) got 'n' twice", "n=3"),
    ("prev(action, n=1.5) == 'hint'", r"argument 'n' must be a whole number >= 1 written out, got 1.5", "1.5"),
    ("prev(action, n=0) == 'hint'", r"argument 'n' must be a whole number >= 1", "0"),
    ("prev(action, n=duration) == 'hint'", r"argument 'n' must be a whole number >= 1 written out, got duration",
     "duration"),
    ("prev(action, within=step) == 'hint'", r"argument 'within' must be a quoted name, e\.g\. within='step'",
     "step"),
    ("prev(action, within='stp') == 'hint'", r"unknown scope 'stp'\. Did you mean 'step'\?", "'stp'"),
    ("prev('hint') == 'hint'", r"prev\(\) argument 'expr' must be a field or an expression, not a string",
     "'hint'"),
    ("count_before(duration) > 1", r"count_before\(\) argument 'cond' needs true/false, but this is a number",
     "duration"),
    ("count_recent(correct) > 1", r"count_recent\(\) needs exactly one window", "count_recent(correct)"),
    ("count_recent(correct, actions=2, seconds=3s) > 1", r"needs exactly one window", None),
    ("count_recent(correct, seconds=0) > 1", r"argument 'seconds' must be a positive duration", "0"),
    ("abs(action) > 1", r"abs\(\) argument 'x' needs a number, but this is a category of 'action'", "action"),
    ("typical(action) > 1", r"typical\(\) needs a number field, but 'action' is a category of 'action'",
     "action"),
    ("typical(duration * 2) > 1", r"typical\(\) argument 'field' must be the name of a number field",
     "duration * 2"),
    ("typical('duration') > 1", r"must be the name of a number field .*without quotes", "'duration'"),
    ("typical(durtion) > 1", r"unknown field or rule 'durtion'\. Did you mean 'duration'\?", "durtion"),
    ("typical(duration, per='gap') > 1", r"per='gap': 'gap' is a number field; per needs a category field",
     "'gap'"),
    ("typical(duration, per='stp') > 1", r"per='stp': the log has no field 'stp'\. Did you mean 'step'\?", "'stp'"),
    ("typical(duration, q=1.5) > 1", r"argument 'q' must be a number from 0 to 1", "1.5"),
    ("typical(duration, among=duration > typical(duration)) > 1",
     r"typical\(\) cannot be used inside 'among'", "typical(duration)"),
    ("zscore(duration, among=zscore(duration) > 1) > 1", r"zscore\(\) cannot be used inside 'among'", None),
    ("typical(duration, among=duration) > 1", r"typical\(\) argument 'among' needs true/false", "duration"),
    ("action == 3", r"cannot compare a category of 'action' with a number; category labels are written as "
                    r"strings", "3"),
    ("action < 'hint'", r"ordering comparison '<' on categories: a category of 'action' has no order", "action"),
    ("duration >= correct", r"'>=' compares numbers, but this is true/false", "correct"),
    ("action == 'hnt'", r"'hnt' is not a category of 'action'\. Did you mean 'hint'\? "
                        r"Categories: \['attempt', 'hint'\]", "'hnt'"),
    ("action in ['hint', 'atempt']", r"'atempt' is not a category of 'action'\. Did you mean 'attempt'\?",
     "'atempt'"),
    ("prev(action, within='step') == 'hnt'", r"'hnt' is not a category of 'action'", "'hnt'"),
    ("action in [1, 2]", r"the value on the left is a category of 'action', so the list must hold strings",
     "1"),
    ("duration in ['a']", r"so the list must hold numbers", "'a'"),
    ("correct in [1]", r"so the list must hold true or false", "1"),
    ("correct == 1", r"cannot compare true/false with a number; write true or false", "1"),
    ("'a' == 'b'", r"both sides are strings", "'a' == 'b'"),
    ("duration == 'x'", r"cannot compare a number with a string", "duration == 'x'"),
    ("not duration", r"'not' needs true/false, but this is a number", "duration"),
    ("duration and gap < 3", r"'and' needs true/false, but this is a number", "duration"),
    ("gap < 3 or 'x'", r"'or' needs true/false, but this is a string", "'x'"),
    ("-action == 'hint'", r"unary '-' needs a number, but this is a category", "action"),
    ("duration + correct > 1", r"'\+' needs a number, but this is true/false", "correct"),
    ("duration + 1", r"the condition must be true/false, but this is a number; compare it", "duration + 1"),
    ("action", r"the condition must be true/false, but this is a category of 'action'", "action"),
    ("prev(action)", r"the condition must be true/false", "prev(action)"),
]


@pytest.mark.parametrize("when, pattern, under", CHECK_ERRORS, ids=[c[0] for c in CHECK_ERRORS])
def test_check_errors(when, pattern, under):
    refuse(when, pattern, under)


def test_scope_whose_field_the_log_lacks():
    msg = refuse("first(within='problem')", r"scope 'problem' groups events by the 'problem' field, and the log "
                 r"has none; map a column to 'problem' when building the EventLog", "'problem'")
    assert "columns={'problem': ...}" in msg


def test_missing_rule_reference_suggests_the_rule():
    other = Rule("skimmed_hint", when="action == 'hint' and gap < 3s")
    refuse("skimmed_hnt and prev(action) == 'hint'", r"unknown field or rule 'skimmed_hnt'\. Did you mean "
           r"'skimmed_hint'\?", "skimmed_hnt", extra=[other])


def test_cycles_are_refused_with_the_path():
    rules = RuleSet([Rule("a", when="b or gap < 1"), Rule("b", when="c and gap < 2"), Rule("c", when="not a")])
    with pytest.raises(RuleCheckError, match=r"Rule 'c': rules refer to each other in a cycle: a -> b -> c -> a") \
            as info:
        rules.bind(LOG)
    assert underlined(str(info.value)) == "a"
    with pytest.raises(RuleCheckError, match=r"cycle: selfish -> selfish"):
        RuleSet([Rule("selfish", when="selfish and gap < 3")]).bind(LOG)


def test_long_chain_of_rules_compiles_without_deep_recursion():
    chain = [Rule("r0", when="gap < 3")] + [Rule(f"r{i}", when=f"r{i - 1} and gap < {i + 3}") for i in range(1, 1500)]
    program = RuleSet(chain).bind(LOG)
    assert program.evaluate(LOG)["r1499"].tolist() == [False, True, False]


def test_fitted_rule_inside_among_is_refused():
    normed = Rule("slow", when="duration > typical(duration)")
    via = Rule("via", when="slow or gap < 1")
    refuse("typical(duration, among=via) > 1", r"rule 'via' uses a fitted function \(typical or zscore\), so it "
           r"cannot be used inside 'among'", "via", extra=[normed, via])


def test_rule_name_clashing_with_a_field():
    with pytest.raises(RuleCheckError, match=r"Rule 'gap': rule name 'gap' is also a field of the log; rename"):
        RuleSet([Rule("gap", when="duration > 1")]).bind(LOG)


RULE_ERRORS = [
    ({"name": "Quick"}, r"name 'Quick' is not a valid rule name; use lower-case letters"),
    ({"name": "9lives"}, r"not a valid rule name"),
    ({"name": "a-b"}, r"not a valid rule name"),
    ({"name": "x" * 65}, r"at most 64 characters"),
    ({"name": 3}, r"name 3 is not a valid rule name"),
    ({"name": "and"}, r"name 'and' is a keyword of the rule language"),
    ({"name": "prev"}, r"name 'prev' is a function name of the rule language"),
    ({"when": ""}, r"Rule 'r': empty condition"),
    ({"when": "  \n\t"}, r"Rule 'r': empty condition"),
    ({"when": None}, r"'when' must be a string of rule text, got NoneType"),
    ({"report": ["rat"]}, r"Rule 'r': unknown report summary 'rat'\. Did you mean 'rate'\? Summaries: \['count'"),
    ({"report": ["count", "count"]}, r"report lists a summary twice"),
    ({"report": 3}, r"report must be a list of summaries"),
    ({"means": 3}, r"'means' must be a string"),
]


@pytest.mark.parametrize("kw, pattern", RULE_ERRORS, ids=[c[1][:30] for c in RULE_ERRORS])
def test_rule_errors(kw, pattern):
    args = {"name": "r", "when": "gap < 3", **kw}
    with pytest.raises(RuleCheckError, match=pattern):
        Rule(**args)


def test_ruleset_errors():
    with pytest.raises(RuleCheckError, match=r"RuleSet: duplicate rule name 'x' \(items 0 and 2\)"):
        RuleSet([Rule("x", when="gap < 1"), Rule("y", when="gap < 2"), Rule("x", when="gap < 3")])
    with pytest.raises(RuleCheckError, match=r"RuleSet: item 0 is a str, not a Rule"):
        RuleSet(["gap < 3"])
    with pytest.raises(ParameterError, match=r"The 'min_count' parameter of RuleSet.bind must be a positive "
                                             r"integer\. Got 0 instead\."):
        RuleSet([Rule("x", when="gap < 1")]).bind(LOG, min_count=0)


def test_every_message_has_one_format():
    msg = refuse("action == 'hint' and gap < 3 and duration == 'x'", r"cannot compare")
    head, source, carets = msg.split("\n")
    assert head.startswith("Rule 'r': ") and source == "    action == 'hint' and gap < 3 and duration == 'x'"
    assert re.fullmatch(r" {4}\s*\^+", carets)
    assert isinstance(RuleCheckError("x"), RulefeatError) and isinstance(RuleCheckError("x"), ValueError)
