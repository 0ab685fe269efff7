"""rulefeat.limits: the documented maxima, the non-recursive depth check, and their use by the entry points."""

import time

import pandas as pd
import pytest

import rulefeat
from rulefeat import EvaluationError, EventLog, ParameterError, Rule
from rulefeat.limits import MAX_FOLDS, MAX_N_BOOT, MAX_REPEATS, check_depth, nesting_depth

DEPTHS = [
    ("", "json", 0), ("1", "json", 0), ("[]", "json", 1), ('{"a": [1, {"b": 2}]}', "json", 3),
    ('["[[[[", "\\"[[["]', "json", 1),        # brackets in strings, an escaped quote inside a string
    ('["\\\\", [[]]]', "json", 3),            # an escaped backslash ends its string
    ("a = 1", "toml", 0), ("[rules.x]\nwhen = 'a'", "toml", 1), ("a = [[1], {b = [2]}]", "toml", 3),
    ("a = '[[[' # [[[[[[\nb = \"\"\"\n[[[[\n\"\"\"\nc = '''[[['''", "toml", 0),
    ("a = \"\\\"[[\" \nb = [1]", "toml", 1),
]


@pytest.mark.parametrize("text, syntax, depth", DEPTHS)
def test_nesting_depth_counts_brackets_outside_strings_and_comments(text, syntax, depth):
    assert nesting_depth(text, syntax) == depth


def test_depth_check_is_fast_and_flat_on_a_million_levels():
    text = "[" * 1_000_000 + "]" * 1_000_000
    start = time.perf_counter()
    with pytest.raises(ParameterError, match=r"report\.json: the JSON text nests 1000000 levels.*MAX_JSON_DEPTH"):
        check_depth(text, "json", "report.json")
    assert time.perf_counter() - start < 5  # a generous bound: it is one regex pass and a cumulative sum


def test_deep_report_json_is_refused_at_load():
    from rulefeat.report.diagnostics import RuleDiagnostics
    from rulefeat.report.value import IncrementalValueReport

    deep = "[" * 100_000 + "]" * 100_000
    with pytest.raises(EvaluationError, match=r"IncrementalValueReport\.from_json: the JSON text nests 100000"):
        IncrementalValueReport.from_json(deep)
    with pytest.raises(EvaluationError, match=r"RuleDiagnostics\.from_json: the JSON text nests 100001"):
        RuleDiagnostics.from_json('{"a": ' + deep + "}")


LOG = EventLog(pd.DataFrame({"student": ["a", "b"], "time": [0.0, 1.0], "action": ["hint", "hint"]}))
UNITS = pd.DataFrame({"student": ["a", "b"], "start": [0.0, 0.0], "end": [5.0, 5.0], "label": [0, 1]})
RULES = [Rule("quick", when="gap < 3s")]


@pytest.mark.parametrize("option, match", [
    ({"n_boot": MAX_N_BOOT + 1}, r"'n_boot' parameter of incremental_value must be an integer in \[1, 100000\]"),
    ({"repeats": MAX_REPEATS + 1}, r"'repeats' parameter of incremental_value must be an integer in \[1, 100\]"),
    ({"cv": MAX_FOLDS + 1}, r"'cv' parameter of incremental_value must be between 2 and 1000 folds"),
])
def test_sizes_beyond_their_maximum_are_refused_at_once(option, match):
    start = time.perf_counter()
    with pytest.raises(EvaluationError, match=match):
        rulefeat.incremental_value(LOG, UNITS, "label", RULES, **option)
    assert time.perf_counter() - start < 5


def test_diagnose_refuses_a_huge_n_boot():
    with pytest.raises(EvaluationError, match=r"'n_boot' parameter of diagnose must be an integer in \[1, 100000\]"):
        rulefeat.diagnose(LOG, UNITS, "label", RULES, n_boot=10**9)
