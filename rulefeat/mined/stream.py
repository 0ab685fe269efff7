"""Families that read the student's stream around the unit: action pairs (sequence) and the past (history).

Neither learns anything in fit.
"""

from __future__ import annotations

import numpy as np

from ..log.eventlog import EventLog
from . import _events as ev
from ._events import TOKEN_NAMES, UnitView, ratio


def sequence(view: UnitView, state=None) -> dict[str, np.ndarray]:
    """Share of each (previous, next) kind among the unit's consecutive event pairs.

    Kinds: ``right`` / ``wrong`` attempt, ``hint``; other events (and attempts
    without an outcome) still form pairs — they count in the denominator only.
    """
    counts = view.agg.pair_counts(ev.tokens(view.log), ev.N_TOKENS)
    total = counts.sum(axis=1)
    out = {}
    for a, first in enumerate(TOKEN_NAMES):
        for b, second in enumerate(TOKEN_NAMES):
            out[f"{first}_then_{second}"] = ratio(counts[:, a * ev.N_TOKENS + b], total)
    return out


# ----------------------------------------------------------------------------- history
_PRIOR = ("attempt", "judged", "right", "hint", "action")


def skill_streams(log: EventLog) -> dict:
    """Events with a skill, sorted by (student, skill) then time, with prefix sums of what history counts."""
    def compute():
        skill = ev.codes(log, "skill").astype(np.int64)
        width = int(skill.max(initial=-1)) + 1
        labelled = np.flatnonzero(skill >= 0)
        key = log.values("student")[labelled].astype(np.int64) * width + skill[labelled]
        order = np.argsort(key, kind="stable")  # stable: log order, i.e. time order, within a key
        at = labelled[order]
        flags = {"attempt": ev.action_is(log, "attempt"), "judged": ev.judged_attempts(log),
                 "right": ev.outcome(log, True), "hint": ev.action_is(log, "hint")}
        prefix = {name: _prefix(flag[at]) for name, flag in flags.items()}
        prefix["action"] = np.arange(len(at) + 1, dtype=np.int64)
        return {"width": width, "key": key[order], "time": log.values("time")[at], "prefix": prefix}
    return log.cached(("mined", "skill-streams"), compute)


def _prefix(flags: np.ndarray) -> np.ndarray:
    out = np.zeros(len(flags) + 1, dtype=np.int64)
    np.cumsum(flags, out=out[1:])
    return out


def history(view: UnitView, state=None) -> dict[str, np.ndarray]:
    """The student's accuracy, hint rate and attempts on the unit's skills strictly before the unit."""
    prior = prior_counts(view)
    return {
        "prior_accuracy": ratio(prior["right"], prior["judged"]),
        "prior_hint_rate": ratio(prior["hint"], prior["action"]),
        "prior_attempts": prior["attempt"],
    }


def prior_counts(view: UnitView) -> dict[str, np.ndarray]:
    """Per unit, counts over the student's events on the unit's skills with time < the unit's first event."""
    streams = skill_streams(view.log)
    agg = view.agg
    units, skill, _, _ = agg.code_spans(ev.codes(view.log, "skill"))
    start = agg.first_value(view.log.values("time"))[units]
    key = view.index.students[units] * streams["width"] + skill
    lo = np.searchsorted(streams["key"], key, side="left")
    hi = np.searchsorted(streams["key"], key, side="right")
    cut = search_within(streams["time"], lo, hi, start)
    n = view.n_units
    return {name: np.bincount(units, weights=p[cut] - p[lo], minlength=n) if len(units) else np.zeros(n)
            for name, p in streams["prefix"].items()}


def search_within(sorted_values: np.ndarray, lo: np.ndarray, hi: np.ndarray,
                  target: np.ndarray) -> np.ndarray:
    """Vectorized binary search: first index in ``[lo, hi)`` with ``sorted_values >= target`` (else hi).

    ``sorted_values`` must be sorted within every ``[lo, hi)`` range, not globally.
    """
    lo, hi = lo.astype(np.int64), hi.astype(np.int64)
    last = max(len(sorted_values) - 1, 0)
    while True:
        active = lo < hi
        if not active.any():
            return lo
        mid = (lo + hi) // 2
        below = active & (sorted_values[np.minimum(mid, last)] < target)
        lo = np.where(below, mid + 1, lo)
        hi = np.where(active & ~below, mid, hi)
