"""Every problem of a rules file at once: TOML, table keys, syntax, and the check against a log's schema.

:meth:`RuleSet.from_toml` and :meth:`RuleSet.bind` stop at the first error, which is what a program wants.
A person fixing a rules file wants all of them: :func:`find_problems` reads each rule on its own, so one
broken rule does not hide the next, and returns the errors (each with its caret line and did-you-mean)
instead of raising.  Rules that refer to a broken rule are still checked (the broken rule's name is known),
so one typo is reported once.

>>> import pandas as pd
>>> from rulefeat import EventLog
>>> log = EventLog(pd.DataFrame({"student": ["a", "a"], "time": [0.0, 1.0], "action": ["hint", "attempt"]}))
>>> problems = find_problems('''
... [rules.quick]
... when = "gapp < 3s"
... [rules.odd]
... when = "action == 'hnt'"
... ''', log)
>>> [p.rule for p in problems]
['quick', 'odd']
>>> print(problems[0])
Rule 'quick': unknown field or rule 'gapp'. Did you mean 'gap'?
    gapp < 3s
    ^^^^
"""

from __future__ import annotations

import re

from ..errors import RuleCheckError, RulefeatError, RuleSyntaxError
from ..limits import MAX_TOML_DEPTH, check_depth, nesting_depth
from ._format import error
from .check import Schema, check_all, check_rule
from .parse import parse
from .ruleset import read_source, rule_from_table, rule_tables, source_name

try:
    import tomllib
except ImportError:  # Python 3.10
    import tomli as tomllib

__all__ = ["find_problems", "rule_line", "rule_names"]


def find_problems(source, log=None) -> list[RulefeatError]:
    """Every problem of a rules file (TOML text or a ``.toml`` path), checked against ``log`` when given.

    Returns
    -------
    list of RulefeatError
        In file order; empty when the rules read, parse and (with ``log``) bind cleanly.  Each error has a
        ``rule`` attribute (None for problems of the file as a whole) and its message carries the caret line.
    """
    try:
        text = read_source(source)
        check_depth(text, "toml", source_name(source), RuleSyntaxError)
        tables = rule_tables(_toml(text))
    except RulefeatError as exc:
        return [_tag(exc, None)]
    problems: list[RulefeatError] = []
    parsed = []
    for name, table in tables.items():
        try:
            rule = rule_from_table(name, table)
            parsed.append((name, rule.when, parse(rule.when, rule=name)))
        except RulefeatError as exc:
            problems.append(_tag(exc, name))
    if log is not None:
        problems += _schema_problems(parsed, list(tables), log, complete=not problems)
    return sorted(problems, key=lambda p: list(tables).index(p.rule) if p.rule in tables else -1)


def _toml(text: str) -> dict:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RuleSyntaxError(f"the rules file is not valid TOML: {exc}.") from None


def _schema_problems(parsed: list, names: list, log, *, complete: bool) -> list[RulefeatError]:
    schema = Schema(log)
    problems = []
    for name, text, tree in parsed:
        try:
            if name in schema.kinds:
                raise error(RuleCheckError, f"rule name {name!r} is also a field of the log; rename the rule",
                            rule=name)
            check_rule(name, text, tree, schema, names)
        except RulefeatError as exc:
            problems.append(_tag(exc, name))
    if complete and not problems and parsed:
        try:  # what only shows across rules (cycles, fitted rules inside 'among'), once every rule checks
            check_all(parsed, log)
        except RulefeatError as exc:
            problems.append(_tag(exc, vars(exc).get("rule")))
    return problems


def _tag(exc: RulefeatError, rule: str | None) -> RulefeatError:
    if vars(exc).get("rule") is None:
        exc.rule = rule
    return exc


def rule_line(text: str, rule: str | None) -> int | None:
    """The 1-based line of the ``[rules.<rule>]`` header in a rules file's text, if there is one."""
    if rule is None:
        return None
    header = re.compile(r"^[ \t]*\[[ \t]*rules[ \t]*\.[ \t]*(?:" + re.escape(rule) + r"|\"" + re.escape(rule) + r"\")[ \t]*\]",
                        flags=re.MULTILINE)
    found = header.search(text)
    return None if found is None else text.count("\n", 0, found.start()) + 1


def rule_names(text: str) -> list[str]:
    """The names of the ``[rules.<name>]`` tables of a rules file's text (empty when it is not valid TOML)."""
    if nesting_depth(text, "toml") > MAX_TOML_DEPTH:
        return []
    try:
        tables = tomllib.loads(text).get("rules")
    except tomllib.TOMLDecodeError:
        return []
    return [str(name) for name in tables] if isinstance(tables, dict) else []
