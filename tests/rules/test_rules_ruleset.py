"""Rule, RuleSet and the TOML rules file: construction, round trips, hashing, pickling, errors."""

import dataclasses
import pickle
import re

import numpy as np
import pandas as pd
import pytest

from rulefeat import EventLog
from rulefeat.errors import RuleCheckError, RuleSyntaxError
from rulefeat.rules import DEFAULT_REPORT, SUMMARIES, Rule, RuleSet

RULES_TOML = '''
# Rules of the fictional Zorbleth tutor
[rules.skimmed_hint]
means = "hint skimming"
why   = "A second hint on the same step within 3 s of the first is too fast to have been read."
when  = "action == 'hint' and prev(action, within='step') == 'hint' and gap < 3s"
report = ["rate", "any"]

[rules.hasty_error]
when  = "action == 'attempt' and not correct and duration < 0.33 * typical(duration, per='step')"

[rules.burst]
when  = """action == 'attempt'
  and count_recent(action == 'attempt', seconds=10, within='step') >= 3"""
report = []

[rules.guess_after_skim]
when  = "hasty_error and prev(skimmed_hint, within='step')"
report = "longest_streak"
'''

LOG = EventLog(pd.DataFrame({
    "student": ["a"] * 6 + ["b"] * 3,
    "time": [0, 1, 2, 3, 4, 30, 0, 1, 2],
    "action": ["hint", "hint", "attempt", "attempt", "attempt", "attempt", "hint", "attempt", "attempt"],
    "correct": [None, None, 0, 0, 1, 0, None, 0, 1],
    "step": ["s1"] * 5 + ["s2"] + ["s1"] * 3,
    "duration": [1.0, 1.0, 0.2, 5.0, 6.0, 4.0, 2.0, 0.1, 3.0],
}))


def test_constants():
    assert SUMMARIES == ("count", "rate", "any", "longest_streak", "first_position", "first_seconds")
    assert DEFAULT_REPORT == ("count", "rate", "any")


def test_from_toml_text():
    rs = RuleSet.from_toml(RULES_TOML)
    assert rs.names == ("skimmed_hint", "hasty_error", "burst", "guess_after_skim")
    assert len(rs) == 4 and [r.name for r in rs] == list(rs.names) and "burst" in rs
    assert rs["skimmed_hint"].means == "hint skimming" and rs["skimmed_hint"].report == ("rate", "any")
    assert rs["hasty_error"].report == DEFAULT_REPORT and rs["burst"].report == ()
    assert rs["guess_after_skim"].report == ("longest_streak",)
    assert rs["burst"].when.startswith("action == 'attempt'\n  and")
    with pytest.raises(KeyError, match="no rule named 'bursts'.*Did you mean 'burst'"):
        rs["bursts"]


def test_from_toml_path(tmp_path):
    path = tmp_path / "rules.toml"
    path.write_text(RULES_TOML, encoding="utf-8")
    assert RuleSet.from_toml(path) == RuleSet.from_toml(str(path)) == RuleSet.from_toml(RULES_TOML)
    with pytest.raises(RuleSyntaxError, match=r"cannot read the rules file '.*missing.toml'"):
        RuleSet.from_toml(str(tmp_path / "missing.toml"))


def test_round_trip_and_hash():
    rs = RuleSet.from_toml(RULES_TOML)
    text = rs.to_toml()
    assert RuleSet.from_toml(text) == rs and RuleSet.from_toml(text).to_toml() == text
    assert re.fullmatch(r"[0-9a-f]{64}", rs.text_hash())
    assert rs.text_hash() == RuleSet.from_toml(text).text_hash()
    changed = RuleSet([*list(rs)[:-1], dataclasses.replace(list(rs)[-1], why="because")])
    assert changed.text_hash() != rs.text_hash()
    assert RuleSet(list(rs)[::-1]).text_hash() != rs.text_hash()  # order is part of the rule set


def test_to_toml_escapes_awkward_text():
    rule = Rule("odd", when='action == "hint" and step != \'a\\\\b\'', means='say "hi"\n\ttab \\ \r',
                why="Übung ✓")
    rs = RuleSet([rule])
    assert RuleSet.from_toml(rs.to_toml()) == rs
    assert '\\"hint\\"' in rs.to_toml() and "\\u000D" in rs.to_toml()


