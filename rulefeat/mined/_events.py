"""What every feature family reads: settings, the training events, one transform's units.

Per-event arrays that depend only on the log (action masks, first attempts on a
step, time into the session, ...) are memoised on the immutable log with
``log.cached``, so every transform and every cross-validation fold reuses them.
Arrays that depend on fitted state are computed per transform.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd

from .. import _frame
from .._aggregate import Aggregator
from ..log.derive import ranges_to_index
from ..log.eventlog import EventLog
from ..units import UnitIndex

#: Sequence tokens of an event: right attempt, wrong attempt, hint, anything else.
RIGHT, WRONG, HINT, OTHER = 0, 1, 2, 3
TOKEN_NAMES = ("right", "wrong", "hint")
N_TOKENS = 4


@dataclass(frozen=True)
class Settings:
    """The transformer parameters the families read (validated before they get here)."""

    mastery_threshold: float = 0.95
    pause_quantiles: tuple = (0.9, 0.99)
    min_norm_events: int = 5
    hint_level_field: str = "hint_level"
    hint_total_field: str = "hint_levels_total"
    bkt_options: dict = field(default_factory=dict)
    bkt_max_attempts: int | None = None
    random_state: object = None


# ----------------------------------------------------------------------------- per-event arrays
def _memo(log: EventLog, name: str, compute):
    return log.cached(("mined", name), compute)


def codes(log: EventLog, name: str) -> np.ndarray:
    """Codes of a category field, or all -1 (missing) when the log has no such field."""
    if log.has(name) and log.kind(name) == "category":
        return log.values(name)
    return _memo(log, f"no-{name}", lambda: np.full(len(log), -1, dtype=np.int32))


def codes_as_fitted(log: EventLog, name: str, fitted: pd.Index | None, *, unseen: str = "missing") -> np.ndarray:
    """Codes of a category field in the code space of the log a family was fitted on.

    Fitted state is stored per code of the training log (``fitted`` are its labels); another log
    numbers its labels its own way, so its codes are translated by label (matched as text).  Labels
    the training log lacks become -1 (``unseen="missing"``) or distinct codes from ``len(fitted)`` on
    (``unseen="distinct"``), so each still forms its own group.
    """
    current = codes(log, name)
    if fitted is None or not log.has(name) or log.categories(name) is fitted:
        return current
    labels = log.categories(name)
    if labels.equals(fitted):
        return current
    into = _frame.codes_for(labels, fitted)
    if unseen == "distinct":
        into = np.where(into >= 0, into, len(fitted) + np.arange(len(into)))
    return np.where(current >= 0, into[np.maximum(current, 0)] if len(into) else -1, -1)


def fitted_labels(log: EventLog, name: str) -> pd.Index | None:
    """The labels of a category field that fitted state will be keyed by (None when the log lacks it)."""
    return log.categories(name) if log.has(name) and log.kind(name) == "category" else None


def action_is(log: EventLog, kind: str) -> np.ndarray:
    def compute():
        return log.values("action") == log.categories("action").get_loc(kind)
    return _memo(log, f"is-{kind}", compute)


def judged_attempts(log: EventLog) -> np.ndarray:
    """Attempts whose outcome is known."""
    return _memo(log, "judged", lambda: action_is(log, "attempt") & (log.values("correct") >= 0))


def outcome(log: EventLog, right: bool) -> np.ndarray:
    want = 1 if right else 0
    return _memo(log, f"outcome-{want}", lambda: action_is(log, "attempt") & (log.values("correct") == want))


def tokens(log: EventLog) -> np.ndarray:
    """RIGHT / WRONG / HINT / OTHER per event (attempts without an outcome are OTHER)."""
    def compute():
        out = np.full(len(log), OTHER, dtype=np.int8)
        out[outcome(log, True)] = RIGHT
        out[outcome(log, False)] = WRONG
        out[action_is(log, "hint")] = HINT
        return out
    return _memo(log, "tokens", compute)


def first_attempt_on_step(log: EventLog) -> np.ndarray:
    """Attempts that are the student's first attempt on their step (False without a step field)."""
    def compute():
        out = np.zeros(len(log), dtype=bool)
        first = _first_attempt_position(log)
        groups = _step_groups(log)
        attempt = np.flatnonzero(action_is(log, "attempt") & (groups >= 0))
        out[attempt] = first[groups[attempt]] == attempt
        return out
    return _memo(log, "first-attempt", compute)


def hint_before_attempt(log: EventLog) -> np.ndarray:
    """Hints on a step before the student's first attempt on it (or with no attempt at all)."""
    def compute():
        out = np.zeros(len(log), dtype=bool)
        first = _first_attempt_position(log)
        groups = _step_groups(log)
        hint = np.flatnonzero(action_is(log, "hint") & (groups >= 0))
        out[hint] = hint < first[groups[hint]]
        return out
    return _memo(log, "hint-before-attempt", compute)


