"""Rule text -> tokens, each carrying its source span.

The tokenizer is a single forward scan with no recursion, so hostile text costs
time linear in its length, and that length is capped before the scan starts.
"""

from __future__ import annotations

import math
import unicodedata
from typing import NamedTuple

from .._text import did_you_mean
from ..errors import RuleSyntaxError
from ..limits import MAX_RULE_TEXT
from ._format import Span, error

__all__ = ["Token", "tokenize", "KEYWORDS", "UNITS", "MAX_TEXT", "MAX_NUMBER"]

MAX_TEXT = MAX_RULE_TEXT
MAX_NUMBER = 1e15
KEYWORDS = frozenset({"and", "or", "not", "in", "true", "false"})
UNITS = {"ms": 0.001, "s": 1.0, "min": 60.0, "h": 3600.0}
ESCAPES = {"\\": "\\", "'": "'", '"': '"'}

# Longest first, so '<=' wins over '<'.
SYMBOLS = ("==", "!=", "<=", ">=", "<", ">", "+", "-", "*", "/", "(", ")", "[", "]", ",", "=")

# Characters people type by habit from other languages, with the word they meant.
HINTS = {
    "**": "there is no power operator; multiply, or use log()",
    "&&": "write 'and'", "||": "write 'or'", "&": "write 'and'", "|": "write 'or'",
    "!": "write 'not' (or '!=' for 'differs from')", "<>": "write '!='",
    ".": "there is no attribute access; numbers need a digit before the point (0.5)",
    "%": "there is no remainder operator", "^": "there is no power operator",
    ":": "the rule language has no ':' (no lambdas, slices or dicts)",
    "\u2018": "use straight quotes ' or \"", "\u2019": "use straight quotes ' or \"",
    "\u201c": "use straight quotes ' or \"", "\u201d": "use straight quotes ' or \"",
}
_SPACE = " \t\r\n"
_DIGITS = "0123456789"
_DIGIT_SET = frozenset(_DIGITS)
_NAME_START = "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ_"
_NAME_CHARS = _NAME_START + _DIGITS


class Token(NamedTuple):
    """One token: ``kind`` is 'number', 'string', 'name', 'keyword', 'op' or 'end'."""

    kind: str
    text: str
    value: object
    span: Span


