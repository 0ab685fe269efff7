"""find_problems: every problem of a rules file at once, each as the library's own error with its caret line."""

from __future__ import annotations

import pandas as pd
import pytest

from rulefeat import EventLog, RuleSet
from rulefeat.errors import RuleCheckError, RuleSyntaxError
from rulefeat.rules import find_problems
from rulefeat.rules.problems import rule_line, rule_names


@pytest.fixture(scope="module")
def log():
    return EventLog(pd.DataFrame({"student": ["a", "a", "b"], "time": [0.0, 1.0, 2.0],
                                  "action": ["hint", "attempt", "attempt"], "correct": [None, 1, 0]}))


CASES = [
    # (rules file, expected [(rule, class, text in the message)])
    ('[rules.a]\nwhen = "gap < 3s"\n', []),
    ('[rules.a]\nwhen = "gapp < 3s"\n[rules.b]\nwhen = "action == \'hnt\'"\n',
     [("a", RuleCheckError, "Did you mean 'gap'?"), ("b", RuleCheckError, "Did you mean 'hint'?")]),
    ('[rules.a]\nwhen = "gap <"\n[rules.b]\nwhen = "a and gap > 1s"\n',  # b refers to broken a: one problem
     [("a", RuleSyntaxError, "ends where a value was expected")]),
    ('[rules.a]\nwhen = "b"\n[rules.b]\nwhen = "a"\n', [("b", RuleCheckError, "cycle: a -> b -> a")]),
    ('[rules.a]\nwhen = "gap > 1s"\nreport = ["ratio"]\n', [("a", RuleCheckError, "unknown report summary")]),
    ('[rules.a]\nwhen = 3\n[rules.b]\nwhen = "prev(action, within=\'stepp\') == \'hint\'"\n',
     [("a", RuleSyntaxError, "'when' must be a string"), ("b", RuleCheckError, "Did you mean 'step'?")]),
    ('[rules.a\n', [(None, RuleSyntaxError, "not valid TOML")]),
    ('[rule.a]\nwhen = "gap > 1s"\n', [(None, RuleSyntaxError, "Did you mean 'rules'?")]),
    ("", [(None, RuleSyntaxError, "defines no rules")]),
]


@pytest.mark.parametrize("text, expected", CASES)
def test_problems_table(log, text, expected):
    problems = find_problems(text, log)
    assert [(p.rule, type(p)) for p in problems] == [(r, c) for r, c, _ in expected]
    for problem, (_, _, part) in zip(problems, expected, strict=True):
        assert part in str(problem)


def test_agrees_with_bind_on_the_first_problem(log):
    # the first problem is the one RuleSet.from_toml / RuleSet.bind raise
    text = CASES[1][0]
    with pytest.raises(RuleCheckError) as raised:
        RuleSet.from_toml(text).bind(log)
    assert str(find_problems(text, log)[0]) == str(raised.value)


def test_carets_and_no_log(log):
    problems = find_problems('[rules.a]\nwhen = "gap < 3s and acton == \'hint\'"\n', log)
    assert str(problems[0]).endswith("    gap < 3s and acton == 'hint'\n                 ^^^^^")
    assert find_problems('[rules.a]\nwhen = "acton == \'hint\'"\n') == []  # without a log: syntax only


def test_rule_lines_and_names():
    text = '# rules\n\n[rules.a]\nwhen = "x"\n\n  [ rules . "b" ]\nwhen = "y"\n'
    assert rule_line(text, "a") == 3 and rule_line(text, "b") == 6 and rule_line(text, "c") is None
    assert rule_names(text) == ["a", "b"] and rule_names("[x") == []


def test_a_path_is_read(log, tmp_path):
    path = tmp_path / "r.toml"
    path.write_text('[rules.a]\nwhen = "gapp < 1s"\n')
    assert [p.rule for p in find_problems(path, log)] == ["a"]
    assert "cannot read" in str(find_problems(tmp_path / "none.toml", log)[0])