def _step_groups(log: EventLog) -> np.ndarray:
    if not log.has("step"):
        return _memo(log, "no-step-groups", lambda: np.full(len(log), -1, dtype=np.int64))
    return log.group_ids("step")


def _first_attempt_position(log: EventLog) -> np.ndarray:
    """Log position of the first attempt of every (student, step) group; past-the-end when none."""
    def compute():
        groups = _step_groups(log)
        first = np.full(int(groups.max(initial=-1)) + 1, len(log), dtype=np.int64)
        attempt = np.flatnonzero(action_is(log, "attempt") & (groups >= 0))
        ids, at = np.unique(groups[attempt], return_index=True)
        first[ids] = attempt[at]  # log order is time order within a student
        return first
    return _memo(log, "first-attempt-position", compute)


def session_elapsed(log: EventLog) -> np.ndarray:
    """Seconds since the first event of the event's session."""
    def compute():
        groups = log.group_ids("session")
        time = log.values("time")
        ok = groups >= 0
        start = np.full(int(groups.max(initial=-1)) + 1, np.nan)
        ids, at = np.unique(groups[ok], return_index=True)
        start[ids] = time[np.flatnonzero(ok)[at]]
        return np.where(ok, time - start[np.maximum(groups, 0)], np.nan)
    return _memo(log, "session-elapsed", compute)


def log_duration(log: EventLog) -> np.ndarray:
    """log(1 + duration) per event (see :func:`log_of_duration`)."""
    return _memo(log, "log-duration", lambda: log_of_duration(log.values("duration")))


def log_of_duration(seconds: np.ndarray) -> np.ndarray:
    """log(1 + duration): finite for zero-length actions, NaN where duration is missing."""
    with np.errstate(invalid="ignore"):
        return np.log1p(np.maximum(seconds, 0.0))


def number(log: EventLog, name: str) -> np.ndarray | None:
    """A number field's values, or None when the log has no such number field."""
    if log.has(name) and log.kind(name) == "number":
        return log.values(name)
    return None


# ----------------------------------------------------------------------------- fit / transform views
class TrainingEvents:
    """The events of the students present in the training units: all that fit may learn from.

    Held as positions into the shared log rather than a copied sub-log, so a
    fit on millions of events does not duplicate the event table.
    """

    def __init__(self, log: EventLog, student_codes: np.ndarray):
        first, last = log.student_bounds()
        students = np.unique(student_codes[student_codes >= 0])
        self.log = log
        self.students = students
        self.positions = ranges_to_index(first[students], last[students])

    def __len__(self) -> int:
        return len(self.positions)

    def take(self, per_event: np.ndarray) -> np.ndarray:
        """A per-event array of the whole log restricted to the training events."""
        return per_event[self.positions]

    def values(self, name: str) -> np.ndarray:
        return self.take(self.log.values(name))


class UnitView:
    """One transform's units plus per-event arrays shared by every family."""

    def __init__(self, log: EventLog, index: UnitIndex, settings: Settings):
        self.log = log
        self.index = index
        self.settings = settings
        self.agg = Aggregator(index, log.values("time"))

    @property
    def n_units(self) -> int:
        return self.index.n_units

    def nan(self) -> np.ndarray:
        return np.full(self.n_units, np.nan)

    @cached_property
    def attempt(self) -> np.ndarray:
        return action_is(self.log, "attempt")

    @cached_property
    def hint(self) -> np.ndarray:
        return action_is(self.log, "hint")

    @cached_property
    def judged(self) -> np.ndarray:
        return judged_attempts(self.log)

    @cached_property
    def right(self) -> np.ndarray:
        return outcome(self.log, True)

    @cached_property
    def wrong(self) -> np.ndarray:
        return outcome(self.log, False)

    @cached_property
    def n_attempts(self) -> np.ndarray:
        return self.agg.count(self.attempt)

    @cached_property
    def n_hints(self) -> np.ndarray:
        return self.agg.count(self.hint)

    @cached_property
    def n_steps(self) -> np.ndarray:
        return self.agg.nunique(codes(self.log, "step"))

    def per_step(self, counts: np.ndarray) -> np.ndarray:
        """``counts`` divided by the unit's distinct steps; NaN when it has none."""
        return ratio(counts, self.n_steps)

    def students_events(self) -> np.ndarray:
        """Log positions of every event of the students these units belong to, in log order."""
        first, last = self.log.student_bounds()
        students = np.unique(self.index.students[self.index.students >= 0])
        return ranges_to_index(first[students], last[students])


def ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    """num / den, NaN where den is 0 or NaN."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1), np.nan)
