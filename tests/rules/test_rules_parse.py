"""Rule language front end: tokenizer and parser, table-driven, with pinned error messages."""

import pytest

from rulefeat.errors import RuleSyntaxError
from rulefeat.rules._format import Span, caret_lines
from rulefeat.rules.ast import (
    Binary,
    Bool,
    Call,
    Keyword,
    ListLit,
    Logic,
    Member,
    Name,
    Num,
    Str,
    Unary,
    show,
)
from rulefeat.rules.parse import MAX_DEPTH, parse
from rulefeat.rules.tokenize import MAX_TEXT, tokenize


def kinds(text):
    return [(t.kind, t.value) for t in tokenize(text)][:-1]


TOKENS = [
    ("gap < 3s", [("name", "gap"), ("op", "<"), ("number", 3.0)]),
    ("500ms 2min 1.5h 1e3 2E-2", [("number", 0.5), ("number", 120.0), ("number", 5400.0),
                                  ("number", 1000.0), ("number", 0.02)]),
    ("'it\\'s' \"a\\\"b\" 'back\\\\slash'", [("string", "it's"), ("string", 'a"b'), ("string", "back\\slash")]),
    ("and or not in true false", [("keyword", w) for w in ("and", "or", "not", "in", "true", "false")]),
    ("== != <= >= < > + - * / ( ) [ ] , =", [("op", s) for s in "== != <= >= < > + - * / ( ) [ ] , =".split()]),
    ("x_1 _y Camel", [("name", "x_1"), ("name", "_y"), ("name", "Camel")]),
    ("'Übung' \t\n x", [("string", "Übung"), ("name", "x")]),
    ("0.25 007", [("number", 0.25), ("number", 7.0)]),
]


@pytest.mark.parametrize("text, expected", TOKENS)
def test_tokens(text, expected):
    assert kinds(text) == expected


def test_token_spans_cover_the_source():
    text = "prev(action,  n=2) >= 1.5h"
    for tok in tokenize(text)[:-1]:
        assert text[tok.span.start:tok.span.end] == tok.text
    assert tokenize(text)[-1].span == Span(len(text), len(text))


N = Name
PARSES = [
    ("x", N("x")),
    ("3s", Num(3.0)),
    ("'hint'", Str("hint")),
    ("true", Bool(True)),
    ("a and b and c", Logic("and", (N("a"), N("b"), N("c")))),
    ("a or b and c", Logic("or", (N("a"), Logic("and", (N("b"), N("c")))))),
    ("a and b or c", Logic("or", (Logic("and", (N("a"), N("b"))), N("c")))),
    ("not a and b", Logic("and", (Unary("not", N("a")), N("b")))),
    ("not a == 1", Unary("not", Binary("==", N("a"), Num(1.0)))),
    ("not not a", Unary("not", Unary("not", N("a")))),
    ("a + b * c", Binary("+", N("a"), Binary("*", N("b"), N("c")))),
    ("a - b - c", Binary("-", Binary("-", N("a"), N("b")), N("c"))),
    ("(a - b) * c", Binary("*", Binary("-", N("a"), N("b")), N("c"))),
    ("-a * b", Binary("*", Unary("-", N("a")), N("b"))),
    ("a < b + 1", Binary("<", N("a"), Binary("+", N("b"), Num(1.0)))),
    ("x in [1, -2]", Member(N("x"), ListLit((Num(1.0), Unary("-", Num(2.0)))), False)),
    ("action not in ['hint']", Member(N("action"), ListLit((Str("hint"),)), True)),
    ("prev(action, within='step')",
     Call("prev", (N("action"),), (Keyword("within", Str("step")),))),
    ("f()", Call("f", (), ())),
    ("max(a, b) >= 2", Binary(">=", Call("max", (N("a"), N("b")), ()), Num(2.0))),
    ("typical(duration, among=action == 'attempt')",
     Call("typical", (N("duration"),), (Keyword("among", Binary("==", N("action"), Str("attempt"))),))),
]


@pytest.mark.parametrize("text, expected", PARSES)
def test_parse(text, expected):
    node = parse(text)
    assert node == expected
    assert parse(show(node)) == node  # the canonical printer round-trips


def test_equality_ignores_spans():
    assert parse("gap  <  3") == parse("gap<3")
    assert parse("gap<3").span == Span(0, 5)


