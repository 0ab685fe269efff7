"""Counting families: how much the student did (volume), how well (correctness), how much help.

None of them learns anything in fit.  Formulas are listed in docs/features.md.
"""

from __future__ import annotations

import numpy as np

from . import _events as ev
from ._events import UnitView, ratio


def volume(view: UnitView, state=None) -> dict[str, np.ndarray]:
    """Actions, attempts and hints; the same per minute of active time; distinct steps, problems, skills."""
    agg, log = view.agg, view.log
    actions = agg.size()
    active = active_seconds(view)
    minutes = active / 60.0
    return {
        "actions": actions,
        "attempts": view.n_attempts,
        "hints": view.n_hints,
        "active_seconds": active,
        "actions_per_minute": ratio(actions, minutes),
        "attempts_per_minute": ratio(view.n_attempts, minutes),
        "hints_per_minute": ratio(view.n_hints, minutes),
        "steps": view.n_steps,
        "problems": agg.nunique(ev.codes(log, "problem")),
        "skills": agg.nunique(ev.codes(log, "skill")),
    }


def active_seconds(view: UnitView) -> np.ndarray:
    """From the unit's first event to the end of its last (last time + its duration, 0 if unknown)."""
    agg = view.agg
    duration = np.nan_to_num(view.log.values("duration"), nan=0.0)
    end = agg.last_value(view.log.values("time")) + agg.last_value(duration)
    return np.where(agg.nonempty, end - agg.first_value(view.log.values("time")), np.nan)


def correctness(view: UnitView, state=None) -> dict[str, np.ndarray]:
    """Accuracy of all and of first attempts on a step, errors per step, longest run of errors."""
    agg, log = view.agg, view.log
    first = ev.first_attempt_on_step(log)
    return {
        "accuracy": agg.rate(view.right, of=view.judged),
        "first_attempt_accuracy": agg.rate(view.right, of=view.judged & first),
        "errors_per_step": view.per_step(agg.count(view.wrong)),
        "longest_error_streak": agg.longest_run(view.wrong, among=view.judged),
    }


def help_seeking(view: UnitView, state=None) -> dict[str, np.ndarray]:
    """Hints per step, share of steps with a hint before the first attempt, share reaching the last hint."""
    agg, log = view.agg, view.log
    step = ev.codes(log, "step")
    early = agg.nunique(step, mask=ev.hint_before_attempt(log))
    return {
        "hints_per_step": view.per_step(view.n_hints),
        "hint_before_attempt_step_share": view.per_step(early),
        "last_hint_step_share": _last_hint_share(view, step),
    }


def _last_hint_share(view: UnitView, step: np.ndarray) -> np.ndarray:
    """Share of the unit's steps where a hint at the last level was shown; NaN without hint levels."""
    level = ev.number(view.log, view.settings.hint_level_field)
    total = ev.number(view.log, view.settings.hint_total_field)
    if level is None or total is None:
        return view.nan()
    with np.errstate(invalid="ignore"):
        bottom = view.hint & (total > 0) & (level >= total)
    known = view.hint & ~np.isnan(level) & ~np.isnan(total)
    share = view.per_step(view.agg.nunique(step, mask=bottom))
    # A unit whose hints all lack a level cannot say whether the last one was reached.
    unknown = (view.n_hints > 0) & (view.agg.count(known) == 0)
    return np.where(unknown, np.nan, share)
