"""Live per-event scoring with the batch engine: each event's firings, then each unit's features and probability.

A :class:`LiveScorer` keeps, per student, a buffer of the recent events the rules can still read
(bounded by :mod:`rulefeat.ship.reach`) and evaluates the fitted detector's compiled program on those
buffers with the batch engine — the same program, the same fitted norms, the same derivation of
``gap`` / ``duration`` / ``session`` and the same per-unit aggregation as
:meth:`RuleFeatures.transform` (contract 9).  Nothing is re-implemented, so live firings, unit
features and probabilities equal batch ones bit for bit (docs/live.md).

When is a value final?  A student's *watermark* is its latest event time (or the clock given to
:meth:`LiveScorer.advance`, if later) minus ``tolerance``: events arriving later than the watermark
are refused (:class:`~rulefeat.errors.LateEventError`), so nothing can be inserted before an event
whose time is at most the watermark.  An event's firings are emitted once it is that far behind and,
when the rules look ahead (``next``, derived ``duration``), once the events they read are as well or
its session has closed.  A unit is emitted when it closes: a window once the watermark reaches its
end; a step / problem once the student's first event on another one is final; a session once a
later session starts or the watermark is ``session_gap`` past its last event; and every open unit at
:meth:`LiveScorer.close`.
"""

from __future__ import annotations

import pickle
import warnings
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.pipeline import FeatureUnion, Pipeline

from .._aggregate import Aggregator
from .._text import show_rows
from ..errors import LateEventError, LiveError, ParameterError, RulefeatWarning, UnitError
from ..log import parse
from ..mined.transformer import LogFeatures
from ..rules.transformer import RuleFeatures
from ..units import UnitIndex
from .buffer import BufferLog, Columns, StudentBuffer, range_index
from .predict import proba_of
from .reach import earliest_read, reach_of, read_paths

__all__ = ["LiveScorer", "LiveResult", "LIVE_UNITS", "CHECKPOINT_FORMAT"]

#: Unit kinds a live scorer emits; ``last`` and ``student`` never close while the stream runs.
LIVE_UNITS = ("window", "step", "problem", "session")
CHECKPOINT_FORMAT = ("rulefeat-live-checkpoint", 1)
_DERIVABLE = ("session", "duration")
_EMPTY_POLICIES = ("error", "empty")  # as rulefeat.bind's empty_units


@dataclass
class LiveResult:
    """What one call emitted: events whose firings became final, and units that closed.

    ``event_id`` numbers events in order of arrival (0 for the scorer's first event); they are listed
    student by student, each student's in time order.  ``fired`` maps every rule to a bool array
    aligned with them.  ``unit_columns`` holds a list or array per column of the closed units, one entry
    per unit: their keys (``unit_start``, the time of the unit's first event, for steps, problems and
    sessions), ``n_events``, the rule features (named as the model saw them) and, with a model,
    ``probability``; :attr:`units` is the same as a DataFrame, built when first read.
    """

    event_id: np.ndarray
    student: list
    time: np.ndarray
    fired: dict
    unit_columns: dict = field(default_factory=dict)

    @property
    def n_units(self) -> int:
        """How many units closed in the call."""
        return len(self.unit_columns["n_events"]) if self.unit_columns else 0

    @cached_property
    def units(self) -> pd.DataFrame:
        """The closed units as a table, one row per unit (empty when none closed)."""
        return pd.DataFrame(self.unit_columns)

    def firings(self) -> pd.DataFrame:
        """The emitted events as a table: ``event_id``, ``student``, ``time`` and one column per rule."""
        return pd.DataFrame({"event_id": self.event_id, "student": self.student, "time": self.time,
                             **self.fired})


