"""What a live scorer holds per student, and the small event log the batch engine evaluates on it.

Events arrive as dicts or table rows; :class:`Columns` turns them into the log's typed arrays (category
labels to codes of the scorer's own label tables, booleans to 1/0/-1, times to float seconds).
:class:`StudentBuffer` keeps one student's recent events in stream order, their final firings and the
keys of the groups that closed.  :class:`BufferLog` offers the handful of :class:`~rulefeat.EventLog`
methods the compiled program reads, over the buffers of the students evaluated in one call, with the
derived fields computed by the log build's own code (:func:`rulefeat.log.derive.derive_sorted`).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import pandas as pd

from .. import _frame
from ..errors import LiveError
from ..log import derive

__all__ = ["Labels", "Columns", "StudentBuffer", "BufferLog", "DERIVED_KINDS", "range_index"]

DERIVED_KINDS = {"gap": "number", "duration": "number", "session": "category", "step_position": "number",
                 "problem_position": "number"}
_BOOL = {True: 1, False: 0, "true": 1, "false": 0, "True": 1, "False": 0}  # 1 == True, 0 == False as keys
_DTYPE = {"number": np.float64, "bool": np.int8, "category": np.int32}


@lru_cache(maxsize=1024)
def range_index(n: int) -> pd.RangeIndex:
    """``RangeIndex(n)``, shared: the labels of numbered categories (students of a call, derived sessions)."""
    return pd.RangeIndex(n)


def is_missing(value) -> bool:
    return value is None or value is pd.NA or value is pd.NaT or (isinstance(value, float) and value != value)


class Labels:
    """A category field's labels in order of arrival; code k means ``labels[k]``."""

    def __init__(self):
        self.labels: list = []
        self.codes: dict = {}
        self._index: pd.Index | None = None

    def code(self, value) -> int:
        if is_missing(value):
            return -1
        code = self.codes.get(value)
        if code is None:
            code = self.codes[value] = len(self.labels)
            self.labels.append(value)
            self._index = None
        return code

    @property
    def index(self) -> pd.Index:
        if self._index is None:
            self._index = pd.Index(self.labels, dtype=object if not self.labels else None)
        return self._index

    def __getstate__(self) -> dict:
        return {"labels": self.labels}

    def __setstate__(self, state: dict) -> None:
        self.labels, self._index = state["labels"], None
        self.codes = {label: k for k, label in enumerate(self.labels)}


