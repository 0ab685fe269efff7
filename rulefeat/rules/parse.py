"""Tokens -> syntax tree, by precedence climbing over the operator table.

Recursion is bounded before it can overflow: every nested expression (brackets,
call arguments, operands of prefix and binary operators) counts one level, and
every node built is checked against the same depth limit, so neither
``((((x))))`` nor a 5,000-term sum gets far.
"""

from __future__ import annotations

from ..errors import RuleSyntaxError
from ._format import Span, error
from .ast import Binary, Bool, Call, Keyword, ListLit, Logic, Member, Name, Node, Num, Str, Unary
from .operators import INFIX, PREFIX
from .tokenize import Token, tokenize

__all__ = ["parse", "MAX_DEPTH"]

MAX_DEPTH = 64

_AFTER_VALUE = {
    ")": "unbalanced ')': there is no '(' for it to close",
    ",": "',' outside a call or a list",
    "(": "'(' after a value: only function names can be called, as in prev(action)",
    "]": "unbalanced ']'",
    "[": "a list [...] can only follow 'in' or 'not in'",
}


class _Parser:
    def __init__(self, tokens: list[Token], text: str, rule: str | None):
        self.toks, self.i, self.text, self.rule, self.nesting = tokens, 0, text, rule, 0

    # -- token helpers -------------------------------------------------------------------------------
    def peek(self, ahead: int = 0) -> Token:
        return self.toks[min(self.i + ahead, len(self.toks) - 1)]

    def advance(self) -> Token:
        tok = self.peek()
        self.i = min(self.i + 1, len(self.toks) - 1)
        return tok

    def is_op(self, text: str, ahead: int = 0) -> bool:
        tok = self.peek(ahead)
        return tok.kind == "op" and tok.text == text

    def fail(self, what: str, span: Span) -> RuleSyntaxError:
        return error(RuleSyntaxError, what, rule=self.rule, source=self.text, span=span)

    def expect(self, text: str, what: str) -> Token:
        if not self.is_op(text):
            tok = self.peek()
            got = "the end of the rule" if tok.kind == "end" else repr(tok.text)
            raise self.fail(f"expected {text!r} {what}, got {got}", tok.span)
        return self.advance()

    def deeper(self, span: Span) -> None:
        self.nesting += 1
        if self.nesting > MAX_DEPTH:
            raise self.fail(f"expression nested too deeply (more than {MAX_DEPTH} levels); split it into "
                            "several rules that refer to each other", span)

    def made(self, node: Node) -> Node:
        if node.depth > MAX_DEPTH:
            raise self.fail(f"expression nested too deeply (more than {MAX_DEPTH} levels); split it into "
                            "several rules that refer to each other", node.span)
        return node

    # -- grammar -------------------------------------------------------------------------------------
    def parse(self) -> Node:
        node = self.expr(0)
        tok = self.peek()
        if tok.kind != "end":
            raise self.fail(self.after_value(tok), tok.span)
        return node

    def after_value(self, tok: Token) -> str:
        if tok.kind == "op" and tok.text in _AFTER_VALUE:
            return _AFTER_VALUE[tok.text]
        if tok.kind == "keyword" and tok.text == "not":
            return "'not' goes before a condition (not correct) or before 'in' (x not in [...])"
        if tok.kind == "op":
            return f"unexpected {tok.text!r}"
        return f"expected an operator (and, or, ==, <, +, ...) between two values, got {tok.text!r}"

    def expr(self, min_prec: int) -> Node:
        self.deeper(self.peek().span)
        left = self.prefix(min_prec)
        run: tuple[str, list[Node]] | None = None  # a flattened and/or chain being collected
        compared = False
        while True:
            op, negate, span = self.infix()
            if op is None or INFIX[op].precedence < min_prec:
                break
            self.i += 2 if negate else 1
            spec = INFIX[op]
            if spec.kind == "logic":
                right = self.expr(spec.precedence + 1)
                if run is not None and run[0] == op:
                    run[1].append(right)
                else:
                    left = self.finish(run) if run else left
                    run = (op, [left, right])
                continue
            if spec.precedence == INFIX["in"].precedence:
                if compared:
                    raise self.fail(f"comparisons cannot be chained; write 'a < b and b < c' instead of "
                                    f"'a < b < c' (found a second comparison {op!r})", span)
                compared = True
            left = self.made(self.member(left, negate) if op == "in" else self.binary(op, left))
        self.nesting -= 1
        return self.finish(run) if run else left

    def finish(self, run: tuple[str, list[Node]]) -> Node:
        op, operands = run
        return self.made(Logic(op, tuple(operands), span=operands[0].span.join(operands[-1].span)))

    def binary(self, op: str, left: Node) -> Node:
        right = self.expr(INFIX[op].precedence + 1)
        return Binary(op, left, right, span=left.span.join(right.span))

    def member(self, left: Node, negate: bool) -> Node:
        if not self.is_op("["):
            word = "not in" if negate else "in"
            raise self.fail(f"{word!r} needs a list in brackets, e.g. action {word} ['hint', 'attempt']",
                            self.peek().span)
        items = self.list_literal()
        return Member(left, items, negate, span=left.span.join(items.span))

    def infix(self) -> tuple[str | None, bool, Span]:
        tok, nxt = self.peek(), self.peek(1)
        if tok.kind == "keyword" and tok.text in ("and", "or", "in"):
            return tok.text, False, tok.span
        if tok.kind == "keyword" and tok.text == "not" and nxt.kind == "keyword" and nxt.text == "in":
            return "in", True, tok.span.join(nxt.span)
        if tok.kind == "op" and tok.text == "=":
            raise self.fail("'=' is not a comparison; write '==' (a single '=' only names an argument "
                            "inside a call, as in prev(action, n=2))", tok.span)
        if tok.kind == "op" and tok.text in INFIX:
            return tok.text, False, tok.span
        return None, False, tok.span

    def prefix(self, min_prec: int) -> Node:
        tok = self.advance()
        if tok.kind == "number":
            return Num(tok.value, span=tok.span)
        if tok.kind == "string":
            return Str(tok.value, span=tok.span)
        if tok.kind == "keyword" and tok.text in ("true", "false"):
            return Bool(tok.text == "true", span=tok.span)
        if tok.kind == "name":
            return self.call(tok) if self.is_op("(") else Name(tok.text, span=tok.span)
        if tok.kind == "op" and tok.text == "(":
            inner = self.expr(0)
            self.expect(")", "to close '('")
            return inner
        if (tok.kind == "keyword" and tok.text == "not") or (tok.kind == "op" and tok.text == "-"):
            return self.unary(tok, min_prec)
        raise self.fail(self.no_value(tok), tok.span)

    def no_value(self, tok: Token) -> str:
        if tok.kind == "end":
            return "the rule ends where a value was expected"
        if tok.kind == "op" and tok.text == "[":
            return _AFTER_VALUE["["]
        return f"expected a value (a field, number, string, call or '('), got {tok.text!r}"

    def unary(self, tok: Token, min_prec: int) -> Node:
        spec = PREFIX[tok.text]
        if spec.precedence < min_prec:
            raise self.fail(f"{tok.text!r} cannot appear here; put it in parentheses, e.g. x == (not y)",
                            tok.span)
        # The operand takes every operator that binds tighter: 'not' a whole comparison, '-' a call.
        operand = self.expr(spec.precedence)
        return self.made(Unary(tok.text, operand, span=tok.span.join(operand.span)))

    def call(self, name: Token) -> Node:
        self.deeper(name.span)
        self.advance()  # '('
        args: list[Node] = []
        kwargs: list[Keyword] = []
        while not self.is_op(")"):
            if self.peek().kind == "end":
                raise self.fail(f"the call of {name.text}() is not closed; add ')'", self.peek().span)
            if args or kwargs:
                self.expect(",", "between arguments")
            if self.peek().kind == "name" and self.is_op("=", 1):
                key = self.advance()
                self.advance()
                value = self.expr(0)
                kwargs.append(Keyword(key.text, value, span=key.span.join(value.span)))
            elif kwargs:
                raise self.fail("a positional argument cannot follow a keyword argument", self.peek().span)
            else:
                args.append(self.expr(0))
        close = self.advance()
        self.nesting -= 1
        return self.made(Call(name.text, tuple(args), tuple(kwargs), span=name.span.join(close.span),
                              func_span=name.span))

    def list_literal(self) -> ListLit:
        open_ = self.advance()  # '['
        items: list[Node] = []
        while not self.is_op("]"):
            if items:
                self.expect(",", "between list items")
            items.append(self.list_item())
        close = self.advance()
        if not items:
            raise self.fail("the list is empty; 'in []' can never be true", open_.span.join(close.span))
        return ListLit(tuple(items), span=open_.span.join(close.span))

    def list_item(self) -> Node:
        tok = self.peek()
        if tok.kind == "op" and tok.text == "-" and self.peek(1).kind == "number":
            self.advance()
            num = self.advance()
            return Unary("-", Num(num.value, span=num.span), span=tok.span.join(num.span))
        if tok.kind in ("number", "string") or (tok.kind == "keyword" and tok.text in ("true", "false")):
            return self.prefix(0)
        if tok.kind == "end":
            raise self.fail("the list is not closed; end it with ']'", tok.span)
        raise self.fail(f"list items must be plain values (numbers, strings, true/false), got {tok.text!r}",
                        tok.span)


def parse(text: str, *, rule: str | None = None) -> Node:
    """Parse rule text into a syntax tree.

    Raises
    ------
    RuleSyntaxError
        With the rule name, the text and a caret under the offending span.

    Examples
    --------
    >>> from rulefeat.rules.ast import show
    >>> show(parse("action == 'hint' and not (gap >= 3s)"))
    "action == 'hint' and not gap >= 3"
    """
    tokens = tokenize(text, rule=rule)
    return _Parser(tokens, text, rule).parse()
