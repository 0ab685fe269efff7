"""The expected shape of saved report JSON, checked at load so a damaged file fails there and says where.

A shape is data: a type word (``"str"``, ``"int"``, ``"num"``, ``"bool"``, ``"dict"``, ``"list"``, ``"any"``;
a trailing ``?`` allows null), a dict of key -> shape (``"*"`` for every other key; a leading ``+`` marks a
key that must be present) or a one-item list (every item has that shape).  :func:`check_shape` walks a
value against a shape without recursion and raises the caller's error naming the first field off shape,
as a path (``results['rules'][2]['means']``).

>>> check_shape({"rules": [{"name": 3}]}, {"rules": [{"+name": "str"}]}, "example")
Traceback (most recent call last):
...
rulefeat.errors.EvaluationError: example: results['rules'][0]['name'] must be a string; got int 3.
"""

from __future__ import annotations

from ..errors import EvaluationError

__all__ = ["REPORT_SHAPE", "DIAGNOSTICS_SHAPE", "check_shape"]

_WORDS = {"str": "a string", "int": "an integer", "num": "a number", "bool": "true or false",
          "dict": "an object (dict)", "list": "a list", "any": "any value"}
_TESTS = {
    "str": lambda v: isinstance(v, str),
    "int": lambda v: isinstance(v, int) and not isinstance(v, bool),
    "num": lambda v: isinstance(v, (int, float)) and not isinstance(v, bool),
    "bool": lambda v: isinstance(v, bool),
    "dict": lambda v: isinstance(v, dict),
    "list": lambda v: isinstance(v, list),
    "any": lambda v: True,
}

NUM = "num?"
_RULE = {"+name": "str", "when": "str", "means": "str?", "why": "str?", "report": ["str"], "column": "str?",
         "primary": "str?"}
_COMPARISON = {"+variant": "str", "+baseline": "str", "+metric": "str", "ci_method": "str?", "boot_method": "str?",
               "effect": "str?",
               "*": NUM}

REPORT_SHAPE = {
    "task": "str", "primary_metric": "str", "rules_hash": "str?", "settings": "dict", "reproducibility": "dict",
    "data": {"n_units": "int?", "n_students": "int?", "n_events": "int?", "positive_rate": NUM,
             "log": {"actions": {"*": "int?"}, "issues": ["str"], "input_rows": "int?", "dropped_rows": "int?",
                     "sessions": "int?", "events": "int?", "students": "int?", "fields": ["str"]},
             "populations": {"*": {"n_units": "int?", "n_students": "int?", "positive_rate": NUM}}},
    "rules": [_RULE],
    "feature_counts": {"*": "int?"},
    "variants": {"*": {"+folds": {"*": {"*": NUM}}, "pooled": {"*": NUM}}},
    "comparisons": [_COMPARISON],
    "per_rule": [{"+rule": "str", "*": NUM}],
    "folds": [{"variant": "str?", "*": NUM}],
    "transfer": {"available": "bool?", "reason": "str?", "deltas": "list?",
                 "rows": [{"population": "str", "variant": "str", "*": NUM}]},
    "learning_curve": [{"*": NUM}],
    "guards": [{"kind": "str?", "message": "str?"}],
    "notes": ["str"],
}

_SPREAD = {"argmax": "str?", "argmin": "str?", "values": {"*": NUM}, "*": NUM}
_BLOCK = {"ci_method": "str?", "method": "str?", "r2_folds": [NUM], "*": NUM}
DIAGNOSTICS_SHAPE = {
    "kind": "str?", "version": "int?", "notes": ["str"], "rules": [_RULE],
    "settings": {"n_folds": "int?", "model": "str?", "*": "any"},
    "data": {"n_units": "int", "n_students": "int", "n_events": "int", "positive_rate": "num", "*": "any"},
    "per_rule": [{"+rule": "str", "primary": "str?", "column": "str?", "stability": {"*": _SPREAD},
                  "*": _BLOCK}],
    "per_population": [{"+rule": "str", "population": "str?", "*": NUM}],
    "hierarchical": {"available": "bool?", "reason": "str?", "base": ["str"], "extra": ["str"], "kind": "str?",
                     "r2_name": "str?", "test": "str?", "*": NUM},
    "shap": {"available": "bool?", "reason": "str?", "mined_group": "str?", "top_rules": ["str"],
             "per_rule": [{"+rule": "str", "*": NUM}], "mined": {"*": NUM}, "folds": [{"*": NUM}], "*": NUM},
}


def check_shape(value, shape, where: str, error: type[Exception] = EvaluationError) -> None:
    """Raise ``error`` for the first part of ``value`` that does not have ``shape`` (see the module doc)."""
    pending = [("results", value, shape)]
    while pending:
        path, item, expected = pending.pop()
        if isinstance(expected, str):
            _check_word(path, item, expected, where, error)
        elif isinstance(expected, list):
            _check_word(path, item, "list", where, error)
            pending += [(f"{path}[{i}]", x, expected[0]) for i, x in reversed(list(enumerate(item)))]
        else:
            _check_word(path, item, "dict", where, error)
            pending += _children(path, item, expected, where, error)


def _children(path: str, item: dict, expected: dict, where: str, error) -> list:
    required = [key[1:] for key in expected if key.startswith("+")]
    missing = [key for key in required if key not in item]
    if missing:
        raise error(f"{where}: {path} lacks the field {missing[0]!r}; the file is not a saved report or was edited.")
    fields = {key.lstrip("+"): sub for key, sub in expected.items()}
    out = []
    for key, sub in fields.items():
        if key != "*" and key in item:
            out.append((f"{path}[{key!r}]", item[key], sub))
    if "*" in fields:
        out += [(f"{path}[{key!r}]", x, fields["*"]) for key, x in item.items() if key not in fields]
    return out[::-1]


def _check_word(path: str, item, word: str, where: str, error) -> None:
    nullable = word.endswith("?")
    word = word.rstrip("?")
    if (nullable and item is None) or _TESTS[word](item):
        return
    shown = f"{item!r}"
    shown = shown if len(shown) <= 60 else shown[:57] + "..."
    raise error(f"{where}: {path} must be {_WORDS[word]}{' or null' if nullable else ''}; got "
                f"{type(item).__name__} {shown}.")
