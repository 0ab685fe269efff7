"""``Rule`` and ``RuleSet``: the Python mirror of a TOML rules file, and the door to compilation."""

from __future__ import annotations

import hashlib
import os
import re
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .. import _frame
from .._text import did_you_mean, first_hidden, visible
from ..errors import ParameterError, RuleCheckError, RuleSyntaxError
from ..limits import MAX_RULE_TEXT, check_depth
from .check import check_all
from .compile import MAX_WORK, Program
from .functions import FUNCTIONS
from .parse import parse
from .tokenize import KEYWORDS

try:
    import tomllib
except ImportError:  # Python 3.10
    import tomli as tomllib

__all__ = ["Rule", "RuleSet", "SUMMARIES", "DEFAULT_REPORT"]

SUMMARIES = ("count", "rate", "any", "longest_streak", "first_position", "first_seconds")
DEFAULT_REPORT = ("count", "rate", "any")
RULE_KEYS = ("means", "why", "when", "report")
_NAME = re.compile(r"[a-z_][a-z0-9_]*", flags=re.ASCII)
_MAX_NAME = 64


def _check_name(name) -> None:
    if not isinstance(name, str) or not _NAME.fullmatch(name) or len(name) > _MAX_NAME:
        raise RuleCheckError(f"Rule: name {name!r} is not a valid rule name; use lower-case letters, digits and "
                             f"'_', starting with a letter or '_' (at most {_MAX_NAME} characters), e.g. "
                             "'skimmed_hint'.")
    if name in KEYWORDS or name in FUNCTIONS:
        what = "a keyword" if name in KEYWORDS else "a function name"
        raise RuleCheckError(f"Rule: name {name!r} is {what} of the rule language; choose another name.")


def _check_text(name: str, key: str, text: str) -> None:
    """Rule text travels into shared reports: refuse what would hide itself there, and runaway lengths."""
    if len(text) > MAX_RULE_TEXT:
        raise RuleCheckError(f"Rule {name!r}: {key!r} has {len(text):,} characters, more than the limit of "
                             f"{MAX_RULE_TEXT:,} (rulefeat.limits.MAX_RULE_TEXT); shorten it.")
    hidden = first_hidden(text)
    if hidden is not None:
        position, escape = hidden
        raise RuleCheckError(f"Rule {name!r}: {key!r} holds the hidden character {escape} at position {position} "
                             f"(a control, NUL or bidirectional-override character, which can make text read "
                             f"differently from what it is): {visible(text[max(0, position - 20):position + 20])!r}. "
                             "Remove it; tabs and line breaks are allowed.")


def _report(name: str, report) -> tuple[str, ...]:
    if report is None:
        return DEFAULT_REPORT
    items = (report,) if isinstance(report, str) else report
    try:
        items = tuple(items)
    except TypeError:
        raise RuleCheckError(f"Rule {name!r}: report must be a list of summaries from {list(SUMMARIES)!r}. "
                             f"Got {report!r}.") from None
    for item in items:
        if item not in SUMMARIES:
            raise RuleCheckError(f"Rule {name!r}: unknown report summary {item!r}."
                                 f"{did_you_mean(str(item), SUMMARIES)} Summaries: {list(SUMMARIES)!r}.")
    if len(set(items)) < len(items):
        raise RuleCheckError(f"Rule {name!r}: report lists a summary twice: {list(items)!r}.")
    return items


@dataclass(frozen=True)
class Rule:
    """One expert rule: a name, a condition over events, and what to report per unit.

    Parameters
    ----------
    name : str
        Lower-case identifier (``[a-z_][a-z0-9_]*``); not a field, function or keyword.
    when : str
        The condition, in the rule language (docs/rules.md). The rule fires on
        the events where the condition is definitely true.
    means, why : str
        What behaviour the rule detects, and the expert's reason; kept for reports.
    report : sequence of str, optional
        Per-unit summaries from :data:`SUMMARIES`; default :data:`DEFAULT_REPORT`.
        An empty list makes a helper rule that other rules use but that adds no features.

    Examples
    --------
    >>> Rule("quick_hint", when="action == 'hint' and gap < 3s").report
    ('count', 'rate', 'any')
    """

    name: str
    when: str
    means: str = ""
    why: str = ""
    report: tuple[str, ...] | None = None

    def __post_init__(self):
        _check_name(self.name)
        if not isinstance(self.when, str):
            raise RuleCheckError(f"Rule {self.name!r}: 'when' must be a string of rule text, got "
                                 f"{type(self.when).__name__}.")
        if not self.when.strip():
            raise RuleCheckError(f"Rule {self.name!r}: empty condition; write when it fires, e.g. "
                                 "when=\"action == 'hint' and gap < 3s\".")
        for key, value in (("means", self.means), ("why", self.why)):
            if not isinstance(value, str):
                raise RuleCheckError(f"Rule {self.name!r}: {key!r} must be a string.")
        for key, value in (("means", self.means), ("why", self.why)):  # 'when' is the tokenizer's
            _check_text(self.name, key, value)
        object.__setattr__(self, "report", _report(self.name, self.report))


