"""The mastery family: Bayesian Knowledge Tracing estimates of what the student knows during the unit.

Fit runs :class:`rulefeat.mastery.BKT` on the training students' attempts with
a known outcome (contract 2).  Transform filters each (student, skill) attempt
sequence of the units' students forward with the fitted parameters, so a unit
reads P(known) given the student's own earlier attempts only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from . import _events as ev
from ._events import Settings, TrainingEvents, UnitView
from .mastery import BKT

FEATURES = ("p_known_at_start", "p_known_at_end", "p_known_mean", "p_known_change",
            "mastered_attempt_share", "surprise_mean")


@dataclass(frozen=True)
class MasteryState:
    """The fitted BKT model and the skill labels its skill codes stand for."""

    model: BKT
    skills: pd.Index | None

    @property
    def params_(self):
        """The model's fitted parameters (:class:`rulefeat.mastery.BKTParams`)."""
        return self.model.params_


def fit(train: TrainingEvents, settings: Settings) -> MasteryState | None:
    """A BKT model of the training attempts; None when the training students made no judged attempt."""
    log = train.log
    judged = budget(log, judged_positions(train), settings)
    if not len(judged):
        return None
    options = {**settings.bkt_options, "random_state": settings.random_state}
    student, skill, correct = attempt_arrays(log, judged)
    return MasteryState(BKT(**options).fit(student, skill, correct), ev.fitted_labels(log, "skill"))


def judged_positions(train: TrainingEvents) -> np.ndarray:
    """Log positions of the training students' attempts with a known outcome."""
    return train.positions[ev.judged_attempts(train.log)[train.positions]]


def budget(log, judged: np.ndarray, settings: Settings) -> np.ndarray:
    """At most ``bkt_max_attempts`` attempts, taking whole students in a seeded random order."""
    if settings.bkt_max_attempts is None or len(judged) <= settings.bkt_max_attempts:
        return judged
    student = log.values("student")[judged]
    _, counts = np.unique(student, return_counts=True)
    return judged[np.repeat(students_kept(counts, settings), counts)]


def students_kept(counts: np.ndarray, settings: Settings) -> np.ndarray:
    """Which students (in student-code order, with ``counts`` judged attempts each) fit the budget.

    Only needed when the attempts exceed ``bkt_max_attempts``; depends on the counts and the seed
    alone, so the same choice can be made from per-student counts gathered anywhere.
    """
    order = np.random.default_rng(settings.random_state).permutation(len(counts))
    take = order[np.cumsum(counts[order]) <= settings.bkt_max_attempts]
    keep = np.zeros(len(counts), dtype=bool)
    keep[take if len(take) else order[:1]] = True
    return keep


def attempt_arrays(log, positions: np.ndarray, skills=None):
    """(student, skill, correct) of the attempts at ``positions``, skills coded as in ``skills``."""
    # Skills the model never saw get codes past its own, so each keeps its own sequence (pooled parameters).
    skill = ev.codes_as_fitted(log, "skill", skills, unseen="distinct")
    return log.values("student")[positions], skill[positions], log.values("correct")[positions]


def compute(view: UnitView, model: MasteryState | None) -> dict[str, np.ndarray]:
    if model is None:
        return {name: view.nan() for name in FEATURES}
    log, agg = view.log, view.agg
    before, after, predicted = _trace(view, model)
    # One value per (unit, skill) the unit attempted; attempts without a skill form their own sequence.
    units, _, first, last = agg.code_spans(ev.codes(log, "skill").astype(np.int64) + 1, mask=view.judged)
    start = agg.unit_mean(units, agg.take(before)[first])
    end = agg.unit_mean(units, agg.take(after)[last])
    with np.errstate(invalid="ignore"):
        mastered = before >= view.settings.mastery_threshold
    return {
        "p_known_at_start": start,
        "p_known_at_end": end,
        "p_known_mean": agg.stat(before, "mean"),
        "p_known_change": end - start,
        "mastered_attempt_share": agg.rate(mastered, of=view.judged),
        "surprise_mean": agg.stat(log.values("correct") - predicted, "mean"),
    }


def _trace(view: UnitView, model: MasteryState):
    """P(known) before / after and predicted P(correct) per event (NaN off the judged attempts)."""
    log = view.log
    events = view.students_events()
    judged = events[view.judged[events]]
    trace = model.model.forward(*attempt_arrays(log, judged, model.skills))
    out = []
    for values in trace:
        full = np.full(len(log), np.nan)
        full[judged] = values
        out.append(full)
    return out