class LiveScorer:
    """Score events as they arrive with a fitted detector, identically to batch scoring.

    Parameters
    ----------
    detector : fitted estimator
        A fitted :class:`~rulefeat.RuleFeatures`, or a fitted pipeline whose first step is one (or a
        ``FeatureUnion`` of them) — e.g. ``make_detector(log, rules, mined=False)``.  Mined features
        (:class:`~rulefeat.LogFeatures`) are refused: several families read the student's whole
        history, which a live buffer does not keep.
    windows : DataFrame, optional
        For a detector of ``unit="window"``: the windows to score (student, start, end); more can be
        added with :meth:`add_windows` before their events arrive.
    columns : dict, optional
        ``{field: name}`` for events that name fields otherwise, as :class:`~rulefeat.EventLog`'s
        ``columns`` (e.g. ``{"student": "learner", "time": "ts"}``); the same keys of a dict event and
        columns of a table are read.  Default: the log's field names.
    tolerance : float, default 0
        Seconds an event may arrive behind the student's latest event (or the clock) and still be
        inserted in time order; later ones raise :class:`~rulefeat.errors.LateEventError`.  Firings
        are held back by as much, since an inserted event changes the ones after it.
    given : tuple of str, optional
        Fields the events carry that a log would otherwise derive (``"session"``, ``"duration"``);
        the others are derived as :class:`~rulefeat.EventLog` derives them.  Default: as in the
        training log (the detector records which fields its log derived).
    session_gap, duration_cap : float, optional
        As in :class:`~rulefeat.EventLog`; default: the training log's values.
    empty_units : {"error", "empty"}, default "error"
        A window that closes without events: as :func:`rulefeat.bind` does with units that find no
        events, ``"error"`` refuses it with :class:`~rulefeat.errors.UnitError` (raised by the call
        that makes the window certain to be empty, before anything of the call is taken; set
        ``scorer.empty_units = "empty"`` and send the call again to go on); ``"empty"`` scores it as an
        empty unit (count-like features 0, others missing, and the model's probability for those) with
        a :class:`~rulefeat.RulefeatWarning`.
    predict_params : dict, optional
        Passed to the model's ``predict_proba`` when units close, e.g. ``{"num_threads": 1}`` for
        LightGBM, whose threads cost more than they save on the few rows of one call (a binary LightGBM
        classifier alone is asked through its booster, which takes that thread count; see
        :mod:`rulefeat.ship.predict`).

    Examples
    --------
    >>> import pandas as pd
    >>> from rulefeat import EventLog, LiveScorer, Rule, RuleFeatures
    >>> log = EventLog(pd.DataFrame({"student": "a", "time": [0., 1., 9.], "action": "hint", "step": "s1"}))
    >>> quick = Rule("quick_hint", when="action == 'hint' and gap < 3s", report=["count"])
    >>> fitted = RuleFeatures(log, [quick], unit="step").fit(pd.DataFrame({"student": ["a"], "step": ["s1"]}))
    >>> live = LiveScorer(fitted)
    >>> live.feed({"student": "b", "time": 0.0, "action": "hint", "step": "s1"}).fired
    {'quick_hint': array([False])}
    >>> out = live.feed([{"student": "b", "time": 2.0, "action": "hint", "step": "s1"},
    ...                  {"student": "b", "time": 3.0, "action": "hint", "step": "s2"}])
    >>> out.fired["quick_hint"].tolist(), out.units[["student", "step", "quick_hint__count"]].values.tolist()
    ([True, True], [['b', 's1', 1.0]])
    """

    def __init__(self, detector, *, windows=None, columns=None, tolerance: float = 0.0, given=None,
                 session_gap=None, duration_cap=None, predict_params=None, empty_units: str = "error"):
        self._rules, self._names, self._rest = _parts(detector)
        fitted = getattr(self._rules, "log_settings_", {})
        if given is None:
            given = [f for f in _DERIVABLE if fitted.get(f"{f}_derived") is False]
        self.detector, self.tolerance, self.given = detector, tolerance, tuple(given)
        self.columns, self.empty_units = columns, empty_units
        self.predict_params = dict(predict_params or {})
        self._feature_names = list(self._names or self._rules.feature_names_out_)
        self._proba = None if self._rest is None else proba_of(self._rest, self._feature_names, self.predict_params)
        self.session_gap = fitted.get("session_gap", 1800.0) if session_gap is None else session_gap
        self.duration_cap = fitted.get("duration_cap", 600.0) if duration_cap is None else duration_cap
        self._check_options()
        self.unit = self._rules.unit_
        if self.unit.name not in LIVE_UNITS:
            raise LiveError(f"LiveScorer: the detector's units are {self.unit.name!r} units, which do not close "
                            f"while the stream runs; live scoring emits {list(LIVE_UNITS)!r} units. Refit the "
                            "detector on one of those, or score these units in batch (rulefeat.bind).")
        self._program = self._rules.program_
        self._rule_names = list(self._program.trees)
        self.reach = reach_of(self._program.trees, derived_duration="duration" not in self.given)
        self._paths = read_paths(self._program.trees)
        self._stored = self._stored_fields()
        self._checked = [f for f in ("step", "problem", "session") if f in self._stored and f in self._scopes()]
        self._columns = Columns(self._stored, self._rules.time_kind_,
                                parse.check_column_mapping(dict(columns or {}), None, "LiveScorer"))
        self._buffers: dict = {}
        self._next_id, self._next_window = 0, 0
        self._clock, self._closed = -np.inf, False
        self._text: dict = {}
        self.repairs = 0
        self._window_keys: list = []
        if windows is not None:
            self.add_windows(windows)

    # -- construction -------------------------------------------------------------------------------
    def _check_options(self) -> None:
        parse.check_mappings(self.columns, None, "LiveScorer")
        self._check_empty_units()
        if not isinstance(self.tolerance, (int, float)) or not self.tolerance >= 0:
            raise ParameterError(f"The 'tolerance' parameter of LiveScorer must be a number of seconds >= 0. "
                                 f"Got {self.tolerance!r} instead.")
        bad = [g for g in self.given if g not in _DERIVABLE]
        if bad:
            raise ParameterError(f"The 'given' parameter of LiveScorer lists fields among {list(_DERIVABLE)!r}. "
                                 f"Got {bad!r}.")
        for name in ("session_gap", "duration_cap"):
            value = getattr(self, name)
            if not isinstance(value, (int, float)) or not value > 0:
                raise ParameterError(f"The {name!r} parameter of LiveScorer must be a positive number of "
                                     f"seconds. Got {value!r} instead.")

    def _check_empty_units(self) -> None:
        if self.empty_units not in _EMPTY_POLICIES:
            raise ParameterError(f"The 'empty_units' parameter of LiveScorer must be one of "
                                 f"{list(_EMPTY_POLICIES)!r}. Got {self.empty_units!r} instead.")

    def _scopes(self) -> set:
        keyed = {self.unit.field} if self.unit.name != "window" else set()
        return set(self.reach.groups) | keyed | ({"session"} if "session" in self.given else set())

    def _stored_fields(self) -> dict:
        schema = dict(self._rules.log_schema_)
        derived = {"gap", "step_position", "problem_position"} | {f for f in _DERIVABLE if f not in self.given}
        kinds = {name: kind for name, kind in schema.items() if name not in ("student", "time", *derived)}
        kinds["action"] = "category"
        for scope in self._scopes() - {"session"}:
            kinds[scope] = "category"
        if "session" in self.given:
            kinds["session"] = "category"
        if "duration" in self.given:
            kinds["duration"] = "number"
        return kinds

    def add_windows(self, windows) -> None:
        """Register windows (student, start, end) to score; each is emitted once the watermark passes its end."""
        if self.unit.name != "window":
            raise UnitError(f"LiveScorer.add_windows: the detector's units are {self.unit.name!r} units, found "
                            "from the events themselves; windows apply to window detectors only.")
        keys = (self.unit.student, self.unit.start, self.unit.end)
        missing = [k for k in keys if k not in windows.columns]
        if missing:
            raise UnitError(f"LiveScorer.add_windows: the windows lack the columns {missing!r} (need {list(keys)!r}).")
        start, end = (self._columns.time_values(windows[k].tolist(), k) for k in keys[1:])
        bad = np.flatnonzero(end < start)
        if len(bad):
            raise UnitError(f"LiveScorer.add_windows: {len(bad)} windows end before they start ({show_rows(bad)}).")
        students, firsts, lasts = (windows[k].tolist() for k in keys)
        rows = np.arange(len(self._window_keys), len(self._window_keys) + len(students))
        groups = _window_groups(students)
        for student, at in groups.items():  # all checked before any is added
            gone = self._buffers[student].trimmed_until if student in self._buffers else -np.inf
            early = at[start[at] <= gone]
            if len(early):
                raise UnitError(f"LiveScorer.add_windows: window row {early[0]} (student {student!r}, start "
                                f"{float(start[early[0]])!r}) starts before events the scorer has already let go; "
                                "register windows before their events arrive.")
        for student, at in groups.items():
            buf = self._buffer(student)
            both = np.concatenate([buf.windows, np.column_stack([start[at], end[at], rows[at]])])
            buf.windows = both[np.argsort(both[:, 1], kind="stable")]
        self._window_keys.extend(zip(students, firsts, lasts, strict=True))

    def _buffer(self, student) -> StudentBuffer:
        if student not in self._buffers:
            self._buffers[student] = StudentBuffer(self._stored, len(self._rule_names))
        return self._buffers[student]

    # -- the stream ---------------------------------------------------------------------------------
    def feed(self, events) -> LiveResult:
        """Take one event (a dict) or several (a list of dicts or a DataFrame), in order of arrival.

        The call is all or nothing: an event that cannot be taken (late, a scope reopened, a value of
        the wrong type) raises and leaves the scorer as it was.
        """
        self._require_open("feed")
        raw = self._columns.rows(events)
        n = len(raw.get("student", ()))
        if n == 0:
            return self._empty()
        new = self._columns.convert(raw, n, self._next_id)
        self._repair_hints(new)
        ids = np.arange(self._next_id, self._next_id + n, dtype=np.int64)
        order, groups = _by_student(new.pop("student"))
        if order is not None:  # one gather per field, then each student's events are a slice
            new, ids = {k: v[order] for k, v in new.items()}, ids[order]
        bufs = [self._buffer(self._columns.students.labels[code]) for code, _, _ in groups]
        in_order = self._in_order(new["time"], groups, bufs)
        staged = []
        for (code, lo, hi), buf in zip(groups, bufs, strict=True):
            student = self._columns.students.labels[code]
            part = {k: v[lo:hi] for k, v in new.items()}
            if not in_order:
                self._check_late(student, buf, part["time"], ids[lo:hi])
            merged = buf.merged(part, ids[lo:hi], appended=in_order)  # in order: nothing is inserted
            self._check_reopened(student, buf, merged[0], merged[2], len(buf) if in_order else 0)
            staged.append((student, buf, merged))
        for student, buf, merged in staged:  # nothing is taken if a window would close without events
            mark = max(buf.latest, float(merged[1][-1]), self._clock) - self.tolerance
            self._refuse_empty(student, buf, merged[1], mark, "feed")
        for student, buf, merged in staged:
            buf.commit(*merged)
            self._buffers[student] = buf
        self._next_id += n
        return self._process([student for student, _, _ in staged])

    def _in_order(self, time: np.ndarray, groups: list, bufs: list) -> bool:
        """Whether every student's events come in time order, none before its stream (so none is late)."""
        starts = np.array([lo for _, lo, _ in groups])
        before = np.array([max(buf.latest, self._clock) for buf in bufs])
        if not (time[starts] >= before).all():
            return False
        if len(groups) == 1:
            return bool((time[1:] >= time[:-1]).all())
        first = np.zeros(len(time), dtype=bool)
        first[starts] = True  # time may go back only where one student's slice follows another's
        return bool((first[1:] | (time[1:] >= time[:-1])).all())

    def advance(self, now) -> LiveResult:
        """The stream's clock reached ``now``: close windows and sessions it passes, even without events."""
        self._require_open("advance")
        clock = max(self._clock, float(self._columns.time_values([now], "now")[0]))
        for student, buf in self._buffers.items():
            self._refuse_empty(student, buf, buf.time, max(buf.latest, clock) - self.tolerance, "advance")
        self._clock = clock
        return self._process([s for s, b in self._buffers.items() if len(b) or len(b.windows)])

    def close(self) -> LiveResult:
        """End of the stream: every pending event becomes final and every open unit closes."""
        self._require_open("close")
        for student, buf in self._buffers.items():
            self._refuse_empty(student, buf, buf.time, np.inf, "close")
        out = self._process(list(self._buffers), flush=True)
        self._closed = True
        return out

    def buffer_sizes(self) -> dict:
        """Events held per student (bounded by the rules' reach and the open units, not by history)."""
        return {student: len(buf) for student, buf in self._buffers.items()}

    def _require_open(self, method: str) -> None:
        if self._closed:
            raise LiveError(f"LiveScorer.{method}: the stream was closed with close(); start a new scorer.")

    def _repair_hints(self, new: dict) -> None:
        # As a log build does: a hint carries no 'correct' value.
        if "correct" in new and "hint" in self._columns.labels["action"].codes:
            hint = new["action"] == self._columns.labels["action"].codes["hint"]
            self.repairs += int((hint & (new["correct"] >= 0)).sum())
            new["correct"][hint] = -1

    def _refuse_empty(self, student, buf: StudentBuffer, time: np.ndarray, mark: float, method: str) -> None:
        """Under empty_units='error', refuse windows ending by ``mark`` (the watermark the call would reach)
        that hold none of ``time``: no event can come before the watermark, so they close empty."""
        self._check_empty_units()
        if self.empty_units != "error" or not len(buf.windows) or buf.windows[0, 1] > mark:
            return
        ending = buf.windows[buf.windows[:, 1] <= mark]
        lo, hi = np.searchsorted(time, ending[:, 0], side="left"), np.searchsorted(time, ending[:, 1], side="left")
        empty = ending[lo == hi]
        if len(empty):
            shown = "; ".join(f"window row {int(row)}: start {self._window_keys[int(row)][1]!r}, end "
                              f"{self._window_keys[int(row)][2]!r}" for row in empty[:3, 2])
            more = f" (and {len(empty) - 3} more)" if len(empty) > 3 else ""
            raise UnitError(f"LiveScorer.{method}: {len(empty)} windows of student {student!r} close without "
                            f"events ({shown}{more}); nothing of this call was taken. Units without events "
                            "are refused, as rulefeat.bind refuses them; to score them as empty units "
                            "(count-like features 0, others missing), set scorer.empty_units = 'empty' and "
                            "send the call again.")

    def _check_late(self, student, buf: StudentBuffer, time: np.ndarray, ids: np.ndarray) -> None:
        before = np.maximum.accumulate(np.concatenate([[max(buf.latest, self._clock)], time]))[:-1]
        late = np.flatnonzero(time < before - self.tolerance)
        if len(late):
            i = late[0]
            raise LateEventError(f"LiveScorer.feed: event {ids[i]} (student {student!r}, time {float(time[i])!r}) "
                                 f"arrived {before[i] - time[i]:g} s behind the student's stream (at "
                                 f"{float(before[i])!r}), more "
                                 f"than tolerance={self.tolerance:g} s allows; nothing of this call was taken. "
                                 "Raise tolerance or score late data in batch.")

    def _check_reopened(self, student, buf: StudentBuffer, cols: dict, ids: np.ndarray, start: int) -> None:
        """Refuse a group the student had left; events before ``start`` were checked by earlier calls."""
        for name in self._checked:
            codes = cols[name]
            if start:
                low, high, last = codes[start:].min(), codes[start:].max(), codes[start - 1]
                if low == high == last >= 0:
                    continue  # the new events go on with the student's group: they start none
                known = codes[start:][codes[start:] >= 0]
                before = codes[:start][codes[:start] >= 0]
                if not len(known) or (len(before) and (known == before[-1]).all()):
                    continue
            at = np.flatnonzero(codes >= 0)
            starts = at[np.concatenate([[True], codes[at][1:] != codes[at][:-1]])] if len(at) else at
            closed, seen = buf.closed.get(name, ()), set()
            for pos in starts.tolist():
                code = int(codes[pos])
                if code in seen or code in closed:
                    label = self._columns.labels[name].labels[code]
                    raise LiveError(f"LiveScorer.feed: event {ids[pos]} (student {student!r}) returns to {name} "
                                    f"{label!r}, which the student had left; live scoring closes a {name} when "
                                    f"the student moves on, and batch would merge both visits. Give the visits "
                                    f"distinct {name} labels, or score this log in batch.")
                seen.add(code)

    # -- one round: evaluate, finalise, close units, trim -----------------------------------------------
    def _process(self, students: list, flush: bool = False) -> LiveResult:
        pending = [s for s in students if len(self._buffers[s]) > self._buffers[s].n_final]
        emitted = self._evaluate(pending, flush)
        units = self._close_units(students, flush)
        for student in students:
            self._trim(self._buffers[student])
        return LiveResult(*emitted, unit_columns=units)

    def _empty(self) -> LiveResult:
        return LiveResult(np.zeros(0, np.int64), [], np.zeros(0), {n: np.zeros(0, bool) for n in self._rule_names})

    def _evaluate(self, students: list, flush: bool):
        if not students:
            e = self._empty()
            return e.event_id, e.student, e.time, e.fired
        bufs = [self._buffers[s] for s in students]
        sizes = np.array([len(b) for b in bufs])
        fields = {k: np.concatenate([b.cols[k] for b in bufs]) for k in self._stored}
        fields["time"] = np.concatenate([b.time for b in bufs])
        fields["student"] = np.repeat(np.arange(len(bufs), dtype=np.int32), sizes)
        kinds = {**self._stored, "time": "number", "student": "category"}
        cats = {name: labels.index for name, labels in self._columns.labels.items()}
        cats["student"] = range_index(len(bufs))
        view = BufferLog(fields, kinds, cats, self._text, session_gap=self.session_gap,
                         duration_cap=self.duration_cap)
        fired = self._program.evaluate(view, release=False)  # a few hundred events: keep every array
        table = np.stack([fired[name] for name in self._rule_names]) if self._rule_names else np.zeros((0, len(view)))
        session = view.values("session")
        ids, who, times, cols = [], [], [], []
        offset = 0
        for student, buf, size in zip(students, bufs, sizes, strict=True):
            buf.session = session[offset:offset + size]
            lo, hi = buf.n_final, self._n_final(buf, flush)
            buf.fired[:, lo:hi] = table[:, offset + lo:offset + hi]
            buf.n_final = hi
            ids.append(buf.ids[lo:hi])
            times.append(buf.time[lo:hi])
            cols.append(table[:, offset + lo:offset + hi])
            who.extend([student] * (hi - lo))
            offset += size
        out = np.concatenate(cols, axis=1)
        return np.concatenate(ids), who, np.concatenate(times), {n: out[i] for i, n in enumerate(self._rule_names)}

    def _watermark(self, buf: StudentBuffer) -> float:
        return max(buf.latest, self._clock) - self.tolerance

    def _n_final(self, buf: StudentBuffer, flush: bool) -> int:
        n = len(buf)
        if flush:
            return n
        mark = self._watermark(buf)
        fixed = n if mark >= buf.time[-1] else int(np.searchsorted(buf.time, mark, side="right"))
        ahead = self.reach.ahead
        if ahead == 0:
            return max(buf.n_final, fixed)
        done = max(fixed - ahead, 0)
        if self.reach.ahead_in_session and fixed:
            sess = buf.session
            done = max(done, int(np.argmax(sess == sess[fixed - 1])))  # earlier sessions have ended
            if fixed == n and self._session_over(buf):
                done = n
        return max(buf.n_final, done)

    def _session_over(self, buf: StudentBuffer) -> bool:
        """No later event can join the student's last session (derived sessions end after a long pause)."""
        return "session" not in self.given and self._watermark(buf) - buf.time[-1] > self.session_gap

    # -- units ------------------------------------------------------------------------------------------
    def _close_units(self, students: list, flush: bool) -> dict:
        found = []  # (keys dict, positions, start_time, buffer)
        for student in students:
            buf = self._buffers[student]
            if self.unit.name == "window":
                found.extend(self._closed_windows(student, buf, flush))
            elif len(buf):
                found.extend(self._closed_groups(student, buf, flush))
        return self._unit_table(found) if found else {}

    def _closed_windows(self, student, buf: StudentBuffer, flush: bool) -> list:
        if not len(buf.windows) or (not flush and buf.windows[0, 1] > self._watermark(buf)):
            return []  # windows close in order of their end: the first has not
        ends = buf.windows[:, 1]
        hi = np.searchsorted(buf.time, ends, side="left")
        ok = (hi <= buf.n_final) & ((ends <= self._watermark(buf)) | flush)
        n_closed = int(np.argmin(ok)) if not ok.all() else len(ok)  # windows close in order of their end
        out = []
        for start, end, row in buf.windows[:n_closed]:
            lo, up = np.searchsorted(buf.time, [start, end], side="left")
            _, first, last = self._window_keys[int(row)]
            keys = {self.unit.student: student, self.unit.start: first, self.unit.end: last}
            out.append((keys, np.arange(lo, up), start, buf))
        buf.windows = buf.windows[n_closed:]
        return out

    def _closed_groups(self, student, buf: StudentBuffer, flush: bool) -> list:
        name = self.unit.field
        codes = buf.session if name == "session" else buf.cols[name]
        at = np.flatnonzero(codes[buf.unit_from:] >= 0) + buf.unit_from
        if not len(at):
            return []
        first = at[np.concatenate([[True], codes[at][1:] != codes[at][:-1]])]
        fixed = int(np.searchsorted(buf.time, self._watermark(buf), side="right"))
        bounds = np.append(first, len(buf))
        out = []
        for k in range(len(first)):
            nxt = bounds[k + 1]
            closes = flush or (k + 1 < len(first) and nxt < fixed) or (
                name == "session" and k + 1 == len(first) and self._session_over(buf))
            if not closes or (not flush and nxt > buf.n_final):
                break
            span = np.arange(first[k], nxt)
            pos = span[codes[span] == codes[first[k]]]
            out.append((self._group_keys(student, name, codes[first[k]], buf.time[pos[0]]), pos, buf.time[pos[0]],
                        buf))
            buf.unit_from = int(nxt)
        return out

    def _group_keys(self, student, name: str, code: int, start: float) -> dict:
        keys = {self.unit.student: student}
        if name == "session" and "session" not in self.given:
            keys[self.unit.key] = np.nan  # derived sessions are numbered per log; the start time names it
        else:
            keys[self.unit.key] = self._columns.labels[name].labels[code]
        keys["unit_start"] = start
        return keys

    def _unit_table(self, found: list) -> dict:
        sizes = np.array([len(pos) for _, pos, _, _ in found], dtype=np.int64)
        fired = np.concatenate([buf.fired[:, pos] for _, pos, _, buf in found], axis=1)
        time = np.concatenate([buf.time[pos] for _, pos, _, buf in found])
        index = UnitIndex(indptr=np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64),
                          events=np.arange(int(sizes.sum()), dtype=np.int64),
                          start_time=np.array([s for _, _, s, _ in found], dtype=np.float64),
                          students=np.zeros(len(found), dtype=np.int64))
        columns = self._rules.summarise(Aggregator(index, time), dict(zip(self._rule_names, fired, strict=True)))
        features = np.zeros((len(found), len(self._feature_names)))
        for j, name in enumerate(self._rules.feature_names_out_):
            features[:, j] = columns[name]
        table = {key: [keys[key] for keys, _, _, _ in found] for key in found[0][0]}
        table["n_events"] = sizes
        table.update(zip(self._feature_names, features.T, strict=True))
        if self._proba is not None:
            table["probability"] = self._proba(features)
        empty = np.flatnonzero(sizes == 0)
        if len(empty):  # only with empty_units='empty': 'error' refused them before the call was taken
            warnings.warn(f"LiveScorer: {len(empty)} of {len(found)} windows closed without events "
                          f"({show_rows(empty)} of this call's units); they are kept, with count-like features "
                          "0 and others NaN.", RulefeatWarning, stacklevel=4)
        return table

    # -- memory -----------------------------------------------------------------------------------------
    def _trim(self, buf: StudentBuffer) -> None:
        n = len(buf)
        if n < buf.next_check:  # the bound is worked out again only after the buffer grew by half
            return
        keep = buf.n_final
        if self.unit.name == "window" and len(buf.windows):
            keep = min(keep, int(np.searchsorted(buf.time, buf.windows[:, 0].min(), side="left")))
        elif self.unit.name != "window":
            keep = min(keep, buf.unit_from)
        # Cutting needs keep >= 8 (or over half the buffer); the rules' reach only lowers keep, so it is
        # worked out only when the open units and pending events would let enough go.
        if _worth_cutting(keep, n):
            keep = min(keep, self._needed_from(buf))
        if _worth_cutting(keep, n):
            for name in self._checked:  # groups wholly let go have closed; the first one kept goes on
                codes, kept = buf.cols[name][:keep], buf.cols[name][keep:]
                going_on = kept[kept >= 0][:1].tolist()
                gone = set(np.unique(codes[codes >= 0]).tolist()) - set(going_on)
                buf.closed.setdefault(name, set()).update(gone)
            buf.session = buf.session[keep:]
            buf.drop(keep)
        buf.next_check = len(buf) + max(8, len(buf) // 2)

    def _needed_from(self, buf: StudentBuffer) -> int:
        """First event a pending or future event may read (the reach bound of docs/live.md), minus one."""
        return max(earliest_read(self._paths, np.arange(buf.n_final, len(buf) + 1), _Reads(self, buf)) - 1, 0)

    # -- checkpoints -----------------------------------------------------------------------------------
    def checkpoint(self, path=None) -> bytes:
        """The scorer's state as bytes (and written to ``path``, if given): fitted detector and open buffers.

        Restore it with :meth:`LiveScorer.restore`; a checkpoint is a pickle, so restore only checkpoints
        you wrote yourself.
        """
        state = {"format": CHECKPOINT_FORMAT, "detector": self.detector,
                 "options": {"columns": self.columns, "empty_units": self.empty_units,
                             "tolerance": self.tolerance, "given": self.given,
                             "session_gap": self.session_gap,
                             "duration_cap": self.duration_cap, "predict_params": self.predict_params},
                 "columns": self._columns.labels, "buffers": self._buffers, "window_keys": self._window_keys,
                 "next_id": self._next_id, "clock": self._clock, "closed": self._closed, "repairs": self.repairs}
        data = pickle.dumps(state, protocol=pickle.HIGHEST_PROTOCOL)
        if path is not None:
            Path(path).write_bytes(data)
        return data

    @classmethod
    def restore(cls, checkpoint) -> LiveScorer:
        """A scorer continuing from ``checkpoint`` (bytes from :meth:`checkpoint`, or the file it wrote)."""
        data = checkpoint if isinstance(checkpoint, bytes) else Path(checkpoint).read_bytes()
        state = pickle.loads(data)  # noqa: S301 - checkpoints are the caller's own files (docs/live.md)
        if not isinstance(state, dict) or state.get("format") != CHECKPOINT_FORMAT:
            raise LiveError(f"LiveScorer.restore: not a live scorer checkpoint of format {CHECKPOINT_FORMAT!r}.")
        scorer = cls(state["detector"], **state["options"])
        scorer._columns.labels = state["columns"]
        scorer._buffers, scorer._window_keys = state["buffers"], state["window_keys"]
        scorer._next_id, scorer._clock = state["next_id"], state["clock"]
        scorer._closed, scorer.repairs = state["closed"], state["repairs"]
        return scorer

    def __repr__(self) -> str:
        held = sum(len(b) for b in self._buffers.values())
        return (f"LiveScorer({len(self._rule_names)} rules, {self.unit.name} units, {len(self._buffers)} students, "
                f"{held} events held)")


class _Reads:
    """A student's buffer as :func:`~rulefeat.ship.reach.earliest_read` sees it, with one virtual event
    at position ``len(buffer)``: the next event to come (at the watermark, in the open groups)."""

    def __init__(self, scorer: LiveScorer, buf: StudentBuffer):
        self.scorer, self.buf, self.time = scorer, buf, buf.time
        self._mark, self._starts = scorer._watermark(buf), {}

    def time_at(self, at: np.ndarray) -> np.ndarray:
        return np.append(self.buf.time, self._mark)[at]

    def group_start(self, scope: str) -> np.ndarray:
        if scope not in self._starts:
            codes = self.buf.session if scope == "session" else self.buf.cols[scope]
            self._starts[scope] = _group_starts(codes)
        return self._starts[scope]


def _by_student(codes: np.ndarray) -> tuple[np.ndarray | None, list]:
    """(the order putting the events student by student, or None if they already are; each student's
    ``(code, first, end)`` slice of it, in order of the student's first event in the call)."""
    if len(codes) == 1 or (codes[1:] == codes[:-1]).all():
        return None, [(int(codes[0]), 0, len(codes))]
    order = np.argsort(codes, kind="stable")
    ordered = codes[order]
    cut = np.flatnonzero(ordered[1:] != ordered[:-1]) + 1
    lows, highs = np.concatenate([[0], cut]), np.append(cut, len(codes))
    seq = np.argsort(order[lows])
    return order, [(int(ordered[lo]), int(lo), int(hi)) for lo, hi in zip(lows[seq], highs[seq], strict=True)]


def _window_groups(students: list) -> dict:
    groups: dict = {}
    for i, student in enumerate(students):
        groups.setdefault(student, []).append(i)
    return {s: np.asarray(rows, dtype=np.int64) for s, rows in groups.items()}


def _worth_cutting(keep: int, n: int) -> bool:
    return keep >= 8 or (keep > 0 and 2 * keep > n)


def _group_starts(codes: np.ndarray) -> np.ndarray:
    """Per event, and for one more to come in the open group, the index of the first event of its group
    (its own index where the key is missing).

    A student's groups are runs of the keyed events: the scorer refuses a step or problem the student
    had left (and given sessions), and derived sessions are runs by construction.
    """
    out = np.arange(len(codes) + 1)
    at = np.flatnonzero(codes >= 0)
    if len(at):
        keys = codes[at]
        new = np.empty(len(at), dtype=bool)
        new[0] = True
        np.not_equal(keys[1:], keys[:-1], out=new[1:])
        out[at] = at[new][np.cumsum(new) - 1]
        out[-1] = out[at[-1]]
    return out


def _parts(detector):
    """(the RuleFeatures, the feature names the model saw or None, the rest of the pipeline or None)."""
    if isinstance(detector, RuleFeatures):
        return _fitted(detector), None, None
    if isinstance(detector, Pipeline) and len(detector.steps) >= 1:
        first = detector.steps[0][1]
        rest = detector[1:] if len(detector.steps) > 1 else None
        if isinstance(first, RuleFeatures):
            return _fitted(first), None, rest
        if isinstance(first, FeatureUnion):
            used = [(name, tf) for name, tf in first.transformer_list if tf not in ("drop", None)]
            mined = [name for name, tf in used if isinstance(tf, LogFeatures)]
            if mined:
                raise LiveError(f"LiveScorer: the detector's feature union holds mined features ({mined[0]!r}); "
                                "several mined families (history, mastery) read a student's whole past, which a "
                                "live scorer does not keep. Ship a rules-only detector for live scoring: "
                                "make_detector(log, rules, mined=False).")
            if len(used) == 1 and isinstance(used[0][1], RuleFeatures):
                return _fitted(used[0][1]), list(first.get_feature_names_out()), rest
    raise LiveError(f"LiveScorer: cannot score {type(detector).__name__} live; give a fitted RuleFeatures or a "
                    "fitted Pipeline whose first step is a RuleFeatures or a FeatureUnion holding one "
                    "(e.g. make_detector(log, rules, mined=False).fit(X, y)).")


def _fitted(rules: RuleFeatures) -> RuleFeatures:
    if not hasattr(rules, "program_"):
        raise LiveError("LiveScorer: the detector is not fitted; fit it first (detector.fit(X, y)).")
    return rules
