"""``RuleFeatures``: expert rules as a scikit-learn transformer over a units table."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .. import _frame
from .._base import UnitTransformer
from .._text import did_you_mean
from ..errors import RuleCheckError
from . import Rule, RuleSet

__all__ = ["RuleFeatures"]


def _summaries(agg, fired: np.ndarray) -> dict:
    """Every per-unit summary of one rule's firings (names as in docs/rules.md)."""
    return {
        "count": lambda: agg.count(fired),
        "rate": lambda: agg.rate(fired),
        "any": lambda: agg.any(fired),
        "longest_streak": lambda: agg.longest_run(fired),
        "first_position": lambda: agg.first_position(fired),
        "first_seconds": lambda: agg.first_seconds(fired),
    }


def as_ruleset(rules) -> RuleSet:
    """Accept a RuleSet, Rules, TOML text or a path to a TOML rules file."""
    if isinstance(rules, RuleSet):
        return rules
    if isinstance(rules, Rule):
        return RuleSet([rules])
    if isinstance(rules, Path) or (isinstance(rules, str) and "\n" not in rules and rules.endswith(".toml")):
        return RuleSet.from_toml(Path(rules))
    if isinstance(rules, str):
        return RuleSet.from_toml(rules)
    if isinstance(rules, (list, tuple)) and all(isinstance(r, Rule) for r in rules):
        return RuleSet(list(rules))
    raise RuleCheckError(f"RuleFeatures: 'rules' must be a RuleSet, a list of Rule, TOML text or a path to a "
                         f".toml rules file. Got {type(rules).__name__}.")


class RuleFeatures(UnitTransformer):
    """Per-unit summaries of expert rules, as a scikit-learn transformer.

    ``X`` is a table of unit keys (see :mod:`rulefeat.units`); events come from
    ``log``.  ``fit`` compiles the rules against the log's schema and learns
    every fitted norm (``typical``, ``zscore``) from the events of the students
    in ``X`` only; ``transform`` returns one row per row of ``X`` with columns
    ``<rule>__<summary>``.

    Parameters
    ----------
    log : EventLog
        The events; shared, never copied (``clone`` keeps the same log).
    rules : RuleSet, list of Rule, str or path
        The rules, or TOML text / a ``.toml`` file defining them.
    unit : str or Unit, default "window"
        What a row of ``X`` is (``"window"``, ``"last"``, ``"step"``, ``"problem"``,
        ``"session"``, ``"student"``, or a :class:`~rulefeat.units.Unit`).
    select : list of str, optional
        Output only these rules' features (the others are still computed when
        a selected rule refers to them). Default: every rule.
    min_count : int, default 5
        Training values a key needs before its own norm is used instead of the
        overall one.
    missing_students : {"error", "empty"}, default "error"
        Rows of ``X`` naming students absent from the log raise, or give empty
        units (counts 0, other summaries NaN).
    empty_units : {"empty", "error"}, default "empty"
        Units covering no events are kept with a warning (counts 0, other
        summaries NaN), or refused with a ``UnitError`` naming them (what
        :func:`~rulefeat.make_detector` uses).

    Examples
    --------
    >>> import pandas as pd
    >>> from rulefeat import EventLog, Rule, RuleFeatures
    >>> log = EventLog(pd.DataFrame({"student": ["a", "a", "a", "b"], "time": [0., 1., 9., 0.],
    ...                              "action": ["hint", "hint", "attempt", "attempt"]}))
    >>> quick = Rule("quick_hint", when="action == 'hint' and gap < 3s", report=["count", "any"])
    >>> X = pd.DataFrame({"student": ["a", "b"]})
    >>> RuleFeatures(rules=[quick], log=log, unit="student").fit_transform(X)
       quick_hint__count  quick_hint__any
    0                1.0              1.0
    1                0.0              0.0
    """

    def __init__(self, log=None, rules=None, *, unit="window", select=None, min_count=5,
                 missing_students="error", empty_units="empty"):
        self.rules = rules
        self.log = log
        self.unit = unit
        self.select = select
        self.missing_students = missing_students
        self.min_count = min_count
        self.empty_units = empty_units

    def _constraints(self) -> dict:
        return {
            **super()._constraints(),
            "min_count": (lambda v: isinstance(v, (int, np.integer)) and v >= 1, "a positive integer"),
            "select": (lambda v: v is None or (not isinstance(v, str) and all(isinstance(s, str) for s in v)),
                       "None or a list of rule names"),
        }

    def fit(self, X: pd.DataFrame, y=None) -> RuleFeatures:
        """Compile the rules and learn their norms from the training students' events."""
        X = _frame.as_pandas(X)
        program = self.prepare_fit(X)
        return self.finish_fit(program.fit(self._training_log(X)))

    def prepare_fit(self, X: pd.DataFrame):
        """The first half of :meth:`fit`: check ``X`` and compile the rules against the bound log's schema.

        Returns the unfitted :class:`~rulefeat.rules.compile.Program`; fit its norms (``program.fit``
        on the training log, or ``program.fit_values`` on values gathered elsewhere, as
        :mod:`rulefeat.scale` does) and hand it to :meth:`finish_fit`.
        """
        self._start_fit(_frame.as_pandas(X))
        return as_ruleset(self.rules).bind(self.log, min_count=int(self.min_count))

    def finish_fit(self, program) -> RuleFeatures:
        """The second half of :meth:`fit`: keep the fitted ``program`` and name the output columns."""
        self.program_ = program
        self.log_schema_ = {"time": "number", **program.schema}
        self._fired_cache = None
        self.selected_ = self._selected(program.rules)
        self.feature_names_out_ = [f"{name}__{summary}" for name in self.selected_
                                   for summary in program.report[name]]
        return self

    def _selected(self, ruleset: RuleSet) -> list[str]:
        names = list(ruleset.names)
        if self.select is None:
            return names
        for name in self.select:
            if name not in names:
                raise RuleCheckError(f"RuleFeatures: 'select' names rule {name!r}, which is not in the rule "
                                     f"set.{did_you_mean(name, names)} Rules: {names!r}.")
        return [n for n in names if n in set(self.select)]

    def _fired(self) -> dict:
        """Per-event firings on the whole log, computed once per fitted state and reused.

        A rule's value at an event depends only on that student's events and the
        fitted norms (contract 3), so evaluating the whole log once serves every
        later ``transform`` (the training and the test rows of a fold alike).
        """
        self._require_log("transform")
        if getattr(self, "_fired_cache", None) is None or self._fired_cache[0] != self.log.token:
            self._fired_cache = (self.log.token, self.program_.evaluate(self.log))
        return self._fired_cache[1]

    def _run_time_caches(self) -> tuple[str, ...]:
        return ("_fired_cache",)  # firings over the bound log: recomputed on demand, never saved

    def transform(self, X: pd.DataFrame) -> pd.DataFrame:
        """One row per row of ``X``: the selected rules' summaries over that unit's events."""
        X = _frame.as_pandas(X)
        agg = self._start_transform(X)
        return self._output(self.summarise(agg, self._fired()), X)

    def summarise(self, agg, fired: dict) -> dict:
        """``{feature: per-unit array}`` of the selected rules' firings (per event) over ``agg``'s units.

        The one aggregation of firings to unit features, shared by ``transform`` and live scoring
        (:class:`rulefeat.LiveScorer`, contract 9).
        """
        columns = {}
        for name in self.selected_:
            table = _summaries(agg, np.asarray(fired[name], dtype=bool))
            for summary in self.program_.report[name]:
                columns[f"{name}__{summary}"] = table[summary]()
        return columns
