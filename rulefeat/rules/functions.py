"""The function table: name -> parameters (kinds, defaults), type rule and vectorized kernel.

Adding a function means adding one entry here (plus its tests and docs); the
parser never changes, and the checker binds arguments from the entry alone.
Kernels receive the evaluator and the checked call (:class:`~rulefeat.rules.ast.Apply`)
and return an array over the log's events.

Parameter kinds (how the checker reads an argument):

``value``         any expression of type number, true/false or category
``cond``          a true/false expression
``number``        a number expression
``count``         a whole-number literal >= 1
``seconds``       a positive number literal (durations such as ``10s`` are numbers of seconds)
``fraction``      a number literal between 0 and 1
``scope``         a quoted scope name: 'student', 'session', 'problem' or 'step'
``number_field``  the name of a number field, unquoted
``key_field``     a quoted category field name, e.g. per='step'
``norm_cond``     a true/false expression that itself uses no fitted function
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from . import kernels, norms
from .ast import BOOL, NUMBER, Apply
from .operators import FALSE, TRUE, UNKNOWN

__all__ = ["Param", "Function", "FUNCTIONS", "REQUIRED", "SCOPES", "norm_inputs"]

SCOPES = ("student", "session", "problem", "step")


class _Required:
    def __repr__(self) -> str:
        return "REQUIRED"


REQUIRED = _Required()


@dataclass(frozen=True)
class Param:
    name: str
    kind: str
    default: object = REQUIRED
    keyword_only: bool = False


@dataclass(frozen=True)
class Function:
    """One entry of the function table.

    ``result`` maps the types of the expression arguments (by parameter name)
    to the call's type; ``check`` returns an error text for argument
    combinations the kinds alone cannot refuse (or ``None``); ``fit`` (fitted
    functions only) learns the call's state from the training values
    :func:`norm_inputs` reads (so values gathered from many logs fit the same way).
    """

    name: str
    params: tuple[Param, ...]
    result: Callable
    kernel: Callable
    summary: str
    fit: Callable | None = None
    check: Callable | None = None

    @property
    def fitted(self) -> bool:
        return self.fit is not None

    def signature(self) -> str:
        parts = []
        for p in self.params:
            if p.keyword_only and "*" not in parts:
                parts.append("*")
            default = "" if p.default is REQUIRED else f"={p.default!r}"
            parts.append(f"{p.name}{default}")
        return f"{self.name}({', '.join(parts)})"


# -- kernels -------------------------------------------------------------------------------------------
def _prev(ev, call: Apply) -> np.ndarray:
    return _shift(ev, call, call.arg("n"))


def _next(ev, call: Apply) -> np.ndarray:
    return _shift(ev, call, -call.arg("n"))


def _shift(ev, call: Apply, n: int) -> np.ndarray:
    expr = call.arg("expr")
    return kernels.shift(ev.array(expr), ev.groups(call.arg("within")), n, ev.fill(expr))


def _count_before(ev, call: Apply) -> np.ndarray:
    return kernels.count_before(ev.array(call.arg("cond")), ev.groups(call.arg("within")))


def _count_recent(ev, call: Apply) -> np.ndarray:
    tri, g = ev.array(call.arg("cond")), ev.groups(call.arg("within"))
    if call.arg("actions") is not None:
        return kernels.count_recent_actions(tri, g, call.arg("actions"))
    return kernels.count_recent_seconds(tri, g, ev.log.values("time"), call.arg("seconds"))


def _one_window(bound: dict) -> str | None:
    if (bound["actions"] is None) == (bound["seconds"] is None):
        return ("count_recent() needs exactly one window: actions=<number of events> or "
                "seconds=<duration>, e.g. count_recent(action == 'attempt', seconds=10s)")
    return None


def _streak(ev, call: Apply) -> np.ndarray:
    return kernels.streak(ev.array(call.arg("cond")), ev.groups(call.arg("within")))


def _first(ev, call: Apply) -> np.ndarray:
    cond = call.arg("cond")
    return kernels.first(None if cond is None else ev.array(cond), ev.groups(call.arg("within")))


def norm_inputs(ev, call: Apply) -> dict:
    """What a fitted function learns from: ``values``, ``keys`` (codes of ``per``), ``n_keys``, ``among``."""
    among, per = call.arg("among"), call.arg("per")
    return {"values": ev.array(call.arg("field")), "keys": ev.log.values(per), "n_keys": ev.n_keys(per),
            "among": None if among is None else ev.array(among) == TRUE}


def _fit_typical(inputs: dict, call: Apply, min_count: int) -> dict:
    return norms.fit_typical(**inputs, q=call.arg("q"), min_count=min_count)


def _fit_zscore(inputs: dict, call: Apply, min_count: int) -> dict:
    return norms.fit_zscore(**inputs, min_count=min_count)


def _typical(ev, call: Apply) -> np.ndarray:
    return norms.apply_typical(ev.norm(call), ev.norm_keys(call))


def _zscore(ev, call: Apply) -> np.ndarray:
    field = call.arg("field")
    return norms.apply_zscore(ev.norm(call), ev.array(field), ev.norm_keys(call))


def _missing(ev, call: Apply) -> np.ndarray:
    x = call.arg("x")
    values, kind = ev.array(x), ev.type(x).kind
    gone = np.isnan(values) if kind == "number" else (values == UNKNOWN if kind == "bool" else values < 0)
    return np.where(gone, TRUE, FALSE).astype(np.uint8)


def _abs(ev, call: Apply) -> np.ndarray:
    return np.abs(ev.array(call.arg("x")))


def _log(ev, call: Apply) -> np.ndarray:
    x = ev.array(call.arg("x"))
    with np.errstate(all="ignore"):
        return np.where(x > 0, np.log(np.where(x > 0, x, 1.0)), np.nan)


def _minmax(ufunc) -> Callable:
    def kernel(ev, call: Apply) -> np.ndarray:
        return ufunc(ev.array(call.arg("a")), ev.array(call.arg("b")))  # NaN propagates: missing in, missing out
    return kernel


# -- the table -----------------------------------------------------------------------------------------
def _same(name: str) -> Callable:
    return lambda types: types[name]


def _always(t) -> Callable:
    return lambda types: t


_WITHIN = Param("within", "scope", "student", keyword_only=True)
_PER = Param("per", "key_field", "step", keyword_only=True)
_AMONG = Param("among", "norm_cond", None, keyword_only=True)

_ENTRIES = [
    Function("prev", (Param("expr", "value"), Param("n", "count", 1), _WITHIN), _same("expr"), _prev,
             "value of expr at the n-th previous event of the same group; missing before the first"),
    Function("next", (Param("expr", "value"), Param("n", "count", 1), _WITHIN), _same("expr"), _next,
             "value of expr at the n-th next event of the same group; missing after the last"),
    Function("count_before", (Param("cond", "cond"), _WITHIN), _always(NUMBER), _count_before,
             "number of earlier events of the group where cond is true"),
    Function("count_recent", (Param("cond", "cond"), Param("actions", "count", None, True),
                              Param("seconds", "seconds", None, True), _WITHIN),
             _always(NUMBER), _count_recent,
             "number of events where cond is true in the trailing window ending at the current event",
             check=_one_window),
    Function("streak", (Param("cond", "cond"), _WITHIN), _always(NUMBER), _streak,
             "length of the run of consecutive group events up to now where cond is true"),
    Function("first", (Param("cond", "cond", None), Param("within", "scope", "step", keyword_only=True)),
             _always(BOOL), _first,
             "the event is the first of its group (where cond is true, if given)"),
    Function("typical", (Param("field", "number_field"), _PER, Param("q", "fraction", 0.5, True), _AMONG),
             _always(NUMBER), _typical, "q-quantile of a number field over training events with the same key",
             fit=_fit_typical),
    Function("zscore", (Param("field", "number_field"), _PER, _AMONG), _always(NUMBER), _zscore,
             "(x - mean) / sd of a number field, moments from training events with the same key",
             fit=_fit_zscore),
    Function("missing", (Param("x", "value"),), _always(BOOL), _missing, "x has no value"),
    Function("abs", (Param("x", "number"),), _always(NUMBER), _abs, "absolute value"),
    Function("log", (Param("x", "number"),), _always(NUMBER), _log, "natural logarithm; missing for x <= 0"),
    Function("min", (Param("a", "number"), Param("b", "number")), _always(NUMBER), _minmax(np.minimum),
             "the smaller of a and b; missing if either is"),
    Function("max", (Param("a", "number"), Param("b", "number")), _always(NUMBER), _minmax(np.maximum),
             "the larger of a and b; missing if either is"),
]

FUNCTIONS: dict[str, Function] = {f.name: f for f in _ENTRIES}