class Columns:
    """Turns incoming events into typed arrays of the fields the scorer stores.

    Category labels become codes of the scorer's own label tables; a categorical column is looked up once
    per distinct category (slices of one table share their categories, so the lookup is kept between
    calls), and students become codes of a student table used to group a call's events.
    """

    def __init__(self, kinds: dict, time_kind: str, sources: dict | None = None):
        self.kinds, self.time_kind = kinds, time_kind
        self.sources = dict(sources or {})  # field -> the name events give it (an EventLog 'columns' mapping)
        self.labels = {name: Labels() for name, kind in kinds.items() if kind == "category"}
        self.students = Labels()
        self._lookups: dict = {}  # field -> (categories, their codes in the label table; -2 not looked up yet)

    def rows(self, events) -> dict:
        """``{field: raw values}`` of the fields used, from a dict, a list of dicts or a DataFrame."""
        used = {name: self.sources.get(name, name) for name in ("student", "time", *self.kinds)}
        if isinstance(events, dict):
            return {k: [events[src]] for k, src in used.items() if src in events}
        if isinstance(events, pd.DataFrame):  # columns stay Series: converted whole, not value by value
            names = events.columns
            if any(src not in names for src in used.values()):  # columns named by numbers, say
                names = {str(c): c for c in events.columns}
            else:
                names = {src: src for src in used.values()}
            absent = [src for src in used.values() if src not in names]
            if absent:
                raise LiveError(f"LiveScorer.feed: the events table lacks the columns {absent!r}, which the "
                                "detector reads (a log without them would be refused too). A dict may leave out "
                                "a field for one event (a missing value); a table needs every column.")
            return {k: events[names[src]] for k, src in used.items()}
        if isinstance(events, (list, tuple)):
            if not all(isinstance(e, dict) for e in events):
                raise LiveError("LiveScorer.feed: events must be a dict, a list of dicts or a DataFrame of the "
                                "log's columns; the list holds something else.")
            present = {k for e in events for k in e}
            return {k: [e.get(src) for e in events] for k, src in used.items() if src in present}
        raise LiveError(f"LiveScorer.feed: events must be a dict, a list of dicts or a DataFrame of the log's "
                        f"columns. Got {type(events).__name__}.")

    def convert(self, raw: dict, n: int, first_id: int) -> dict:
        """Typed arrays of every stored field (missing values where an event lacks one); students as codes."""
        for name in ("student", "time", "action"):
            if name not in raw:
                named = f" (named {self.sources[name]!r} by the 'columns' mapping)" if name in self.sources else ""
                raise LiveError(f"LiveScorer.feed: the events have no {name!r} field{named} (event {first_id} "
                                f"on); every event needs 'student', 'time' and 'action'. Fields found: "
                                f"{sorted(raw)!r}.")
        out = {"student": self._codes("student", self.students, raw["student"], n),
               "time": self.time_values(raw["time"], "time", first_id)}
        bad = np.flatnonzero(out["student"] < 0)
        if len(bad):
            raise LiveError(f"LiveScorer.feed: event {first_id + bad[0]} has no student.")
        for name, kind in self.kinds.items():
            values = raw.get(name, [None] * n)
            if kind == "category":
                out[name] = self._codes(name, self.labels[name], values, n)
            elif kind == "bool":
                out[name] = self._bools(name, values, first_id)
            elif isinstance(values, pd.Series) and _frame.is_number_dtype(values.dtype):
                out[name] = _frame.to_float(values)
            else:
                values = values.tolist() if isinstance(values, pd.Series) else values
                out[name] = np.array([np.nan if is_missing(v) else v for v in values], dtype=np.float64)
        return out

    def _codes(self, name: str, labels: Labels, values, n: int) -> np.ndarray:
        if not isinstance(values, pd.Series):
            return np.fromiter((labels.code(v) for v in values), np.int32, n)
        parts = _frame.category_parts(values)
        if parts is not None:
            codes, categories = parts
            return self._lookup(name, labels, categories, codes)[codes]  # code -1 reads the last slot: -1
        codes, uniques = pd.factorize(values, use_na_sentinel=True)  # a column: one lookup per label
        lut = np.array([labels.code(u) for u in uniques] + [-1], dtype=np.int32)
        return lut[np.where(codes >= 0, codes, len(uniques))]

    def _lookup(self, name: str, labels: Labels, categories: pd.Index, codes: np.ndarray) -> np.ndarray:
        """The label-table codes of ``categories`` (ending with -1 for missing), filled in for ``codes``."""
        known = self._lookups.get(name)
        if known is None or known[0] is not categories:
            lut = np.full(len(categories) + 1, -2, dtype=np.int32)
            lut[-1] = -1
            known = self._lookups[name] = (categories, lut)
        lut = known[1]
        new = lut[codes] == -2  # labels not looked up yet
        if new.any():
            for code in np.unique(codes[new]).tolist():
                lut[code] = labels.code(categories[code])
        return lut

    def time_values(self, values, what: str, first_id: int | None = None) -> np.ndarray:
        """Times as float seconds on the live axis (numbers as given; datetimes as seconds since 1970)."""
        if isinstance(values, pd.Series) and self.time_kind == "datetime" and _frame.is_datetime(values):
            ns = _frame.datetime_ns(values)
            out = np.where(ns == np.iinfo(np.int64).min, np.nan, ns / 1e9)
            values = None
        elif isinstance(values, pd.Series) and self.time_kind == "number" and _frame.is_numeric(values):
            out, values = _frame.to_float(values), None
        elif isinstance(values, pd.Series):
            values = values.tolist()
        try:
            if values is None:
                pass
            elif self.time_kind == "datetime":
                out = np.array([pd.Timestamp(v).value / 1e9 if not is_missing(v) else np.nan for v in values])
            else:
                out = np.array([np.nan if is_missing(v) else v for v in values], dtype=np.float64)
        except (TypeError, ValueError) as exc:
            kind = "datetimes or ISO 8601 text" if self.time_kind == "datetime" else "numbers of seconds"
            raise LiveError(f"LiveScorer: {what} values must be {kind}, as in the training log ({exc}).") from None
        bad = np.flatnonzero(np.isnan(out))
        if len(bad):
            where = f"event {first_id + bad[0]}" if first_id is not None else f"row {bad[0]}"
            raise LiveError(f"LiveScorer: {where} has a missing {what}.")
        return out

    @staticmethod
    def _bools(name, values, first_id) -> np.ndarray:
        if isinstance(values, pd.Series) and _frame.is_boolean(values):
            return _frame.bool_codes(values)
        values = values.tolist() if isinstance(values, pd.Series) else values
        out = np.empty(len(values), dtype=np.int8)
        for i, v in enumerate(values):
            if is_missing(v):
                out[i] = -1
                continue
            code = _BOOL.get(v if not isinstance(v, np.generic) else v.item())
            if code is None:
                raise LiveError(f"LiveScorer.feed: event {first_id + i} has {name}={v!r}; use true/false, 1/0 "
                                "or a missing value.")
            out[i] = code
        return out


