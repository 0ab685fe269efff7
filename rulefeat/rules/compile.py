"""Checked rules -> a :class:`Program`: fitted norms plus vectorized evaluation over any compatible log.

Evaluation walks each rule's checked tree once per call (a loop over nodes,
never over events) and memoises every node's array by the node's structure, so
a sub-expression shared by several rules is computed once per ``evaluate``.
Referenced rules are evaluated first, in dependency order, so a long chain of
rules never deepens the recursion.
"""

from __future__ import annotations

from functools import reduce

import numpy as np

from .. import _frame
from .._text import did_you_mean
from ..errors import EvaluationError, LogSchemaError
from . import kernels
from .ast import (
    Apply,
    Binary,
    Bool,
    Field,
    Logic,
    Member,
    Node,
    Num,
    RuleRef,
    Str,
    Unary,
    show,
)
from .check import CheckedSet
from .functions import FUNCTIONS
from .operators import FALSE, INFIX, PREFIX, TRUE, UNKNOWN

__all__ = ["Program", "Evaluator"]

_FILL = {"number": np.nan, "bool": UNKNOWN, "category": -1}
_LOG_BOOL = np.array([UNKNOWN, FALSE, TRUE], dtype=np.uint8)  # log bools are -1/0/1


class Evaluator:
    """Evaluates checked nodes over one log, memoising each node's result by its structure."""

    def __init__(self, log, program: Program, norms: dict | None):
        self.log, self.n, self.program, self.norms = log, len(log), program, norms
        self.memo: dict[Node, np.ndarray] = {}
        self._label_cache: dict = {}

    # -- helpers for kernels -------------------------------------------------------------------------
    def type(self, node: Node):
        return self.program._types[node]

    def value(self, node: Node) -> np.ndarray:
        if node not in self.memo:
            self.memo[node] = _EVALUATE[type(node)](self, node)
        return self.memo[node]

    def array(self, node: Node) -> np.ndarray:
        """The node's value over every event (constants broadcast, read-only)."""
        return np.broadcast_to(self.value(node), (self.n,))

    def fill(self, node: Node):
        return _FILL[self.type(node).kind]

    def groups(self, scope: str) -> kernels.Groups:
        return kernels.groups_for(self.log, scope)

    def n_keys(self, field: str) -> int:
        return len(self.log.categories(field))

    def labels(self, field: str) -> dict:
        """This log's labels of a category field as text -> code (labels are matched as text)."""
        if field not in self._label_cache:
            cats = self.log.categories(field)
            self._label_cache[field] = {str(lbl): code for code, lbl in enumerate(cats)}
        return self._label_cache[field]

    def translation(self, source: str, target: str) -> np.ndarray:
        """Codes of ``source`` labels in ``target``'s code space (-2: no such label); ends with -1 for missing."""
        key = (source, target)
        if key not in self._label_cache:
            labels = self.labels(target)
            codes = [labels.get(str(lbl), -2) for lbl in self.log.categories(source)]
            self._label_cache[key] = np.array([*codes, -1], dtype=np.int64)
        return self._label_cache[key]

    def norm(self, call: Apply) -> dict:
        return self.norms[call]

    def norm_keys(self, call: Apply) -> np.ndarray:
        """Codes of the norm's ``per`` field in the code space of the log it was fitted on (-1: unseen key).

        A norm is stored per code of the training log; another log numbers its labels its own way,
        so its codes are translated by label (a key the training log lacks falls back to the overall norm).
        """
        per = call.arg("per")
        key = ("norm-keys", per, id(self.program._norm_labels[call]))
        if key not in self._label_cache:
            codes, current = self.log.values(per), self.log.categories(per)
            fitted = self.program._norm_labels[call]
            if current is not fitted and not current.equals(fitted):
                into = _frame.codes_for(current, fitted)
                codes = np.where(codes >= 0, into[np.maximum(codes, 0)], -1) if len(into) else codes
            self._label_cache[key] = codes
        return self._label_cache[key]

    def rule(self, name: str) -> np.ndarray:
        """A rule's firing as definite true/false (uint8), evaluating what it refers to first."""
        for dep in self.program._closure(name):
            key = RuleRef(dep)
            if key not in self.memo:
                tri = self.array(self.program._checked.rules[dep].tree)
                self.memo[key] = np.where(tri == TRUE, TRUE, FALSE).astype(np.uint8)
        return self.memo[RuleRef(name)]