class RuleSet:
    """An ordered collection of rules with unique names, parsed on construction.

    Parameters
    ----------
    rules : iterable of Rule

    Raises
    ------
    RuleSyntaxError
        When a rule's text does not parse (with the rule name and a caret line).
    RuleCheckError
        On duplicate names or items that are not :class:`Rule`.

    Examples
    --------
    >>> rs = RuleSet([Rule("quick_hint", when="action == 'hint' and gap < 3s"),
    ...               Rule("quick_again", when="quick_hint and prev(quick_hint)")])
    >>> rs.names
    ('quick_hint', 'quick_again')
    >>> print(rs.to_toml().splitlines()[1])
    when = "action == 'hint' and gap < 3s"
    """

    def __init__(self, rules: Iterable[Rule]):
        rules = tuple(rules)
        seen: dict[str, int] = {}
        for i, rule in enumerate(rules):
            if not isinstance(rule, Rule):
                raise RuleCheckError(f"RuleSet: item {i} is a {type(rule).__name__}, not a Rule; build rules "
                                     "with Rule(name, when=...).")
            if rule.name in seen:
                raise RuleCheckError(f"RuleSet: duplicate rule name {rule.name!r} (items {seen[rule.name]} and "
                                     f"{i}); every rule needs its own name.")
            seen[rule.name] = i
        self._rules = rules
        self._trees = {rule.name: parse(rule.when, rule=rule.name) for rule in rules}

    # -- collection --------------------------------------------------------------------------------
    def __iter__(self) -> Iterator[Rule]:
        return iter(self._rules)

    def __len__(self) -> int:
        return len(self._rules)

    def __getitem__(self, name: str) -> Rule:
        for rule in self._rules:
            if rule.name == name:
                return rule
        raise KeyError(f"no rule named {name!r}.{did_you_mean(str(name), self.names)}")

    def __contains__(self, name) -> bool:
        return any(rule.name == name for rule in self._rules)

    def __eq__(self, other) -> bool:
        return isinstance(other, RuleSet) and self._rules == other._rules

    __hash__ = None  # type: ignore[assignment]

    def __repr__(self) -> str:
        return f"RuleSet({list(self.names)!r})"

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(rule.name for rule in self._rules)

    # -- compilation -------------------------------------------------------------------------------
    def bind(self, log, *, min_count: int = 5, max_work: int = MAX_WORK) -> Program:
        """Check the rules against ``log``'s schema and compile them into a :class:`Program`.

        ``min_count`` is how many training values a key (e.g. a step) needs before
        ``typical``/``zscore`` use its own statistic rather than the overall one.
        ``max_work`` caps one evaluation at that many array operations (distinct computed
        sub-expressions x events, default 10**10, some tens of seconds); a rule set beyond
        it is refused with a :class:`RuleCheckError` naming the rule that crosses it, here
        and whenever the program later evaluates a larger log.
        """
        for name, value in (("min_count", min_count), ("max_work", max_work)):
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise ParameterError(f"The {name!r} parameter of RuleSet.bind must be a positive integer. "
                                     f"Got {value!r} instead.")
        entries = [(rule.name, rule.when, self._trees[rule.name]) for rule in self._rules]
        return Program(self, check_all(entries, log), log, min_count, max_work)

    def evaluate(self, log, *, min_count: int = 5):
        """Every rule's firing on every event of ``log``, as a DataFrame indexed by input row number.

        For inspection only: norms (``typical``, ``zscore``) are fitted on this same
        log, so nothing here is held out. Use :meth:`compile`, ``fit`` on training
        students and ``evaluate`` for honest features.
        """
        program = self.bind(log, min_count=min_count).fit(log)
        fired = program.evaluate(log)
        return _frame.frame_from_arrays(fired, index=pd.Index(log.row_numbers, name="input_row"))

    def values(self, expression: str, log, *, train=None, min_count: int = 5) -> pd.Series:
        """What ``expression`` computes on every event of ``log`` (an inspection tool).

        The expression may be of any type and may refer to this set's rules.
        Norms are fitted on ``train`` (default: ``log`` itself). Numbers come back
        as floats (NaN missing), true/false as a nullable boolean, categories as
        their labels; the index is the input row number.

        Examples
        --------
        >>> import pandas as pd
        >>> from rulefeat import EventLog
        >>> log = EventLog(pd.DataFrame({"student": ["a", "a", "a"], "time": [0.0, 1.0, 9.0],
        ...                              "action": ["hint", "hint", "attempt"]}))
        >>> RuleSet([]).values("count_before(action == 'hint')", log).tolist()
        [0.0, 1.0, 2.0]
        """
        tree = parse(expression, rule="")
        entries = [(rule.name, rule.when, self._trees[rule.name]) for rule in self._rules]
        program = Program(self, check_all(entries, log, probe=(expression, tree)), log, min_count)
        program.fit(log if train is None else train)
        raw, kind = program.probe_values(log)
        return _decode(raw, kind, program, log, expression)

    # -- TOML --------------------------------------------------------------------------------------
    @classmethod
    def from_toml(cls, source) -> RuleSet:
        """Read rules from TOML text or a ``.toml`` file (``[rules.<name>]`` tables; see docs/rules.md)."""
        text = read_source(source)
        check_depth(text, "toml", f"RuleSet.from_toml: {source_name(source)}", RuleSyntaxError)
        try:
            data = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise RuleSyntaxError(f"RuleSet.from_toml: the rules file is not valid TOML: {exc}.") from None
        return cls(_rules_from(data))

    def to_toml(self) -> str:
        """The rules as TOML text, in a canonical form (every key written, fixed order)."""
        blocks = []
        for rule in self._rules:
            lines = [f"[rules.{rule.name}]"]
            lines += [f"{key} = {_toml_string(text)}" for key, text in (("means", rule.means), ("why", rule.why))
                      if text]
            lines.append(f"when = {_toml_string(rule.when)}")
            lines.append(f"report = [{', '.join(_toml_string(s) for s in rule.report)}]")
            blocks.append("\n".join(lines) + "\n")
        return "\n".join(blocks)

    def text_hash(self) -> str:
        """SHA-256 of :meth:`to_toml`: identifies the exact rules for reproducibility records."""
        return hashlib.sha256(self.to_toml().encode("utf-8")).hexdigest()