TOML_ERRORS = [
    ("[rules.x\nwhen = 'gap < 3'", RuleSyntaxError, r"the rules file is not valid TOML"),
    ("[rule.x]\nwhen = 'gap < 3'", RuleSyntaxError, r"unknown top-level key 'rule'\. Did you mean 'rules'\?"),
    ("title = 'x'", RuleSyntaxError, r"unknown top-level key 'title'"),
    ("", RuleSyntaxError, r"the file defines no rules"),
    ("[rules]", RuleSyntaxError, r"the file defines no rules"),
    ("[rules.x]\nwehn = 'gap < 3'", RuleSyntaxError, r"\[rules.x\]: unknown key 'wehn'\. Did you mean 'when'\?"),
    ("[rules.x]\nmeans = 'm'", RuleSyntaxError, r"\[rules.x\] has no 'when' key"),
    ("[rules.x]\nwhen = 3", RuleSyntaxError, r"\[rules.x\]: 'when' must be a string, got int"),
    ("[rules.x]\nwhen = 'gap < 3'\nreport = 3", RuleSyntaxError, r"'report' must be a list of strings"),
    ("rules = {x = 3}", RuleSyntaxError, r"\[rules.x\] must be a table with a 'when' key"),
    ("[rules.x]\nwhen = 'gap < 3'\nreport = ['rat']", RuleCheckError, r"unknown report summary 'rat'"),
    ("[rules.Bad]\nwhen = 'gap < 3'", RuleCheckError, r"name 'Bad' is not a valid rule name"),
    ("[rules.x]\nwhen = ''", RuleCheckError, r"Rule 'x': empty condition"),
    ("[rules.x]\nwhen = '''gap < 3\n  and gap << 2'''", RuleSyntaxError,
     r"Rule 'x': expected a value .*\n    line 2:   and gap << 2\n {23}\^$"),
]


@pytest.mark.parametrize("text, cls, pattern", TOML_ERRORS, ids=[t[2][:30] for t in TOML_ERRORS])
def test_toml_errors(text, cls, pattern):
    with pytest.raises(cls, match=pattern):
        RuleSet.from_toml(text)


def test_rule_is_a_frozen_value():
    rule = Rule("quick", when="gap < 3s", report="any")
    assert rule.report == ("any",) and rule == Rule("quick", when="gap < 3s", report=["any"])
    with pytest.raises(dataclasses.FrozenInstanceError):
        rule.when = "gap < 1"
    assert repr(RuleSet([rule])) == "RuleSet(['quick'])"


def test_program_api_and_determinism():
    rs = RuleSet.from_toml(RULES_TOML)
    program = rs.bind(LOG, min_count=2)
    assert program.rules is rs and program.report == {r.name: r.report for r in rs}
    assert program.min_count == 2 and not program.is_fitted
    train = LOG.for_students(["a"])
    first = program.fit(train).norms_
    second = rs.bind(LOG, min_count=2).fit(train).norms_
    assert first.keys() == second.keys() == {"typical(duration, per='step', q=0.5)"}
    for key, state in first.items():
        assert set(state) == {"function", "field", "per", "q", "among", "count", "value", "overall"}
        for name, value in state.items():
            np.testing.assert_array_equal(value, second[key][name])
    fired = program.evaluate(LOG)
    assert set(fired) == set(rs.names) and all(v.dtype == bool and len(v) == len(LOG) for v in fired.values())
    assert "Program(4 rules, 1 norms, fitted)" == repr(program)


def test_pickled_program_evaluates_the_same():
    program = RuleSet.from_toml(RULES_TOML).bind(LOG).fit(LOG)
    again = pickle.loads(pickle.dumps(program))
    for name, fired in program.evaluate(LOG).items():
        np.testing.assert_array_equal(fired, again.evaluate(LOG)[name])
    assert pickle.loads(pickle.dumps(RuleSet.from_toml(RULES_TOML))) == RuleSet.from_toml(RULES_TOML)


def test_ruleset_evaluate_frame():
    frame = RuleSet.from_toml(RULES_TOML).evaluate(LOG)
    assert list(frame.columns) == ["skimmed_hint", "hasty_error", "burst", "guess_after_skim"]
    assert frame.index.name == "input_row" and all(str(d) == "bool" for d in frame.dtypes)
    assert frame["skimmed_hint"].tolist() == [False, True] + [False] * 7
    assert frame["burst"].tolist() == [False, False, False, False, True, False, False, False, False]


def test_values_decodes_each_type():
    rs = RuleSet([Rule("quick", when="gap < 2s")])
    assert rs.values("prev(step)", LOG).astype(object).tolist()[:2] == [np.nan, "s1"]
    quick = rs.values("prev(quick)", LOG)
    assert str(quick.dtype) == "boolean" and quick.isna().tolist()[:2] == [True, False]
    assert rs.values("duration * 2", LOG).tolist()[:2] == [2.0, 2.0]
    assert rs.values("duration * 2", LOG).index.tolist() == LOG.row_numbers.tolist()


def test_empty_ruleset():
    rs = RuleSet([])
    assert len(rs) == 0 and rs.to_toml() == "" and rs.bind(LOG).evaluate(LOG) == {}
    assert rs.evaluate(LOG).shape == (len(LOG), 0)
