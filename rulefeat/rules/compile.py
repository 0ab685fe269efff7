"""Checked rules -> a :class:`Program`: fitted norms plus vectorized evaluation over any compatible log.

Evaluation walks each rule's checked tree once per call (a loop over nodes,
never over events) and memoises every node's array by the node's structure, so
a sub-expression shared by several rules is computed once per ``evaluate``.
Referenced rules are evaluated first, in dependency order, so a long chain of
rules never deepens the recursion.
"""

from __future__ import annotations

import numpy as np

from .. import _frame
from .._text import did_you_mean
from ..errors import EvaluationError, LogSchemaError, RuleCheckError
from . import kernels
from ._format import error
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
from .functions import FUNCTIONS, norm_inputs
from .operators import FALSE, INFIX, PREFIX, TRUE, UNKNOWN

__all__ = ["Program", "Evaluator", "Plan", "MAX_WORK"]

# Default budget of one evaluation: distinct computed sub-expressions x events.  One pass over
# the events costs about a nanosecond per event, so 10**10 is some tens of seconds of work at
# most: a rule set beyond it is refused at bind time instead of hanging for minutes.
MAX_WORK = 10**10

_FILL = {"number": np.nan, "bool": UNKNOWN, "category": -1}
_LOG_BOOL = np.array([UNKNOWN, FALSE, TRUE], dtype=np.uint8)  # log bools are -1/0/1


class Evaluator:
    """Evaluates checked nodes over one log, memoising each node's result by its structure.

    With a :class:`Plan`, every node's array is released as soon as the last node that
    reads it has been computed, so memory holds the widest set of live arrays, not one
    array per node of the program.
    """

    def __init__(self, log, program: Program, norms: dict | None, plan: Plan | None = None, release: bool = True):
        self.log, self.n, self.program, self.norms = log, len(log), program, norms
        self.memo: dict[Node, np.ndarray] = {}
        self._uses = dict(plan.uses) if plan is not None and release else None
        self._early: dict[Node, set] = {}
        self._label_cache: dict = {}

    # -- helpers for kernels -------------------------------------------------------------------------
    def type(self, node: Node):
        return self.program._types[node]

    def value(self, node: Node) -> np.ndarray:
        out = self.memo.get(node)
        if out is None:
            out = self.memo[node] = _EVALUATE[type(node)](self, node)
            if self._uses is not None:
                early = self._early.pop(node, ())
                for child in _distinct_children(node):
                    if child not in early:
                        self.release(child)
        return out

    def consumed(self, parent: Node, child: Node) -> None:
        """``parent`` has read ``child`` for the last time before finishing (e.g. one operand of a fold)."""
        if self._uses is not None and child not in self._early.setdefault(parent, set()):
            self._early[parent].add(child)
            self.release(child)

    def release(self, node: Node) -> None:
        left = self._uses.get(node, 0) - 1
        self._uses[node] = left
        if left <= 0:
            self.memo.pop(node, None)

    def array(self, node: Node) -> np.ndarray:
        """The node's value over every event (constants broadcast, read-only)."""
        value = self.value(node)
        if value.shape != (self.n,):
            return np.broadcast_to(value, (self.n,))
        view = value.view()
        view.flags.writeable = False
        return view

    def fill(self, node: Node):
        return _FILL[self.type(node).kind]

    def groups(self, scope: str) -> kernels.Groups:
        return kernels.groups_for(self.log, scope)

    def n_keys(self, field: str) -> int:
        return len(self.log.categories(field))

    def codes_of(self, field: str, labels: list) -> np.ndarray:
        """Codes of text labels in this log's ``field`` (-2 where it has no such label).

        Labels are matched as text against the log being evaluated, so a program scores any log
        with the same fields (a step never seen in it matches no event).
        """
        def compute():
            text = self.log.cached(("text-labels", field), lambda: _frame.text_labels(self.log.categories(field)))
            codes = _frame.text_codes(text, [str(lbl) for lbl in labels])
            return np.where(codes >= 0, codes, -2)
        if len(labels) > 8:
            return compute()
        return self.log.cached(("label-codes", field, tuple(str(lbl) for lbl in labels)), compute)  # rule literals

    def translation(self, source: str, target: str) -> np.ndarray:
        """Codes of ``source`` labels in ``target``'s code space (-2: no such label); ends with -1 for missing."""
        key = ("translation", source, target)
        if key not in self._label_cache:
            codes = self.codes_of(target, list(self.log.categories(source)))
            self._label_cache[key] = np.append(codes, -1).astype(np.int64)
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
            fitted = self.program._norm_labels[call]

            def translate():  # labels only, so a log (or a live buffer) keeps it across evaluations
                current = self.log.categories(per)
                return None if current is fitted or current.equals(fitted) else _frame.codes_for(current, fitted)
            codes, into = self.log.values(per), self.log.cached(("norm-codes", per, id(fitted)), translate)
            if into is not None and len(into):
                codes = np.where(codes >= 0, into[np.maximum(codes, 0)], -1)
            self._label_cache[key] = codes
        return self._label_cache[key]

    def rules(self, names) -> dict[str, np.ndarray]:
        """Each named rule's firing (bool), evaluating rules in the plan's order (dependencies first)."""
        fired = {}
        for name in names:
            tree = self.program._checked.rules[name].tree
            hit = self.value(tree) == TRUE
            fired[name] = hit if hit.ndim else np.full(self.n, bool(hit))
            if self._uses is None or self._uses.get(RuleRef(name), 0) > 0:
                self.memo[RuleRef(name)] = np.where(fired[name], TRUE, FALSE).astype(np.uint8)
            if self._uses is not None:
                self.release(tree)
        return fired


