"""The rule language's syntax tree, its value types, and a canonical printer.

Nodes are frozen dataclasses whose equality and hash ignore source spans, so a
node *is* its own structural key: the same sub-expression written in two rules
compares equal, which is what lets the compiler compute it once.

The parser produces ``Num, Str, Bool, ListLit, Name, Unary, Binary, Logic,
Member, Call`` (with ``Keyword``); the checker rewrites names into ``Field`` or
``RuleRef`` and calls into ``Apply`` with every parameter bound in signature
order, so equal meanings get equal keys (``prev(x)`` == ``prev(x, n=1)``).
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from functools import cached_property

from ._format import Span
from .operators import INFIX, PREFIX

__all__ = [
    "Node", "Num", "Str", "Bool", "ListLit", "Name", "Unary", "Binary", "Logic", "Member", "Keyword",
    "Call", "Field", "RuleRef", "Apply", "Type", "NUMBER", "BOOL", "STRING", "LIST", "category", "show",
]

_NOSPAN = Span(0, 0)
_FIELD_NAMES: dict[type, tuple[str, ...]] = {}


def _field_names(cls: type) -> tuple[str, ...]:
    if cls not in _FIELD_NAMES:
        _FIELD_NAMES[cls] = tuple(f.name for f in fields(cls))
    return _FIELD_NAMES[cls]


class Node:
    """Base of every node; subclasses are frozen dataclasses with a ``span`` that equality ignores."""

    span: Span

    def children(self) -> list[Node]:
        state = self.__dict__
        if "_children" not in state:  # nodes are immutable: list the children once
            out = []
            for name in _field_names(type(self)):
                value = state[name]
                items = value if isinstance(value, tuple) else (value,)
                for item in items:
                    if isinstance(item, tuple):  # Apply's (name, value) pairs
                        item = item[1]
                    if isinstance(item, Node):
                        out.append(item)
            state["_children"] = tuple(out)
        return list(state["_children"])

    def __getstate__(self) -> dict:
        # A remembered hash is only valid in the process that computed it (str hashes are salted).
        return {k: v for k, v in self.__dict__.items() if k not in ("_hash", "_children")}

    @cached_property
    def depth(self) -> int:
        """1 + the deepest child; the parser builds bottom-up so children are already cached."""
        return 1 + max((c.depth for c in self.children()), default=0)


def _span():
    return field(default=_NOSPAN, compare=False, repr=False)


@dataclass(frozen=True)
class Num(Node):
    value: float
    span: Span = _span()


@dataclass(frozen=True)
class Str(Node):
    value: str
    span: Span = _span()


@dataclass(frozen=True)
class Bool(Node):
    value: bool
    span: Span = _span()


@dataclass(frozen=True)
class ListLit(Node):
    items: tuple
    span: Span = _span()


@dataclass(frozen=True)
class Name(Node):
    name: str
    span: Span = _span()


@dataclass(frozen=True)
class Unary(Node):
    op: str
    operand: Node
    span: Span = _span()


@dataclass(frozen=True)
class Binary(Node):
    op: str
    left: Node
    right: Node
    span: Span = _span()


@dataclass(frozen=True)
class Logic(Node):
    """``and`` / ``or`` over two or more operands (flattened, so long chains stay shallow)."""

    op: str
    operands: tuple
    span: Span = _span()


@dataclass(frozen=True)
class Member(Node):
    operand: Node
    items: ListLit
    negate: bool
    span: Span = _span()


@dataclass(frozen=True)
class Keyword(Node):
    name: str
    value: Node
    span: Span = _span()


@dataclass(frozen=True)
class Call(Node):
    func: str
    args: tuple
    kwargs: tuple
    span: Span = _span()
    func_span: Span = _span()


@dataclass(frozen=True)
class Field(Node):
    name: str
    span: Span = _span()


@dataclass(frozen=True)
class RuleRef(Node):
    name: str
    span: Span = _span()


@dataclass(frozen=True)
class Apply(Node):
    """A checked call: ``params`` holds ``(name, value)`` for every parameter in signature order."""

    func: str
    params: tuple
    span: Span = _span()

    def arg(self, name: str):
        for key, value in self.params:
            if key == name:
                return value
        raise KeyError(name)


def _remember_hash(cls: type) -> None:
    """Compute a node's structural hash once: memo lookups on a big tree would otherwise rehash it whole."""
    plain = cls.__hash__

    def __hash__(self) -> int:
        state = self.__dict__
        if "_hash" not in state:
            state["_hash"] = plain(self)
        return state["_hash"]

    cls.__hash__ = __hash__