class StudentBuffer:
    """One student's recent events in stream order (time, then arrival), and what is final about them."""

    def __init__(self, names, n_rules: int):
        self.cols = {name: np.zeros(0, dtype=_DTYPE.get(kind, np.float64)) for name, kind in names.items()}
        self.time = np.zeros(0)
        self.ids = np.zeros(0, dtype=np.int64)
        self.fired = np.zeros((n_rules, 0), dtype=bool)  # valid for the first n_final events
        self.n_final = 0
        self.latest = -np.inf
        self.next_check = 8  # buffer size at which to work out what can be let go
        self.unit_from = 0  # first event of the oldest keyed unit not emitted yet
        self.trimmed_until = -np.inf  # time of the last event dropped from the buffer
        self.closed: dict[str, set] = {}
        self.windows = np.zeros((0, 3))  # (start, end, row id) of the open windows, by end
        self.session = np.zeros(0, dtype=np.int64)  # session ids from the last evaluation (equal = same session)

    def __len__(self) -> int:
        return len(self.time)

    def merged(self, new: dict, ids: np.ndarray, appended: bool = False) -> tuple[dict, np.ndarray, np.ndarray]:
        """The buffer with new events inserted: each after every event with time <= its own (stable).

        ``appended``: the new events are in time order and none is before the buffer's last one.
        """
        if appended:
            cols = {k: np.concatenate([v, new[k]]) for k, v in self.cols.items()}
            return cols, np.concatenate([self.time, new["time"]]), np.concatenate([self.ids, ids])
        time = np.concatenate([self.time, new["time"]])
        order = np.argsort(time, kind="stable")
        cols = {k: np.concatenate([v, new[k]])[order] for k, v in self.cols.items()}
        return cols, time[order], np.concatenate([self.ids, ids])[order]

    def commit(self, cols, time, ids) -> None:
        self.cols, self.time, self.ids = cols, time, ids
        self.latest = max(self.latest, float(time[-1]))
        pad = np.zeros((self.fired.shape[0], len(time) - self.fired.shape[1]), dtype=bool)
        self.fired = np.concatenate([self.fired, pad], axis=1)  # inserted events land after the final ones

    def drop(self, keep: int) -> None:
        """Forget the first ``keep`` events (final, outside every open unit and every rule's reach)."""
        self.trimmed_until = float(self.time[keep - 1])
        self.cols = {k: v[keep:].copy() for k, v in self.cols.items()}
        self.time, self.ids, self.fired = self.time[keep:].copy(), self.ids[keep:].copy(), self.fired[:, keep:].copy()
        self.n_final -= keep
        self.unit_from = max(self.unit_from - keep, 0)


class BufferLog:
    """The part of the :class:`~rulefeat.EventLog` interface the compiled rules read, over buffered events."""

    def __init__(self, fields: dict, kinds: dict, categories: dict, text_cache: dict, *,
                 session_gap: float, duration_cap: float):
        self._kinds = {**kinds, **{k: v for k, v in DERIVED_KINDS.items() if k not in kinds}}
        self._fields = derive.derive_sorted(fields, kinds, session_gap=session_gap, duration_cap=duration_cap)
        self._categories = categories
        if "session" not in categories:
            n = int(self._fields["session"].max(initial=-1)) + 1
            self._categories = {**categories, "session": range_index(n)}
        self._text, self._cache = text_cache, {}

    def __len__(self) -> int:
        return len(self._fields["time"])

    @property
    def fields(self) -> tuple:
        return tuple(self._fields)

    def has(self, name: str) -> bool:
        return name in self._fields

    def kind(self, name: str) -> str:
        return self._kinds[name]

    def values(self, name: str) -> np.ndarray:
        return self._fields[name]

    def categories(self, name: str) -> pd.Index:
        return self._categories[name]

    def group_ids(self, scope: str) -> np.ndarray:
        return self.cached(("group", scope), lambda: derive.group_ids(self._fields, scope))

    def cached(self, key, compute):
        # Text labels depend on the label tables only, which outlive the call; everything else is per call.
        lasting = key[0] in ("text-labels", "label-codes", "norm-codes")
        store = self._text if lasting else self._cache
        if lasting:
            key = (key, len(self._categories[key[1]]))  # label tables only grow
        if key not in store:
            store[key] = compute()
        return store[key]

