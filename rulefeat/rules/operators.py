"""The operator table, consulted by the parser (precedence) and the compiler (kernels).

True/false values are three-valued (Kleene logic) and travel as ``uint8`` arrays
coded ``FALSE=0 < UNKNOWN=1 < TRUE=2``: with that order ``and`` is the minimum,
``or`` the maximum and ``not`` is ``2 - x``, all plain numpy ufuncs.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

__all__ = ["Operator", "INFIX", "PREFIX", "FALSE", "UNKNOWN", "TRUE", "COMPARE", "ORDER"]

FALSE, UNKNOWN, TRUE = np.uint8(0), np.uint8(1), np.uint8(2)


@dataclass(frozen=True)
class Operator:
    """One operator: its ``kind`` decides type checking, ``precedence`` parsing, ``kernel`` evaluation.

    Kinds: ``logic`` (and/or), ``not``, ``compare`` (== !=), ``order`` (< <= > >=), ``member``
    (in / not in), ``arith`` (+ - * /) and ``neg`` (unary minus). Higher precedence binds tighter.
    """

    symbol: str
    kind: str
    precedence: int
    kernel: Callable
    meaning: str


def _arith(ufunc) -> Callable:
    def kernel(a, b):
        # Division by zero and overflow give missing, never inf, so later comparisons stay honest.
        with np.errstate(all="ignore"):
            out = np.array(ufunc(a, b), dtype=np.float64, copy=None)
        np.copyto(out, np.nan, where=~np.isfinite(out))  # in place: one array of events, not two
        return out
    return kernel


def _not(x):
    return np.uint8(2) - np.asarray(x, dtype=np.uint8)


def _neg(x):
    return np.negative(x)


INFIX: dict[str, Operator] = {
    "or": Operator("or", "logic", 1, np.maximum, "true when either side is true"),
    "and": Operator("and", "logic", 2, np.minimum, "true when both sides are true"),
    "==": Operator("==", "compare", 4, np.equal, "equal"),
    "!=": Operator("!=", "compare", 4, np.not_equal, "not equal"),
    "<": Operator("<", "order", 4, np.less, "less than"),
    "<=": Operator("<=", "order", 4, np.less_equal, "less than or equal"),
    ">": Operator(">", "order", 4, np.greater, "greater than"),
    ">=": Operator(">=", "order", 4, np.greater_equal, "greater than or equal"),
    "in": Operator("in", "member", 4, np.isin, "one of the listed values"),
    "+": Operator("+", "arith", 5, _arith(np.add), "sum"),
    "-": Operator("-", "arith", 5, _arith(np.subtract), "difference"),
    "*": Operator("*", "arith", 6, _arith(np.multiply), "product"),
    "/": Operator("/", "arith", 6, _arith(np.divide), "quotient (missing when dividing by 0)"),
}

PREFIX: dict[str, Operator] = {
    "not": Operator("not", "not", 3, _not, "negation (not unknown is unknown)"),
    "-": Operator("-", "neg", 7, _neg, "negative"),
}

COMPARE = frozenset(s for s, op in INFIX.items() if op.kind in ("compare", "order", "member"))
ORDER = frozenset(s for s, op in INFIX.items() if op.kind == "order")