# -- node evaluation -------------------------------------------------------------------------------------
def _literal(ev: Evaluator, node) -> np.ndarray:
    if isinstance(node, Bool):
        return np.asarray(TRUE if node.value else FALSE, dtype=np.uint8)
    return np.asarray(node.value, dtype=np.float64)


def _field(ev: Evaluator, node: Field) -> np.ndarray:
    values = ev.log.values(node.name)
    kind = ev.type(node).kind
    return _LOG_BOOL[values.astype(np.int64) + 1] if kind == "bool" else values


def _unary(ev: Evaluator, node: Unary) -> np.ndarray:
    return PREFIX[node.op].kernel(ev.value(node.operand))


def _logic(ev: Evaluator, node: Logic) -> np.ndarray:
    return reduce(INFIX[node.op].kernel, (ev.value(o) for o in node.operands)).astype(np.uint8)


def _tri(holds: np.ndarray, missing: np.ndarray) -> np.ndarray:
    return np.where(missing, UNKNOWN, np.where(holds, TRUE, FALSE)).astype(np.uint8)


def _codes(ev: Evaluator, node: Node, field: str) -> np.ndarray:
    """Category codes of ``node`` in ``field``'s code space (-2: a label ``field`` does not have)."""
    if isinstance(node, Str):
        # A label this log does not have (a step never seen in it) matches no event.
        return np.asarray(ev.labels(field).get(node.value, -2), dtype=np.int64)
    t = ev.type(node)
    codes = ev.value(node)
    if t.field == field:
        return codes
    translate = ev.translation(t.field, field)  # ends with -1, the slot for missing codes
    return translate[np.where(codes >= 0, codes, len(translate) - 1)]


def _binary(ev: Evaluator, node: Binary) -> np.ndarray:
    op = INFIX[node.op]
    if op.kind == "arith":
        return op.kernel(ev.value(node.left), ev.value(node.right))
    lt, rt = ev.type(node.left), ev.type(node.right)
    if "category" in (lt.kind, rt.kind):
        field = lt.field if lt.kind == "category" else rt.field
        a, b = _codes(ev, node.left, field), _codes(ev, node.right, field)
        missing = (a == -1) | (b == -1)
    else:
        a, b = ev.value(node.left), ev.value(node.right)
        missing = (np.isnan(a) | np.isnan(b)) if lt.kind == "number" else ((a == UNKNOWN) | (b == UNKNOWN))
    return _tri(op.kernel(a, b), missing)


def _member(ev: Evaluator, node: Member) -> np.ndarray:
    t = ev.type(node.operand)
    a = ev.value(node.operand)
    if t.kind == "category":
        labels = ev.labels(t.field)
        items, missing = [labels.get(i.value, -2) for i in node.items.items], a < 0
    elif t.kind == "bool":
        items, missing = [TRUE if i.value else FALSE for i in node.items.items], a == UNKNOWN
    else:
        items, missing = [i.value for i in node.items.items], np.isnan(a)
    hit = np.isin(a, np.asarray(items))
    return _tri(hit != node.negate, missing)


def _apply(ev: Evaluator, node: Apply) -> np.ndarray:
    return FUNCTIONS[node.func].kernel(ev, node)


def _rule_ref(ev: Evaluator, node: RuleRef) -> np.ndarray:
    return ev.rule(node.name)


_EVALUATE = {Num: _literal, Bool: _literal, Field: _field, Unary: _unary, Logic: _logic, Binary: _binary,
             Member: _member, Apply: _apply, RuleRef: _rule_ref}


# -- the program -----------------------------------------------------------------------------------------
def _walk(tree: Node):
    stack = [tree]
    while stack:
        node = stack.pop()
        yield node
        stack.extend(node.children())