def _is_path(source) -> bool:
    return isinstance(source, os.PathLike) or (
        isinstance(source, str) and "\n" not in source and source.strip().endswith(".toml"))


def source_name(source) -> str:
    """How errors name a rules source: the file as given, or "the rules text"."""
    return f"the rules file {str(source)!r}" if _is_path(source) else "the rules text"


def read_source(source) -> str:
    """The text of a rules file: TOML text as it is, bytes decoded, a ``.toml`` path read."""
    if isinstance(source, bytes):
        return source.decode("utf-8", errors="replace")
    if isinstance(source, str) and not _is_path(source):
        return source
    if not isinstance(source, (str, os.PathLike)):
        raise RuleSyntaxError(f"RuleSet.from_toml: expected TOML text or a path to a .toml file, got "
                              f"{type(source).__name__}.")
    try:
        return Path(source).read_text(encoding="utf-8")
    except (OSError, ValueError) as exc:  # ValueError: undecodable bytes or a NUL in the path
        raise RuleSyntaxError(f"RuleSet.from_toml: cannot read the rules file {str(source)!r}: {exc}.") from None


def _rules_from(data: dict) -> list[Rule]:
    return [rule_from_table(name, table) for name, table in rule_tables(data).items()]


def rule_tables(data: dict) -> dict:
    """The ``[rules.<name>]`` tables of a parsed rules file, after checking its top level."""
    extra = [k for k in data if k != "rules"]
    if extra:
        raise RuleSyntaxError(f"RuleSet.from_toml: unknown top-level key {extra[0]!r}."
                              f"{did_you_mean(extra[0], ['rules'])} Define each rule in a [rules.<name>] table.")
    tables = data.get("rules")
    if not isinstance(tables, dict) or not tables:
        raise RuleSyntaxError("RuleSet.from_toml: the file defines no rules; add a table such as\n"
                              "[rules.quick_hint]\nwhen = \"action == 'hint' and gap < 3s\"")
    return tables


def rule_from_table(name: str, table) -> Rule:
    """One :class:`Rule` from its TOML table, checking the table's keys and value types."""
    where = f"RuleSet.from_toml: [rules.{name}]"
    if not isinstance(table, dict):
        raise RuleSyntaxError(f"{where} must be a table with a 'when' key, got a {type(table).__name__}.")
    for key in table:
        if key not in RULE_KEYS:
            raise RuleSyntaxError(f"{where}: unknown key {key!r}.{did_you_mean(key, RULE_KEYS)} "
                                  f"Keys: {list(RULE_KEYS)!r}.")
    if "when" not in table:
        raise RuleSyntaxError(f"{where} has no 'when' key; write the condition, e.g. when = \"gap < 3s\".")
    for key in ("means", "why", "when"):
        if key in table and not isinstance(table[key], str):
            raise RuleSyntaxError(f"{where}: {key!r} must be a string, got {type(table[key]).__name__}.")
    report = table.get("report")
    if report is not None and not isinstance(report, (str, list)):
        raise RuleSyntaxError(f"{where}: 'report' must be a list of strings, got {type(report).__name__}.")
    return Rule(name, when=table["when"], means=table.get("means", ""), why=table.get("why", ""), report=report)


def _toml_string(text: str) -> str:
    out = []
    for ch in text:
        if ch in ('"', "\\"):
            out.append("\\" + ch)
        elif ch == "\n":
            out.append("\\n")
        elif ch == "\t":
            out.append("\\t")
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _decode(raw, kind: str, program: Program, log, name: str) -> pd.Series:
    index = pd.Index(log.row_numbers, name="input_row")
    if kind == "bool":
        values = pd.array(np.where(raw == 1, None, raw == 2), dtype="boolean")
    elif kind == "category":
        field = program._types[program._checked.probe.tree].field
        values = _frame.categorical(raw, log.categories(field))
    else:
        values = raw
    return pd.Series(values, index=index, name=name)
