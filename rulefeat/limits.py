"""Documented maxima of what rulefeat accepts, and the one check of nesting depth before parsing.

Each limit is far above any honest use and low enough that a careless or hostile input fails at once
with the library's own error instead of running for ever or exhausting the stack:

=====================  ========  ==============================================================
limit                  value     where it is enforced
=====================  ========  ==============================================================
``MAX_TOML_DEPTH``     32        nested ``[`` / ``{`` in a rules file (``RuleSet.from_toml``, ``find_problems``)
``MAX_JSON_DEPTH``     64        nested ``[`` / ``{`` in report JSON (``IncrementalValueReport.from_json``,
                                 ``RuleDiagnostics.from_json``)
``MAX_N_BOOT``         100,000   ``n_boot`` of ``incremental_value`` and ``diagnose``
``MAX_REPEATS``        100       ``repeats`` of ``incremental_value``
``MAX_FOLDS``          1,000     an int ``cv`` of ``incremental_value`` and ``diagnose``
``MAX_RULE_TEXT``      20,000    characters of a rule's ``when``, ``means`` or ``why``
=====================  ========  ==============================================================

The depth check scans the text without recursion (strings and comments are masked first, then the
brackets are counted with a cumulative sum), so it is safe on any input that fits in memory.

>>> nesting_depth('{"a": [1, {"b": "[[["}]}', "json")
3
>>> check_depth("x = " + "[" * 40 + "]" * 40, "toml", "rules.toml")
Traceback (most recent call last):
...
rulefeat.errors.ParameterError: rules.toml: the TOML text nests 40 levels of [ ] / { }, more than the limit of 32 (rulefeat.limits.MAX_TOML_DEPTH); flatten it.
"""

from __future__ import annotations

import re

import numpy as np

from .errors import ParameterError

__all__ = ["MAX_TOML_DEPTH", "MAX_JSON_DEPTH", "MAX_N_BOOT", "MAX_REPEATS", "MAX_FOLDS", "MAX_RULE_TEXT",
           "nesting_depth", "check_depth"]

MAX_TOML_DEPTH = 32
MAX_JSON_DEPTH = 64
MAX_N_BOOT = 100_000
MAX_REPEATS = 100
MAX_FOLDS = 1_000
MAX_RULE_TEXT = 20_000

# What cannot hold structure: strings (and TOML comments), matched leftmost first.
_MASKS = {
    "json": re.compile(r'"(?:[^"\\]|\\.)*"?', flags=re.DOTALL),
    "toml": re.compile(r'"""(?:[^\\]|\\.)*?(?:"""|$)|\'\'\'.*?(?:\'\'\'|$)|"(?:[^"\\\n]|\\.)*"?|\'[^\'\n]*\'?|#[^\n]*',
                       flags=re.DOTALL),
}
_LIMITS = {"json": (MAX_JSON_DEPTH, "MAX_JSON_DEPTH", "JSON"), "toml": (MAX_TOML_DEPTH, "MAX_TOML_DEPTH", "TOML")}
_BRACKETS = re.compile(r"[^\[\]{}]+")


def nesting_depth(text: str, syntax: str) -> int:
    """The deepest nesting of ``[ ]`` and ``{ }`` in JSON or TOML text, outside strings and comments."""
    brackets = _BRACKETS.sub("", _MASKS[syntax].sub("", text))
    if not brackets:
        return 0
    codes = np.frombuffer(brackets.encode("ascii"), dtype=np.uint8)
    steps = np.where((codes == ord("[")) | (codes == ord("{")), 1, -1)
    return int(max(np.cumsum(steps).max(), 0))


def check_depth(text: str, syntax: str, where: str, error: type[Exception] = ParameterError) -> None:
    """Raise ``error`` naming ``where`` when ``text`` nests deeper than its limit."""
    limit, name, label = _LIMITS[syntax]
    depth = nesting_depth(text, syntax)
    if depth > limit:
        raise error(f"{where}: the {label} text nests {depth} levels of [ ] / {{ }}, more than the limit "
                             f"of {limit} (rulefeat.limits.{name}); flatten it.")