SYNTAX_ERRORS = [
    ("a < b < c", r"comparisons cannot be chained.*\n    a < b < c\n          \^$"),
    ("a = b", r"'=' is not a comparison; write '=='"),
    ("prev(", r"the call of prev\(\) is not closed"),
    ("prev(a b)", r"expected ',' between arguments, got 'b'"),
    ("x in y", r"'in' needs a list in brackets"),
    ("x in [y]", r"list items must be plain values.*got 'y'"),
    ("x in []", r"the list is empty"),
    ("x in [1", r"expected ',' between list items, got the end of the rule"),
    ("[1]", r"a list \[...\] can only follow 'in'"),
    ("'abc", r"string starting here is not closed"),
    ("'a\nb'", r"string starting here is not closed"),
    (r"'\n'", r"unsupported escape '\\n'"),
    (r"'\x41'", r"unsupported escape '\\x'"),
    ("a.b", r"unexpected character '\.': there is no attribute access"),
    ("9**9**9", r"unexpected '\*\*': there is no power operator"),
    ("1e999", r"number '1e999' is out of range"),
    ("2e15", r"number '2e15' is out of range"),
    ("1e15h", r"number '1e15h' is out of range"),
    ("3sec", r"unknown time unit 'sec' after a number; units are ms, s, min, h"),
    ("3mn", r"unknown time unit 'mn'.*Did you mean 'min'\?"),
    ("a b", r"expected an operator .* between two values, got 'b'"),
    ("a not b", r"'not' goes before a condition"),
    ("a == not b", r"'not' cannot appear here; put it in parentheses"),
    ("f(a=1, 2)", r"a positional argument cannot follow a keyword argument"),
    ("()", r"expected a value .*got '\)'"),
    ("a)", r"unbalanced '\)'"),
    ("(a", r"expected '\)' to close '\(', got the end of the rule"),
    ("a and", r"the rule ends where a value was expected"),
    ("(a)(b)", r"only function names can be called"),
    ("a && b", r"write 'and'"),
    ("a || b", r"write 'or'"),
    ("!a", r"write 'not'"),
    ("a <> b", r"write '!='"),
    ("x % 2", r"no remainder operator"),
    ("lambda: 1", r"no ':'"),
    ("a \x00", r"control or invisible character U\+0000"),
    ("a \u200b", r"U\+200B"),
    ("a \uff1d b", r"U\+FF1D: it looks like '='"),
    ("\u2018x\u2019", r"use straight quotes"),
    ("gap \u2264 3", r"U\+2264"),
    ("\u0430 == 1", r"U\+0430"),  # Cyrillic a, looks like Latin a
]


@pytest.mark.parametrize("text, pattern", SYNTAX_ERRORS)
def test_syntax_errors(text, pattern):
    with pytest.raises(RuleSyntaxError, match=pattern):
        parse(text, rule="r")


def test_error_names_rule_and_shows_caret_under_span():
    with pytest.raises(RuleSyntaxError) as info:
        parse("action == 'hint' and gap < 3sec", rule="skimmed")
    msg = str(info.value)
    assert msg.startswith("Rule 'skimmed': unknown time unit 'sec'")
    assert msg.endswith("\n    action == 'hint' and gap < 3sec\n                                ^^^")
    assert info.value.span == Span(28, 31) and info.value.rule == "skimmed"


def test_caret_on_later_line_of_multiline_text():
    text = "action == 'hint'\n  and gap < 3 < 4"
    with pytest.raises(RuleSyntaxError, match=r"\n    line 2:   and gap < 3 < 4\n {26}\^$") as info:
        parse(text)
    assert info.value.span.start == text.rindex("<")


def test_caret_window_for_long_lines():
    text = "a and " * 100 + "b c"
    shown = caret_lines(text, Span(len(text) - 1, len(text)))
    line, carets = shown.split("\n")
    assert line.startswith("    ...") and len(line) < 120
    assert line[carets.index("^")] == "c"


def test_text_length_limit():
    with pytest.raises(RuleSyntaxError, match=r"rule text too long \(20,001 characters; the limit is 20,000\)"):
        parse("a" * (MAX_TEXT + 1))


def test_depth_limits_guard_recursion():
    ok = "(" * (MAX_DEPTH - 1) + "x" + ")" * (MAX_DEPTH - 1)
    assert parse(ok) == N("x")
    for deep in ("(" * 9_000 + "x" + ")" * 9_000, "not " * 4_000 + "x", "- " * 5_000 + "x",
                 "+".join(["1"] * 5_000), "f(" * 3_000 + ")" * 3_000):
        with pytest.raises(RuleSyntaxError, match="nested too deeply"):
            parse(deep)


def test_long_flat_and_chain_is_fine():
    node = parse(" and ".join(f"x{i}" for i in range(2_000)))
    assert isinstance(node, Logic) and len(node.operands) == 2_000 and node.depth == 2


def test_not_a_string():
    with pytest.raises(RuleSyntaxError, match="rule text must be a string, got int"):
        parse(3)