def _distinct_children(node: Node) -> list:
    return list(dict.fromkeys(node.children()))


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
    kernel, out = INFIX[node.op].kernel, None
    last = {operand: i for i, operand in enumerate(node.operands)}
    for i, operand in enumerate(node.operands):  # a fold that lets each operand go once folded in
        value = ev.value(operand)
        out = value if out is None else kernel(out, value)
        if last[operand] == i:
            ev.consumed(node, operand)
    return np.asarray(out, dtype=np.uint8)


def _tri(holds: np.ndarray, missing: np.ndarray) -> np.ndarray:
    holds, missing = np.asarray(holds), np.asarray(missing)
    if holds.shape == missing.shape:
        out = holds.astype(np.uint8)
    else:
        out = np.array(np.broadcast_to(holds, np.broadcast_shapes(holds.shape, missing.shape)), dtype=np.uint8)
    out <<= 1  # bool 1/0 -> TRUE (2) / FALSE (0)
    np.copyto(out, UNKNOWN, where=missing)
    return out


def _codes(ev: Evaluator, node: Node, field: str) -> np.ndarray:
    """Category codes of ``node`` in ``field``'s code space (-2: a label ``field`` does not have)."""
    if isinstance(node, Str):
        return np.asarray(ev.codes_of(field, [node.value])[0], dtype=np.int64)
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
        items, missing = list(ev.codes_of(t.field, [i.value for i in node.items.items])), a < 0
    elif t.kind == "bool":
        items, missing = [TRUE if i.value else FALSE for i in node.items.items], a == UNKNOWN
    else:
        items, missing = [i.value for i in node.items.items], np.isnan(a)
    hit = np.isin(a, np.asarray(items))
    return _tri(hit != node.negate, missing)


def _apply(ev: Evaluator, node: Apply) -> np.ndarray:
    return FUNCTIONS[node.func].kernel(ev, node)


def _rule_ref(ev: Evaluator, node: RuleRef) -> np.ndarray:
    raise EvaluationError(f"rule {node.name!r} was used before it was evaluated (internal order error)")


_EVALUATE = {Num: _literal, Bool: _literal, Field: _field, Unary: _unary, Logic: _logic, Binary: _binary,
             Member: _member, Apply: _apply, RuleRef: _rule_ref}