class _Scanner:
    def __init__(self, text: str, rule: str | None):
        self.text, self.rule, self.pos = text, rule, 0

    def fail(self, what: str, start: int, end: int | None = None) -> RuleSyntaxError:
        return error(RuleSyntaxError, what, rule=self.rule, source=self.text,
                     span=Span(start, start + 1 if end is None else end))

    def run(self) -> list[Token]:
        out: list[Token] = []
        text, n = self.text, len(self.text)
        while True:
            while self.pos < n and text[self.pos] in _SPACE:
                self.pos += 1
            if self.pos >= n:
                out.append(Token("end", "", None, Span(n, n)))
                return out
            out.append(self.token(text[self.pos]))

    def token(self, c: str) -> Token:
        if c in _DIGITS:
            return self.number()
        if c in _NAME_START:
            return self.name()
        if c in "'\"":
            return self.string(c)
        return self.symbol(c)

    def span_from(self, start: int) -> Span:
        return Span(start, self.pos)

    def take(self, chars: str) -> None:
        while self.pos < len(self.text) and self.text[self.pos] in chars:
            self.pos += 1

    def name(self) -> Token:
        start = self.pos
        self.take(_NAME_CHARS)
        word = self.text[start:self.pos]
        return Token("keyword" if word in KEYWORDS else "name", word, word, self.span_from(start))

    def number(self) -> Token:
        start = self.pos
        self.take(_DIGITS)
        text = self.text
        if text.startswith(".", self.pos) and text[self.pos + 1:self.pos + 2] in _DIGIT_SET:
            self.pos += 1
            self.take(_DIGITS)
        mark = self.pos
        if text[self.pos:self.pos + 1] in ("e", "E"):
            self.pos += 1
            if text[self.pos:self.pos + 1] in ("+", "-"):
                self.pos += 1
            if text[self.pos:self.pos + 1] in _DIGIT_SET:
                self.take(_DIGITS)
            else:
                self.pos = mark  # not an exponent: 'e...' is read as a unit below
        value = float(text[start:self.pos])
        unit_start = self.pos
        self.take(_NAME_CHARS)
        unit = text[unit_start:self.pos]
        if unit and unit not in UNITS:
            raise self.fail(f"unknown time unit {unit!r} after a number; units are "
                            f"{', '.join(UNITS)}.{did_you_mean(unit, UNITS)}", unit_start, self.pos)
        seconds = value * UNITS[unit] if unit else value
        for v in (value, seconds):
            if not math.isfinite(v) or abs(v) > MAX_NUMBER:
                raise self.fail(f"number {text[start:self.pos]!r} is out of range; numbers must be finite "
                                f"and at most {MAX_NUMBER:.0e} in size", start, self.pos)
        return Token("number", text[start:self.pos], seconds, self.span_from(start))

    def string(self, quote: str) -> Token:
        start, parts = self.pos, []
        self.pos += 1
        text, n = self.text, len(self.text)
        while True:
            if self.pos >= n or text[self.pos] in "\r\n":
                raise self.fail(f"string starting here is not closed; end it with {quote}", start, self.pos)
            c = text[self.pos]
            if c == quote:
                self.pos += 1
                return Token("string", text[start:self.pos], "".join(parts), self.span_from(start))
            if c == "\\":
                nxt = text[self.pos + 1:self.pos + 2]
                if nxt not in ESCAPES:
                    raise self.fail(f"unsupported escape '\\{nxt}' in a string; only \\\\ \\' and \\\" are "
                                    "allowed", self.pos, self.pos + 2)
                parts.append(ESCAPES[nxt])
                self.pos += 2
                continue
            self.check_char(c, self.pos, in_string=True)
            parts.append(c)
            self.pos += 1

    def check_char(self, c: str, at: int, in_string: bool = False) -> None:
        if unicodedata.category(c) in ("Cc", "Cf", "Cs", "Co", "Cn") and c not in "\t":
            raise self.fail(f"control or invisible character U+{ord(c):04X} is not allowed in rule text", at)
        if not in_string and ord(c) > 127:
            self.unexpected(c, at)

    def unexpected(self, c: str, at: int) -> None:
        hint = HINTS.get(c, "")
        ascii_form = unicodedata.normalize("NFKC", c)
        if not hint and ascii_form != c and ascii_form.isascii():
            hint = f"it looks like {ascii_form!r}; type the plain ASCII character"
        name = f" U+{ord(c):04X}" if ord(c) > 127 else ""
        raise self.fail(f"unexpected character {c!r}{name}" + (f": {hint}" if hint else ""), at)

    def symbol(self, c: str) -> Token:
        start, text = self.pos, self.text
        for bad in ("**", "&&", "||", "<>"):
            if text.startswith(bad, start):
                raise self.fail(f"unexpected {bad!r}: {HINTS[bad]}", start, start + 2)
        for sym in SYMBOLS:
            if text.startswith(sym, start):
                self.pos += len(sym)
                return Token("op", sym, sym, self.span_from(start))
        self.check_char(c, start)
        self.unexpected(c, start)
        raise AssertionError("unreachable")  # unexpected() always raises


def tokenize(text: str, *, rule: str | None = None) -> list[Token]:
    """Split rule text into tokens, ending with an 'end' token.

    Raises
    ------
    RuleSyntaxError
        On text longer than ``MAX_TEXT`` characters, unknown characters, bad
        strings or escapes, unknown time units and out-of-range numbers.
    """
    if not isinstance(text, str):
        raise error(RuleSyntaxError, f"rule text must be a string, got {type(text).__name__}", rule=rule)
    if len(text) > MAX_TEXT:
        raise error(RuleSyntaxError, f"rule text too long ({len(text):,} characters; the limit is "
                    f"{MAX_TEXT:,})", rule=rule, source=text, span=Span(MAX_TEXT, len(text)))
    return _Scanner(text, rule).run()
