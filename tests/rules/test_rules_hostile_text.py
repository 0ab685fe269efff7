"""Rule files and rule metadata from a careless or hostile author: deep nesting, hidden characters, runaway text."""

import pandas as pd
import pytest

from rulefeat import EventLog, Rule, RuleCheckError, RuleSet, RuleSyntaxError
from rulefeat.limits import MAX_RULE_TEXT, MAX_TOML_DEPTH
from rulefeat.log.xapi import XapiMapping
from rulefeat.rules import find_problems
from rulefeat.rules.problems import rule_names

DEEP = "[rules.quick]\nwhen = 'gap < 3s'\nmeans = " + "[" * 5000 + "]" * 5000 + "\n"


def test_deeply_nested_toml_is_refused_before_parsing(tmp_path):
    path = tmp_path / "deep.toml"
    path.write_text(DEEP, encoding="utf-8")
    with pytest.raises(RuleSyntaxError, match=r"the rules file '.*deep\.toml': the TOML text nests 5000 levels.*"
                                              r"limit of 32 \(rulefeat\.limits\.MAX_TOML_DEPTH\)"):
        RuleSet.from_toml(path)
    with pytest.raises(RuleSyntaxError, match=r"the rules text: the TOML text nests 5000 levels"):
        RuleSet.from_toml(DEEP)
    problems = find_problems(path)
    assert len(problems) == 1 and "MAX_TOML_DEPTH" in str(problems[0]) and problems[0].rule is None
    assert rule_names(DEEP) == []
    with pytest.raises(Exception, match=r"XapiMapping\.from_toml: the TOML text nests") as caught:
        XapiMapping.from_toml("[actions]\nx = " + "{a = " * 3000 + "1" + "}" * 3000 + "\n")
    assert caught.type.__module__ == "rulefeat.errors"


def test_nesting_at_the_limit_still_reads_and_brackets_in_strings_do_not_count():
    ok = "[rules.quick]\nwhen = \"action in ['hint'] and '[[[[' != step\"  # [[[[[[\nwhy = '''" + "[" * 99 + "'''\n"
    assert RuleSet.from_toml(ok).names == ("quick",)
    at_limit = "x = " + "[" * MAX_TOML_DEPTH + "]" * MAX_TOML_DEPTH + "\n"
    with pytest.raises(RuleSyntaxError, match="unknown top-level key 'x'"):  # past the depth check, to tomllib
        RuleSet.from_toml(at_limit)


@pytest.mark.parametrize("field", ["means", "why"])
@pytest.mark.parametrize("char, shown", [("\x00", r"\\x00"), ("\u202e", r"\\u202e"), ("\x1b", r"\\x1b"),
                                         ("\u2066", r"\\u2066"), ("\x85", r"\\x85")])
def test_hidden_characters_in_rule_metadata_are_refused_naming_rule_field_and_position(field, char, shown):
    text = "rapid " + char + "guess"
    with pytest.raises(RuleCheckError, match=rf"Rule 'hasty': '{field}' holds the hidden character {shown} at "
                                             rf"position 6"):
        Rule("hasty", when="gap < 3s", **{field: text})
    toml = f"[rules.hasty]\nwhen = 'gap < 3s'\n{field} = \"rapid \\u{ord(char):04X}guess\"\n"
    with pytest.raises(RuleCheckError, match=rf"'{field}' holds the hidden character {shown}"):
        RuleSet.from_toml(toml)


def test_tabs_line_breaks_markup_and_long_text_within_the_limit_are_kept():
    why = "Too fast\tto read:\n<script>alert(1)</script> [x](javascript:alert(1)) =SUM(A1) $\\foo$ " + "x" * 4000
    rule = Rule("skim", when="gap < 3s", means="=1+1", why=why)
    assert RuleSet.from_toml(RuleSet([rule]).to_toml())["skim"].why == why


def test_rule_text_longer_than_the_limit_is_refused():
    with pytest.raises(RuleCheckError, match=r"'why' has 20,001 characters, more than the limit of 20,000 "
                                             r"\(rulefeat\.limits\.MAX_RULE_TEXT\)"):
        Rule("skim", when="gap < 3s", why="x" * (MAX_RULE_TEXT + 1))


def test_hidden_characters_in_the_condition_are_refused_by_the_tokenizer_with_a_caret():
    log = EventLog(pd.DataFrame({"student": ["a"], "time": [0.0], "action": ["hint"]}))
    for when in ("action == 'hi\u202ent'", "gap\x00 < 3"):
        with pytest.raises(RuleSyntaxError, match=r"control or invisible character U\+(202E|0000)"):
            RuleSet([Rule("r", when=when)]).bind(log)