# -- the plan -------------------------------------------------------------------------------------------
class Plan:
    """What one evaluation computes: the rules in dependency order and how many nodes read each node.

    Built once per program and target (linear in the size of the rule trees); ``uses[node]`` counts
    the distinct nodes (and rules) that read ``node``, so the evaluator frees an array when the count
    reaches zero.  ``work`` is the number of distinct computed nodes, each one pass over the events.
    """

    def __init__(self, checked: CheckedSet, names: list, extra: Node | None = None):
        self.names = names
        uses: dict[Node, int] = {}
        seen: set = set()
        roots = [checked.rules[name].tree for name in names] + ([extra] if extra is not None else [])
        self.work: dict[str, int] = {}
        for name, root in zip([*names, ""], roots, strict=False):
            uses[root] = uses.get(root, 0) + 1
            new = [root] if root not in seen else []
            seen.update(new)
            stack = list(new)
            while stack:
                node = stack.pop()
                for child in _distinct_children(node):
                    uses[child] = uses.get(child, 0) + 1
                    if child not in seen:
                        seen.add(child)
                        stack.append(child)
                        new.append(child)
            self.work[name] = sum(1 for node in new if not isinstance(node, _FREE))
        self.uses = uses

    def check_budget(self, checked: CheckedSet, n_events: int, budget: int, where: str) -> None:
        """Refuse, naming the rule, a program whose passes over the events would exceed ``budget``."""
        total = 0
        for name, work in self.work.items():
            total += work * n_events
            if total > budget:
                rule = checked.rules[name] if name else checked.probe
                raise error(RuleCheckError,
                            f"{where}: evaluating the rules up to this one takes {total:,} array operations "
                            f"(distinct computed sub-expressions x {n_events:,} events; this rule adds {work:,} "
                            f"sub-expressions), over the budget max_work={budget:,}. Split the rule set, "
                            "evaluate fewer students at a time (log.for_students(...)), or raise max_work "
                            "in RuleSet.bind", rule=rule.name, source=rule.text)


_FREE = (Num, Str, Bool, Field)  # literals and log fields cost no pass of their own



