"""The rule language: text -> tokens -> syntax tree -> checked tree -> vectorized program.

The whole language is described in ``docs/rules.md``. The public entry points:

>>> import pandas as pd
>>> from rulefeat import EventLog
>>> from rulefeat.rules import Rule, RuleSet
>>> log = EventLog(pd.DataFrame({"student": ["a", "a", "a"], "time": [0.0, 1.0, 9.0],
...                              "action": ["hint", "hint", "attempt"]}))
>>> rules = RuleSet([Rule("quick_hint", when="action == 'hint' and prev(action) == 'hint' and gap < 3s")])
>>> program = rules.bind(log).fit(log)
>>> program.evaluate(log)["quick_hint"].tolist()
[False, True, False]
"""

from .compile import Program
from .functions import FUNCTIONS, SCOPES
from .operators import INFIX, PREFIX
from .problems import find_problems
from .ruleset import DEFAULT_REPORT, SUMMARIES, Rule, RuleSet

__all__ = ["Rule", "RuleSet", "Program", "find_problems", "SUMMARIES", "DEFAULT_REPORT", "FUNCTIONS", "INFIX", "PREFIX", "SCOPES"]