class Program:
    """Rules compiled against a log's schema: fit the norms on training events, then evaluate any log.

    Made by :meth:`RuleSet.bind`; not built directly.

    Attributes
    ----------
    rules : RuleSet
        The rules compiled.
    report : dict
        Rule name -> tuple of summaries to report per unit.
    min_count : int
        Training values a key needs before its own norm replaces the overall one.
    """

    def __init__(self, rules, checked: CheckedSet, log, min_count: int):
        self.rules, self.min_count, self._checked = rules, min_count, checked
        self.report = {rule.name: rule.report for rule in rules}
        parts = [*checked.rules.values(), *([checked.probe] if checked.probe else [])]
        self._types = {node: t for c in parts for node, t in c.types.items()}
        self._norm_calls = list(dict.fromkeys(call for c in parts for call in c.norms))
        self._kinds = self._schema(log)
        self._state: dict | None = None
        self._norm_labels: dict = {}
        self._closures: dict = {}

    def _schema(self, log) -> dict:
        used = {"student"}
        probe = [self._checked.probe] if self._checked.probe else []
        for c in (*self._checked.rules.values(), *probe):
            for node in _walk(c.tree):
                if isinstance(node, Field):
                    used.add(node.name)
                elif isinstance(node, Apply):
                    params = dict(node.params)
                    used.update(v for k, v in params.items() if k in ("within", "per"))
                    if params.get("seconds") is not None:
                        used.add("time")
        # Kinds only: category labels are read from each log evaluated, so the program holds no
        # student ids and scores any log with these fields (DESIGN.md contract 8).
        return {name: log.kind(name) for name in sorted(used)}

    @property
    def schema(self) -> dict:
        """``{field: kind}`` of every field the rules read; a log to evaluate needs each of them."""
        return dict(self._kinds)

    def _check_log(self, log, where: str) -> None:
        for name, kind in self._kinds.items():
            if not log.has(name) or log.kind(name) != kind:
                found = f"a {log.kind(name)} field" if log.has(name) else "missing"
                raise LogSchemaError(f"{where}: the rules were compiled against a log whose {name!r} is a {kind} "
                                     f"field, but in this log it is {found}.{did_you_mean(name, log.fields)}")

    def _closure(self, name: str) -> list:
        """``name`` and every rule it refers to, dependencies first."""
        if name not in self._closures:
            seen, stack = set(), [name]
            while stack:
                dep = stack.pop()
                if dep not in seen:
                    seen.add(dep)
                    stack.extend(self._checked.rules[dep].refs)
            self._closures[name] = [r for r in self._checked.order if r in seen]
        return self._closures[name]

    # -- public API ----------------------------------------------------------------------------------
    @property
    def is_fitted(self) -> bool:
        """True once :meth:`fit` ran, or from the start when no rule uses a fitted norm."""
        return not self._norm_calls or self._state is not None

    @property
    def norms_(self) -> dict:
        """Fitted state, one entry per distinct norm call (keyed by its canonical text); ``{}`` before fit."""
        out = {}
        for call, state in (self._state or {}).items():
            params = {k: (show(v) if isinstance(v, Node) else v) for k, v in call.params}
            out[show(call)] = {"function": call.func, **params, **state}
        return out

    def fit(self, log) -> Program:
        """Learn every norm from ``log``'s events only (the training students' sub-log); returns self."""
        self._check_log(log, "Program.fit")
        ev = Evaluator(log, self, norms=None)
        self._state = {call: FUNCTIONS[call.func].fit(ev, call, self.min_count) for call in self._norm_calls}
        # The labels the state's codes stand for (steps, skills, ...; never students: see check.py).
        self._norm_labels = {call: log.categories(call.arg("per")) for call in self._norm_calls}
        return self

    def evaluate(self, log) -> dict[str, np.ndarray]:
        """Rule name -> bool array over ``log``'s events (log order): where the rule definitely holds."""
        self._check_log(log, "Program.evaluate")
        if not self.is_fitted:
            calls = ", ".join(show(c) for c in self._norm_calls[:3])
            raise EvaluationError(f"Program.evaluate: the rules use fitted norms ({calls}); call "
                                  "program.fit(train_log) first")
        ev = Evaluator(log, self, self._state)
        return {rule.name: ev.rule(rule.name) == TRUE for rule in self.rules}

    def probe_values(self, log) -> tuple[np.ndarray, str]:
        """(values over ``log``'s events, kind) of the expression compiled by :meth:`RuleSet.values`."""
        probe = self._checked.probe
        self._check_log(log, "RuleSet.values")
        ev = Evaluator(log, self, self._state)
        for name in probe.refs:
            ev.rule(name)
        return np.array(ev.array(probe.tree)), self._types[probe.tree].kind

    def __repr__(self) -> str:
        state = "fitted" if self.is_fitted else "not fitted"
        return f"Program({len(self.report)} rules, {len(self._norm_calls)} norms, {state})"
