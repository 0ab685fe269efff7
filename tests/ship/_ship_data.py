"""Shared data of the tests/test_ship_*.py files: simulated logs whose students have distinctive ids."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from lightgbm import LGBMClassifier

import rulefeat
from rulefeat.evaluate.value.engine import demo_rules_path
from rulefeat.simulate import tutor_logs

KEYS = ["student", "start", "end"]
#: The demo rules plus rules with fitted norms per step and skill and a first-firing time.
EXTRA_RULES = """
[rules.slow_for_step]
when = "action == 'attempt' and duration > 2 * typical(duration, per='step')"
report = ["count", "first_seconds", "first_position"]

[rules.odd_for_skill]
when = "zscore(duration, per='skill') > 1.5"
report = ["rate", "first_seconds"]
"""


def rules() -> rulefeat.RuleSet:
    demo = rulefeat.RuleSet.from_toml(demo_rules_path())
    return rulefeat.RuleSet([*demo, *rulefeat.RuleSet.from_toml(EXTRA_RULES)])


def simulated(n_students: int, seed: int, prefix: str = "stu-ZQ81"):
    """(events, windows) of a small simulation, students renamed ``<prefix>-<seed>-<n>``."""
    data = tutor_logs(n_students, seed=seed, problems_per_skill=4, sessions_per_student=(1, 2),
                      windows_per_student=3)
    names = {s: f"{prefix}-{seed}-{s[1:]}" for s in data.events["student"].astype(str).unique()}
    events = data.events.assign(student=data.events["student"].astype(str).map(names))
    windows = data.windows.assign(student=data.windows["student"].astype(str).map(names))
    return events, windows


def as_seconds(frame: pd.DataFrame, columns) -> pd.DataFrame:
    """Datetime columns as float seconds since 1970 (a time axis that is the same in every log)."""
    out = frame.copy()
    for col in columns:
        out[col] = out[col].astype("datetime64[ns]").astype("int64") / 1e9
    return out


def quiet_log(events: pd.DataFrame) -> rulefeat.EventLog:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rulefeat.RulefeatWarning)
        return rulefeat.EventLog(events)


def small_model() -> LGBMClassifier:
    return LGBMClassifier(n_estimators=25, num_leaves=7, min_child_samples=5, random_state=0, n_jobs=1,
                          verbose=-1, deterministic=True, force_row_wise=True)


MINED = {"families": ["volume", "correctness", "help", "timing", "sequence", "history", "mastery"],
         "bkt_options": {"n_restarts": 1, "max_iter": 30}}


def fitted_detector(log, windows):
    detector = rulefeat.make_detector(log, rules(), model=small_model(), mined=MINED, random_state=0)
    return detector.fit(windows[KEYS], windows["label"].to_numpy())


def student_ids(events: pd.DataFrame) -> list[str]:
    return sorted(map(str, np.unique(events["student"])))