for _cls in (Num, Str, Bool, ListLit, Name, Unary, Binary, Logic, Member, Keyword, Call, Field, RuleRef, Apply):
    _remember_hash(_cls)


@dataclass(frozen=True)
class Type:
    """A value type the checker infers: number, bool, category (of a field), string or list."""

    kind: str
    field: str | None = None

    def __str__(self) -> str:
        if self.kind == "category":
            return f"a category of {self.field!r}"
        return {"number": "a number", "bool": "true/false", "string": "a string", "list": "a list"}[self.kind]


NUMBER, BOOL, STRING, LIST = Type("number"), Type("bool"), Type("string"), Type("list")


def category(name: str) -> Type:
    return Type("category", name)


# -- canonical printing ------------------------------------------------------------------------------
def _number(value: float) -> str:
    return str(int(value)) if float(value).is_integer() else repr(float(value))


def _quote(text: str) -> str:
    return "'" + text.replace("\\", "\\\\").replace("'", "\\'") + "'"


def _precedence(node: Node) -> int:
    if isinstance(node, (Binary, Logic)):
        return INFIX[node.op].precedence
    if isinstance(node, Member):
        return INFIX["in"].precedence
    if isinstance(node, Unary):
        return PREFIX[node.op].precedence
    return 99


def _wrap(node: Node, above: int, strict: bool = False) -> str:
    text = show(node)
    p = _precedence(node)
    return f"({text})" if p < above or (strict and p == above) else text


def _value(value) -> str:
    if isinstance(value, Node):
        return show(value)
    return _quote(value) if isinstance(value, str) else _number(value)


def show(node: Node) -> str:
    """Canonical text of a node (minimal parentheses); parsing it gives an equal node."""
    if isinstance(node, Num):
        return _number(node.value)
    if isinstance(node, Str):
        return _quote(node.value)
    if isinstance(node, Bool):
        return "true" if node.value else "false"
    if isinstance(node, (Name, Field, RuleRef)):
        return node.name
    if isinstance(node, ListLit):
        return "[" + ", ".join(show(i) for i in node.items) + "]"
    if isinstance(node, Unary):
        sep = " " if node.op == "not" else ""
        return f"{node.op}{sep}{_wrap(node.operand, PREFIX[node.op].precedence)}"
    if isinstance(node, Binary):
        p = INFIX[node.op].precedence
        return f"{_wrap(node.left, p, strict=p == 4)} {node.op} {_wrap(node.right, p, strict=True)}"
    if isinstance(node, Logic):
        p = INFIX[node.op].precedence
        return f" {node.op} ".join(_wrap(o, p, strict=True) for o in node.operands)
    if isinstance(node, Member):
        op = "not in" if node.negate else "in"
        return f"{_wrap(node.operand, 4, strict=True)} {op} {show(node.items)}"
    if isinstance(node, Call):
        parts = [show(a) for a in node.args] + [f"{k.name}={show(k.value)}" for k in node.kwargs]
        return f"{node.func}({', '.join(parts)})"
    if isinstance(node, Apply):
        parts = [_value(v) if i == 0 else f"{k}={_value(v)}"
                 for i, (k, v) in enumerate(node.params) if v is not None]
        return f"{node.func}({', '.join(parts)})"
    raise TypeError(f"show: not a rule node: {type(node).__name__}")