# -- the program -----------------------------------------------------------------------------------------
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

    def __init__(self, rules, checked: CheckedSet, log, min_count: int, max_work: int = MAX_WORK):
        self.rules, self.min_count, self.max_work, self._checked = rules, min_count, max_work, checked
        self.report = {rule.name: rule.report for rule in rules}
        parts = [*checked.rules.values(), *([checked.probe] if checked.probe else [])]
        self._types = {node: t for c in parts for node, t in c.types.items()}
        self._norm_calls = list(dict.fromkeys(call for c in parts for call in c.norms))
        self._kinds = self._schema(log)
        self._state: dict | None = None
        self._norm_labels: dict = {}
        self._plans: dict = {}
        self._plan(probe=checked.probe is not None).check_budget(checked, len(log), max_work, "RuleSet.bind")

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
        # student ids and scores any log with these fields (contract 8, DEVELOPERS.md).
        return {name: log.kind(name) for name in sorted(used)}

    @property
    def trees(self) -> dict:
        """Rule name -> its checked expression tree (rule references as ``RuleRef`` nodes), in rule order."""
        return {name: self._checked.rules[name].tree for name in self._checked.order}

    @property
    def schema(self) -> dict:
        """``{field: kind}`` of every field the rules read; a log to evaluate needs each of them."""
        return dict(self._kinds)

    def _check_log(self, log, where: str) -> None:
        self._plan(probe=self._checked.probe is not None and where == "RuleSet.values").check_budget(
            self._checked, len(log), self.max_work, where)
        for name, kind in self._kinds.items():
            if not log.has(name) or log.kind(name) != kind:
                found = f"a {log.kind(name)} field" if log.has(name) else "missing"
                raise LogSchemaError(f"{where}: the rules were compiled against a log whose {name!r} is a {kind} "
                                     f"field, but in this log it is {found}.{did_you_mean(name, log.fields)}")

    def _plan(self, probe: bool = False) -> Plan:
        """The evaluation plan of every rule (or of the probe and the rules it needs), made once."""
        if probe not in self._plans:
            checked = self._checked
            if probe:
                needed, stack = set(), list(checked.probe.refs)
                while stack:  # one closure over the references: linear in rules
                    dep = stack.pop()
                    if dep not in needed:
                        needed.add(dep)
                        stack.extend(checked.rules[dep].refs)
                names = [r for r in checked.order if r in needed]
                self._plans[probe] = Plan(checked, names, checked.probe.tree)
            else:
                self._plans[probe] = Plan(checked, list(checked.order))
        return self._plans[probe]

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
        self._state = {call: FUNCTIONS[call.func].fit(norm_inputs(ev, call), call, self.min_count)
                       for call in self._norm_calls}
        # The labels the state's codes stand for (steps, skills, ...; never students: see check.py).
        self._norm_labels = {call: log.categories(call.arg("per")) for call in self._norm_calls}
        return self

    def norm_values(self, log) -> list[dict]:
        """What each fitted norm would learn from ``log``, one dict per norm (in :meth:`fit`'s order).

        ``per`` (the key field), ``values`` (the usable training values, log order), ``keys`` (their
        ``per`` codes, -1 missing), ``labels`` (what those codes stand for) and ``student`` (student
        codes of the values). Values
        gathered this way from logs of disjoint students, put in the combined log's order and keyed
        by shared labels, give :meth:`fit_values` the state :meth:`fit` learns on the combined log.
        """
        self._check_log(log, "Program.norm_values")
        ev = Evaluator(log, self, norms=None)
        out = []
        for call in self._norm_calls:
            inputs = norm_inputs(ev, call)
            use = ~np.isnan(inputs["values"])
            if inputs["among"] is not None:
                use &= inputs["among"]
            out.append({"per": call.arg("per"), "values": inputs["values"][use], "keys": inputs["keys"][use],
                        "labels": log.categories(call.arg("per")), "student": log.values("student")[use]})
        return out

    def fit_values(self, gathered: list[dict]) -> Program:
        """Fit every norm from values gathered by :meth:`norm_values` (``values``, ``keys``, ``labels``)."""
        if len(gathered) != len(self._norm_calls):
            raise EvaluationError(f"Program.fit_values: got values of {len(gathered)} norms; the rules use "
                                  f"{len(self._norm_calls)}.")
        state, labels = {}, {}
        for call, piece in zip(self._norm_calls, gathered, strict=True):
            inputs = {"values": piece["values"], "keys": piece["keys"], "n_keys": len(piece["labels"]),
                      "among": None}
            state[call] = FUNCTIONS[call.func].fit(inputs, call, self.min_count)
            labels[call] = piece["labels"]
        self._state, self._norm_labels = state, labels
        return self

    def evaluate(self, log, *, release: bool = True) -> dict[str, np.ndarray]:
        """Rule name -> bool array over ``log``'s events (log order): where the rule definitely holds.

        ``release`` frees each sub-expression's array once its last reader has it, which bounds memory
        on a big log; ``False`` keeps them to the end, which costs less on a small one (the few hundred
        events of a live call, where the bookkeeping outweighs the arrays).  The firings are the same.
        """
        self._check_log(log, "Program.evaluate")
        if not self.is_fitted:
            calls = ", ".join(show(c) for c in self._norm_calls[:3])
            raise EvaluationError(f"Program.evaluate: the rules use fitted norms ({calls}); call "
                                  "program.fit(train_log) first")
        fired = Evaluator(log, self, self._state, self._plan(), release).rules(self._plan().names)
        return {rule.name: fired[rule.name] for rule in self.rules}

    def probe_values(self, log) -> tuple[np.ndarray, str]:
        """(values over ``log``'s events, kind) of the expression compiled by :meth:`RuleSet.values`."""
        probe = self._checked.probe
        self._check_log(log, "RuleSet.values")
        plan = self._plan(probe=True)
        ev = Evaluator(log, self, self._state, plan)
        ev.rules(plan.names)
        return np.array(ev.array(probe.tree)), self._types[probe.tree].kind

    def __repr__(self) -> str:
        state = "fitted" if self.is_fitted else "not fitted"
        return f"Program({len(self.report)} rules, {len(self._norm_calls)} norms, {state})"
