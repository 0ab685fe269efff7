"""Syntax tree -> checked tree: names resolved, calls bound, types inferred against a log's schema.

The checker refuses, with the rule's text and a caret under the span, every
rule that could not mean something definite: unknown names (with the nearest
valid one), wrong arguments, type mismatches, string labels that are no
category of their field, unknown scopes or scopes whose field the log lacks.
:func:`check_all` adds the rule-set checks: rule names that clash with
fields, cycles of references, and fitted rules used inside ``among``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from .. import _frame
from .._text import did_you_mean
from ..errors import RuleCheckError
from ._format import Span, error
from .ast import (
    BOOL,
    NUMBER,
    STRING,
    Apply,
    Binary,
    Bool,
    Call,
    Field,
    ListLit,
    Logic,
    Member,
    Name,
    Node,
    Num,
    RuleRef,
    Str,
    Type,
    Unary,
    category,
    show,
)
from .functions import FUNCTIONS, REQUIRED, SCOPES, Function, Param
from .operators import INFIX

__all__ = ["Schema", "Checked", "CheckedSet", "check_rule", "check_all"]


#: Keys that identify a student or one of their sessions: fitted norms are never stored per such key, so a
#: fitted detector holds no student's data (contract 8, DEVELOPERS.md).
PERSONAL_KEYS = ("student", "session")


class Schema:
    """What the checker needs from a log: field kinds and category labels (looked up lazily)."""

    def __init__(self, log):
        self.log = log
        self.kinds = {name: log.kind(name) for name in log.fields}
        self._labels: dict = {}

    def type_of(self, name: str) -> Type:
        kind = self.kinds[name]
        return category(name) if kind == "category" else (BOOL if kind == "bool" else NUMBER)

    def labels(self, name: str):
        """Category labels of a field as text (labels are matched as text), hash-indexed."""
        if name not in self._labels:
            self._labels[name] = _frame.text_labels(self.log.categories(name))
        return self._labels[name]

    def has_label(self, name: str, label: str) -> bool:
        return bool(_frame.text_codes(self.labels(name), [label])[0] >= 0)


@dataclass
class Checked:
    """One rule after checking: its checked tree, node types and what it refers to."""

    name: str
    text: str
    tree: Node
    types: dict
    refs: dict = field(default_factory=dict)        # rule name -> span of the first reference
    among_refs: dict = field(default_factory=dict)  # rule names referred to inside 'among'
    norms: list = field(default_factory=list)       # fitted calls (typical / zscore)


def _literal_number(node: Node) -> float | None:
    if isinstance(node, Num):
        return node.value
    if isinstance(node, Unary) and node.op == "-" and isinstance(node.operand, Num):
        return -node.operand.value
    return None


class _Checker:
    def __init__(self, rule: str, text: str, schema: Schema, rule_names):
        self.rule, self.text, self.schema = rule, text, schema
        self.rule_names = rule_names if isinstance(rule_names, frozenset) else frozenset(rule_names)
        self.out = Checked(rule, text, tree=None, types={})  # type: ignore[arg-type]
        self.in_among = False

    def fail(self, what: str, span: Span) -> RuleCheckError:
        return error(RuleCheckError, what, rule=self.rule, source=self.text, span=span)

    def visit(self, node: Node) -> Node:
        new, typ = _HANDLERS[type(node)](self, node)
        self.out.types[new] = typ
        return new

    def typed(self, node: Node, want: Type, what: str) -> Node:
        new = self.visit(node)
        got = self.out.types[new]
        if got.kind != want.kind:
            raise self.fail(f"{what} needs {want}, but this is {got}", node.span)
        return new

    # -- leaves --------------------------------------------------------------------------------------
    def literal(self, node: Node):
        return node, {Num: NUMBER, Str: STRING, Bool: BOOL}[type(node)]

    def name(self, node: Name):
        n = node.name
        if n in self.rule_names:
            self.out.refs.setdefault(n, node.span)
            if self.in_among:
                self.out.among_refs.setdefault(n, node.span)
            return RuleRef(n, span=node.span), BOOL
        if n in self.schema.kinds:
            return Field(n, span=node.span), self.schema.type_of(n)
        if n in FUNCTIONS:
            raise self.fail(f"{n!r} is a function; call it with parentheses: {FUNCTIONS[n].signature()}",
                            node.span)
        if n in SCOPES:
            raise self.fail(f"unknown field {n!r}: the log has no {n!r} field; map a column to {n!r} when "
                            "building the EventLog", node.span)
        options = [*self.schema.kinds, *sorted(self.rule_names), *FUNCTIONS, "true", "false"]
        raise self.fail(f"unknown field or rule {n!r}.{did_you_mean(n, options)}", node.span)

    # -- operators -----------------------------------------------------------------------------------
    def unary(self, node: Unary):
        if node.op == "not":
            return Unary("not", self.typed(node.operand, BOOL, "'not'"), span=node.span), BOOL
        return Unary("-", self.typed(node.operand, NUMBER, "unary '-'"), span=node.span), NUMBER

    def logic(self, node: Logic):
        operands = tuple(self.typed(o, BOOL, f"{node.op!r}") for o in node.operands)
        return Logic(node.op, operands, span=node.span), BOOL

    def binary(self, node: Binary):
        kind = INFIX[node.op].kind
        if kind == "arith":
            left = self.typed(node.left, NUMBER, f"{node.op!r}")
            right = self.typed(node.right, NUMBER, f"{node.op!r}")
            return Binary(node.op, left, right, span=node.span), NUMBER
        left, right = self.visit(node.left), self.visit(node.right)
        lt, rt = self.out.types[left], self.out.types[right]
        if kind == "order":
            self.ordered(node, ((node.left, lt), (node.right, rt)))
        else:
            self.comparable(node, lt, rt)
        return Binary(node.op, left, right, span=node.span), BOOL

    def ordered(self, node: Binary, sides) -> None:
        for side, t in sides:
            if t.kind == "category":
                raise self.fail(f"ordering comparison {node.op!r} on categories: {t} has no order; use == or "
                                "!= or in [...]", side.span)
            if t.kind != "number":
                raise self.fail(f"{node.op!r} compares numbers, but this is {t}", side.span)

    def comparable(self, node: Binary, lt: Type, rt: Type) -> None:
        kinds = {lt.kind, rt.kind}
        sides = {lt.kind: node.left, rt.kind: node.right}
        if lt.kind == rt.kind and lt.kind in ("number", "bool", "category"):
            return
        if kinds == {"category", "string"}:
            cat = lt if lt.kind == "category" else rt
            self.label(cat.field, sides["string"])
            return
        if kinds == {"category", "number"}:
            cat = lt if lt.kind == "category" else rt
            raise self.fail(f"cannot compare {cat} with a number; category labels are written as strings, "
                            f"e.g. {cat.field} == '12'", sides["number"].span)
        if kinds == {"bool", "number"}:
            raise self.fail("cannot compare true/false with a number; write true or false (correct == false) "
                            "or use the condition itself", sides["number"].span)
        if kinds == {"string"}:
            raise self.fail("both sides are strings; compare a field with a string, e.g. action == 'hint'",
                            node.span)
        raise self.fail(f"cannot compare {lt} with {rt}", node.span)

    def label(self, field_name: str, node: Str) -> None:
        if not self.schema.has_label(field_name, node.value):
            labels = self.schema.labels(field_name).tolist()
            listing = f" Categories: {sorted(labels)!r}." if len(labels) <= 12 else ""
            raise self.fail(f"{node.value!r} is not a category of {field_name!r}."
                            f"{did_you_mean(node.value, labels)}{listing}", node.span)

    def member(self, node: Member):
        operand = self.visit(node.operand)
        t = self.out.types[operand]
        if t.kind not in ("number", "bool", "category"):
            raise self.fail(f"'in' needs a field or expression on its left, but this is {t}", node.operand.span)
        items = tuple(self.item(t, item) for item in node.items.items)
        return Member(operand, ListLit(items, span=node.items.span), node.negate, span=node.span), BOOL

    def item(self, t: Type, item: Node) -> Node:
        number = _literal_number(item)
        if t.kind == "category" and isinstance(item, Str):
            self.label(t.field, item)
            return item
        if t.kind == "number" and number is not None:
            return Num(number, span=item.span)
        if t.kind == "bool" and isinstance(item, Bool):
            return item
        want = {"category": "strings (category labels)", "number": "numbers", "bool": "true or false"}[t.kind]
        raise self.fail(f"the value on the left is {t}, so the list must hold {want}", item.span)

    # -- calls ---------------------------------------------------------------------------------------
    def call(self, node: Call):
        spec = FUNCTIONS.get(node.func)
        if spec is None:
            if node.func in self.schema.kinds or node.func in self.rule_names:
                raise self.fail(f"{node.func!r} is a field or rule, not a function", node.func_span)
            raise self.fail(f"unknown function {node.func!r}.{did_you_mean(node.func, FUNCTIONS)} "
                            f"Functions: {', '.join(FUNCTIONS)}.", node.func_span)
        if spec.fitted and self.in_among:
            raise self.fail(f"{spec.name}() cannot be used inside 'among': the condition that picks training "
                            "events must not itself need training", node.span)
        bound = self.bind(spec, node)
        if spec.check is not None and (problem := spec.check(bound)):
            raise self.fail(problem, node.span)
        types = {k: self.out.types[v] for k, v in bound.items() if isinstance(v, Node)}
        apply = Apply(spec.name, tuple((p.name, bound[p.name]) for p in spec.params), span=node.span)
        if spec.fitted:
            self.out.norms.append(apply)
        return apply, spec.result(types)

    def bind(self, spec: Function, node: Call) -> dict:
        positional = [p for p in spec.params if not p.keyword_only]
        if len(node.args) > len(positional):
            names = ", ".join(p.name for p in positional)
            raise self.fail(f"{spec.name}() takes {len(positional)} positional argument(s) ({names}), got "
                            f"{len(node.args)}; name the others, as in {spec.signature()}",
                            node.args[len(positional)].span)
        given = {p.name: (a, a.span) for p, a in zip(positional, node.args, strict=False)}
        names = [p.name for p in spec.params]
        for kw in node.kwargs:
            if kw.name not in names:
                raise self.fail(f"{spec.name}() has no argument {kw.name!r}.{did_you_mean(kw.name, names)} "
                                f"Signature: {spec.signature()}", kw.span)
            if kw.name in given:
                raise self.fail(f"{spec.name}() got {kw.name!r} twice", kw.span)
            given[kw.name] = (kw.value, kw.span)
        bound = {}
        for p in spec.params:
            if p.name in given:
                bound[p.name] = _KINDS[p.kind](self, spec, p, given[p.name][0])
            elif p.default is REQUIRED:
                raise self.fail(f"{spec.name}() needs its {p.name!r} argument: {spec.signature()}", node.span)
            else:
                bound[p.name] = p.default
        return bound

    # -- argument kinds ------------------------------------------------------------------------------
    def arg_value(self, spec: Function, p: Param, raw: Node) -> Node:
        new = self.visit(raw)
        t = self.out.types[new]
        if t.kind not in ("number", "bool", "category"):
            raise self.fail(f"{spec.name}() argument {p.name!r} must be a field or an expression, not {t}",
                            raw.span)
        return new

    def arg_number_literal(self, spec: Function, p: Param, raw: Node, test, what: str):
        value = _literal_number(raw)
        if value is None or not test(value):
            raise self.fail(f"{spec.name}() argument {p.name!r} must be {what} written out, got "
                            f"{show(raw)}", raw.span)
        return value

    def arg_count(self, spec, p, raw) -> int:
        return int(self.arg_number_literal(spec, p, raw, lambda v: v >= 1 and float(v).is_integer(),
                                           "a whole number >= 1"))

    def arg_seconds(self, spec, p, raw) -> float:
        return float(self.arg_number_literal(spec, p, raw, lambda v: v > 0,
                                             "a positive duration (e.g. 10s, 2min)"))

    def arg_fraction(self, spec, p, raw) -> float:
        return float(self.arg_number_literal(spec, p, raw, lambda v: 0 <= v <= 1, "a number from 0 to 1"))

    def quoted(self, spec: Function, p: Param, raw: Node, example: str) -> str:
        if not isinstance(raw, Str):
            hint = f"{p.name}={show(raw)!r}" if isinstance(raw, Name) else f"{p.name}={example!r}"
            raise self.fail(f"{spec.name}() argument {p.name!r} must be a quoted name, e.g. {hint}", raw.span)
        return raw.value

    def arg_scope(self, spec, p, raw) -> str:
        scope = self.quoted(spec, p, raw, "step")
        if scope not in SCOPES:
            raise self.fail(f"unknown scope {scope!r}.{did_you_mean(scope, SCOPES)} Scopes: "
                            f"{', '.join(SCOPES)}.", raw.span)
        if scope not in self.schema.kinds:
            raise self.fail(f"scope {scope!r} groups events by the {scope!r} field, and the log has none; map a "
                            f"column to {scope!r} when building the EventLog (columns={{{scope!r}: ...}})",
                            raw.span)
        return scope

    def arg_key_field(self, spec, p, raw) -> str:
        name = self.quoted(spec, p, raw, "step")
        kinds = self.schema.kinds
        if name not in kinds:
            raise self.fail(f"{spec.name}() {p.name}={name!r}: the log has no field {name!r}."
                            f"{did_you_mean(name, kinds)}", raw.span)
        if kinds[name] != "category":
            raise self.fail(f"{spec.name}() {p.name}={name!r}: {name!r} is a {kinds[name]} field; {p.name} needs "
                            "a category field such as 'step', 'problem' or 'skill'", raw.span)
        if name in PERSONAL_KEYS:
            raise self.fail(f"{spec.name}() {p.name}={name!r}: a norm per {name} would be learned from the training "
                            f"students' own events and stored in the fitted detector, yet never apply to a student it "
                            "has not seen (every held-out student falls back to the overall norm); use a key of the "
                            "content such as 'step', 'problem' or 'skill'", raw.span)
        return name

    def arg_number_field(self, spec, p, raw) -> Node:
        if not isinstance(raw, Name) or raw.name not in self.schema.kinds:
            if isinstance(raw, Name):
                self.visit(raw)  # raises the unknown-name error with its suggestion
            raise self.fail(f"{spec.name}() argument {p.name!r} must be the name of a number field (e.g. "
                            "duration), written without quotes", raw.span)
        new = self.visit(raw)
        t = self.out.types[new]
        if t.kind != "number":
            raise self.fail(f"{spec.name}() needs a number field, but {raw.name!r} is {t}", raw.span)
        return new

    def arg_norm_cond(self, spec, p, raw) -> Node:
        outer, self.in_among = self.in_among, True
        try:
            return self.typed(raw, BOOL, f"{spec.name}() argument {p.name!r}")
        finally:
            self.in_among = outer


_HANDLERS = {
    Num: _Checker.literal, Str: _Checker.literal, Bool: _Checker.literal, Name: _Checker.name,
    Unary: _Checker.unary, Logic: _Checker.logic, Binary: _Checker.binary, Member: _Checker.member,
    Call: _Checker.call,
}

_KINDS = {
    "value": _Checker.arg_value,
    "cond": lambda self, spec, p, raw: self.typed(raw, BOOL, f"{spec.name}() argument {p.name!r}"),
    "number": lambda self, spec, p, raw: self.typed(raw, NUMBER, f"{spec.name}() argument {p.name!r}"),
    "count": _Checker.arg_count,
    "seconds": _Checker.arg_seconds,
    "fraction": _Checker.arg_fraction,
    "scope": _Checker.arg_scope,
    "key_field": _Checker.arg_key_field,
    "number_field": _Checker.arg_number_field,
    "norm_cond": _Checker.arg_norm_cond,
}


def check_rule(name: str, text: str, tree: Node, schema: Schema, rule_names, *,
               require_bool: bool = True) -> Checked:
    """Check one parsed rule against ``schema``; its condition must be true/false (if ``require_bool``).

    Raises
    ------
    RuleCheckError
        Naming the rule, with its text and a caret under the offending span.
    """
    checker = _Checker(name, text, schema, rule_names)
    new = checker.visit(tree)
    got = checker.out.types[new]
    if require_bool and got.kind != "bool":
        raise checker.fail(f"the condition must be true/false, but this is {got}; compare it with "
                           "something (e.g. duration > 5s)", tree.span)
    checker.out.tree = new
    return checker.out


@dataclass
class CheckedSet:
    """Every rule checked, with a dependency order and which rules need fitted norms."""

    rules: dict            # name -> Checked, in rule-set order
    order: list            # names with every rule after the rules it refers to
    fitted: dict           # name -> uses typical/zscore itself or through references
    probe: Checked | None = None  # an expression of any type, checked for inspection (RuleSet.values)


def check_all(entries, log, probe: tuple | None = None) -> CheckedSet:
    """Check ``[(name, text, tree), ...]`` against ``log``'s schema and against each other.

    ``probe`` is an optional ``(text, tree)`` expression of any type that may refer to the rules.
    """
    schema = Schema(log)
    names = [name for name, _, _ in entries]
    for name in names:
        if name in schema.kinds:
            raise error(RuleCheckError, f"rule name {name!r} is also a field of the log; rename the rule",
                        rule=name)
    known = frozenset(names)  # one set for every rule: checking stays linear in the number of rules
    checked = {name: check_rule(name, text, tree, schema, known) for name, text, tree in entries}
    order = _topological(checked)
    fitted: dict[str, bool] = {}
    for name in order:
        fitted[name] = bool(checked[name].norms) or any(fitted[d] for d in checked[name].refs)
    extra = None
    if probe is not None:
        extra = check_rule("", probe[0], probe[1], schema, known, require_bool=False)
    for rule in (*checked.values(), *([extra] if extra else [])):
        for ref, span in rule.among_refs.items():
            if fitted[ref]:
                raise error(RuleCheckError, f"rule {ref!r} uses a fitted function (typical or zscore), so it "
                            "cannot be used inside 'among'", rule=rule.name, source=rule.text, span=span)
    return CheckedSet(checked, order, fitted, extra)


def _topological(checked: dict) -> list:
    """Dependencies first; an iterative depth-first search, so long chains of rules cannot overflow."""
    state: dict[str, int] = {}  # 1 = on the current path, 2 = done
    order: list[str] = []
    for root in checked:
        if root in state:
            continue
        state[root], path, stack = 1, [root], [(root, iter(checked[root].refs))]
        while stack:
            node, deps = stack[-1]
            dep = next(deps, None)
            if dep is None:
                stack.pop()
                path.pop()
                state[node] = 2
                order.append(node)
            elif state.get(dep) == 1:
                cycle = " -> ".join([*path[path.index(dep):], dep])
                rule = checked[node]
                raise error(RuleCheckError, f"rules refer to each other in a cycle: {cycle}; a rule cannot "
                            "depend on itself", rule=node, source=rule.text, span=rule.refs[dep])
            elif dep not in state:
                state[dep] = 1
                path.append(dep)
                stack.append((dep, iter(checked[dep].refs)))
    return order
