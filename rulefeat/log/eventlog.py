"""The validated, immutable event log every other part of rulefeat reads (contracts 1 and 5)."""

from __future__ import annotations

import uuid
import warnings
from collections.abc import Iterable
from pathlib import Path

import numpy as np
import pandas as pd

from .. import _frame
from .._text import did_you_mean, show_rows
from ..errors import LogRepairWarning, LogSchemaError, UnitError
from . import derive, parse
from .parse import DERIVED, LogIssue

__all__ = ["EventLog", "LogIssue", "read_events"]

SCOPES = ("student", "session", "problem", "step")


class EventLog:
    """A validated, typed, sorted and immutable table of learner actions.

    Parameters
    ----------
    data : pandas.DataFrame, pyarrow.Table or polars.DataFrame
        One row per action (Arrow and polars tables are converted column by
        column). Columns are matched to the canonical fields ``student, time,
        action, correct, problem, step, skill, session, duration,
        population`` by name or through ``columns``; every other column is
        kept as an extra field that rules may use.
    columns : dict, optional
        ``{field: column}`` for input columns named otherwise, e.g.
        ``{"student": "learner", "time": "ts"}``.
    time_unit : {"s", "ms", "us", "ns", "min", "h"}, default "s"
        Unit of numeric times. Datetime and ISO 8601 text columns need none.
    correct_values : (object, object), optional
        ``(value meaning correct, value meaning wrong)`` for ``correct``
        columns coded other than booleans, 0/1 or 'true'/'false'.
    actions : dict, optional
        ``{kind: values}`` renaming the input's action labels to the kinds
        rules talk about, e.g. ``{"attempt": ["ANSWER"], "hint": ["HELP"]}``.
        Kinds other than ``attempt`` and ``hint`` are kept and flagged.
    session_gap : float, default 1800
        When there is no ``session`` column, a new session starts after a pause
        longer than this many seconds (30 minutes: common practice, no source).
    duration_cap : float, default 600
        When there is no ``duration`` column, an action's duration is the time
        until the student's next action in the same session, capped at this
        many seconds; the last action of a session gets no duration (NaN).
        The alternative convention — duration as the time *since* the previous
        action — is available to rules as the ``gap`` field.
    duplicates : {"keep", "drop"}, default "keep"
        What to do with exact duplicate events; both are recorded in ``issues``.

    Attributes
    ----------
    issues : tuple of LogIssue
        Every repair or flag applied to the input: what, how many, which rows.
    dropped_rows : numpy.ndarray
        Input row positions that are not in the log. ``len(data) ==
        len(log) + len(log.dropped_rows)``.

    Examples
    --------
    >>> import pandas as pd
    >>> raw = pd.DataFrame({"learner": ["b", "a", "a"], "time": [5.0, 0.0, 2.0],
    ...                     "action": ["attempt", "hint", "attempt"],
    ...                     "correct": [1, None, 0]})
    >>> log = EventLog(raw, columns={"student": "learner"})
    >>> len(log), log.n_students
    (3, 2)
    >>> log.values("gap").tolist()
    [nan, 2.0, nan]
    """

    def __init__(self, data: pd.DataFrame, *, columns: dict | None = None, time_unit: str = "s",
                 correct_values=None, actions: dict | None = None, session_gap: float = 1800.0,
                 duration_cap: float = 600.0, duplicates: str = "keep"):
        _check_options(session_gap, duration_cap, duplicates)
        parse.check_mappings(columns, actions)
        parse.check_correct_values(correct_values)
        data = _frame.as_pandas(data)
        built = derive.build(data, columns=columns, time_unit=time_unit, correct_values=correct_values,
                             actions=actions, session_gap=float(session_gap),
                             duration_cap=float(duration_cap), duplicates=duplicates)
        self._init_from(built)
        if self.issues:
            warnings.warn(
                "EventLog repaired or flagged its input (see log.issues): "
                + "; ".join(str(i) for i in self.issues),
                LogRepairWarning, stacklevel=2,
            )

    # -- construction helpers -------------------------------------------------
    def _init_from(self, built: derive.Built) -> None:
        for arr in built.fields.values():
            arr.flags.writeable = False
        built.row.flags.writeable = False
        self._fields = built.fields
        self._kinds = built.kinds
        self._categories = built.categories
        self._row = built.row
        self._time_origin = built.time_origin
        self._time_kind = built.time_kind
        self._settings = built.settings
        self.issues = tuple(built.issues)
        self.dropped_rows = built.dropped
        self.dropped_rows.flags.writeable = False
        self._n_input = built.n_input
        self._token = uuid.uuid4().hex
        self._cache: dict = {}
        self._student_bounds = derive.bounds(self._fields["student"], len(self._categories["student"]))

    # -- immutability and sharing ---------------------------------------------
    def __copy__(self) -> EventLog:
        return self

    def __deepcopy__(self, memo) -> EventLog:
        return self

    def __getstate__(self) -> dict:
        state = self.__dict__.copy()
        state["_cache"] = {}
        return state

    def __setstate__(self, state: dict) -> None:
        self.__dict__.update(state)
        for arr in (*self._fields.values(), self._row, self.dropped_rows):
            arr.flags.writeable = False

    def __len__(self) -> int:
        return len(self._row)

    def __repr__(self) -> str:
        return f"EventLog({len(self)} events, {self.n_students} students, {len(self._fields)} fields)"

    # -- schema ---------------------------------------------------------------
    @property
    def fields(self) -> tuple[str, ...]:
        """Names of every field: canonical, derived and extra."""
        return tuple(self._fields)

    @property
    def token(self) -> str:
        """An identifier of this log's content, kept through pickling (used for caching)."""
        return self._token

    @property
    def n_students(self) -> int:
        return int((self._student_bounds[1] > self._student_bounds[0]).sum())

    @property
    def students(self) -> pd.Index:
        """Student labels; a student's code is its position here."""
        return self._categories["student"]

    @property
    def time_kind(self) -> str:
        """``"datetime"`` when times were dates, ``"number"`` when they were numbers of seconds."""
        return self._time_kind

    @property
    def settings(self) -> dict:
        return dict(self._settings)

    def kind(self, name: str) -> str:
        """``"number"``, ``"bool"`` (int8 1/0/-1 missing) or ``"category"`` (int32 codes, -1 missing)."""
        self._check_field(name)
        return self._kinds[name]

    def has(self, name: str) -> bool:
        return name in self._fields

    def values(self, name: str) -> np.ndarray:
        """The read-only array of a field in log order (category fields as codes)."""
        self._check_field(name)
        return self._fields[name]

    def categories(self, name: str) -> pd.Index:
        """The labels of a category field; code ``k`` means ``categories(name)[k]``."""
        if self.kind(name) != "category":
            raise LogSchemaError(f"EventLog.categories: field {name!r} is a {self._kinds[name]} field, "
                                 "not a category field.")
        return self._categories[name]

    def decoded(self, name: str) -> pd.Series:
        """A field as a pandas Series with category labels and missing values restored."""
        vals = self.values(name)
        kind = self._kinds[name]
        if kind == "category":
            return pd.Series(_frame.categorical(vals, self._categories[name]), name=name)
        if kind == "bool":
            return pd.Series(pd.array(np.where(vals < 0, None, vals == 1), dtype="boolean"), name=name)
        if name == "time" and self._time_kind == "datetime":
            ns = np.round(vals * _frame.NS_PER_SECOND).astype(np.int64) + self._time_origin.astype(np.int64)
            return pd.Series(ns.astype("datetime64[ns]"), name=name)
        return pd.Series(vals, name=name)

    def _check_field(self, name: str) -> None:
        if name not in self._fields:
            raise LogSchemaError(f"EventLog: no field named {name!r}.{did_you_mean(name, self._fields)} "
                                 f"Fields: {list(self._fields)!r}.")

    @property
    def row_numbers(self) -> np.ndarray:
        """For each event in log order, its 0-based row position in the input table."""
        return self._row

    def derived_fields(self) -> tuple[str, ...]:
        """Fields the log computed rather than read (``gap``, positions, and derived session/duration)."""
        own = [name for name in DERIVED if name in self._fields]
        own += [name for name in ("session", "duration") if self._settings[f"{name}_derived"]]
        if "correct" not in self._settings["columns"]:
            own.append("correct")  # filled with missing values when the input had none
        return tuple(own)

    def to_frame(self, *, derived: bool = True) -> pd.DataFrame:
        """The log as a DataFrame in log order (labels restored), indexed by input row number.

        With ``derived=False`` the fields the log computed itself are left out, so the
        table can be edited and turned into a new log.
        """
        skip = () if derived else self.derived_fields()
        cols = {name: self.decoded(name).array for name in self._fields if name not in skip}
        return _frame.frame_from_arrays(cols, index=pd.Index(self._row, name="input_row"))

    def summary(self) -> dict:
        """Counts a person checks first: events, students, actions, sessions, issues."""
        action = self.decoded("action").value_counts().sort_index()
        return {
            "events": len(self),
            "input_rows": self._n_input,
            "dropped_rows": len(self.dropped_rows),
            "students": self.n_students,
            "sessions": int(len(np.unique(self._fields["session"]))),
            "actions": {str(k): int(v) for k, v in action.items()},
            "fields": list(self._fields),
            "issues": [str(i) for i in self.issues],
        }

    # -- students and time ----------------------------------------------------
    def student_bounds(self) -> tuple[np.ndarray, np.ndarray]:
        """(first, one-past-last) event position of every student code; equal when absent."""
        return self._student_bounds

    def student_codes(self, labels: Iterable, *, missing: str = "error", where: str = "EventLog") -> np.ndarray:
        """Codes of student labels; unknown labels raise or map to -1 (``missing="empty"``)."""
        labels = pd.Series(list(labels) if not isinstance(labels, pd.Series) else labels)
        codes = _frame.codes_for(labels, self._categories["student"])
        absent = codes < 0
        if absent.any() and missing == "error":
            rows = np.flatnonzero(absent)
            shown = ", ".join(f"row {r}: {labels.iloc[r]!r}" for r in rows[:5])
            raise UnitError(
                f"{where}: {int(absent.sum())} rows name students that are not in the event log ({shown}). "
                "Check the student ids; if the rows come from another log, bind the fitted detector to it "
                "(rulefeat.bind(detector, new_log)); or pass missing_students='empty' to give such rows "
                "empty units."
            )
        return codes

    def to_seconds(self, values, *, what: str = "time") -> np.ndarray:
        """Convert datetimes / ISO text / numbers to the log's time axis (seconds from its origin).

        Missing values become NaN; infinite numbers, datetimes outside the nanosecond range and times
        whose zone does not match the log's (naive against zone-aware) are refused with a
        :class:`UnitError` naming the rows.
        """
        series = pd.Series(values).reset_index(drop=True)
        if self._time_kind == "number":
            if not _frame.is_numeric(series):
                raise UnitError(f"{what}: the log's times are numbers of seconds, so {what} must be numbers "
                                f"too. Got dtype {series.dtype}.")
            out = _frame.to_float(series) * _frame.TIME_UNITS[self._settings["time_unit"]]
            _refuse_rows(what, np.isinf(out), "are infinite; give finite times", series)
            return out
        if _frame.is_numeric(series):
            raise UnitError(f"{what}: the log's times are datetimes, so {what} must be datetimes or ISO 8601 "
                            f"text too, not numbers (dtype {series.dtype}).")
        parsed = series if _frame.is_datetime(series) else self._parsed_text(series, what)
        if not _frame.is_datetime(parsed):
            raise UnitError(f"{what}: could not read these values as datetimes (dtype {series.dtype}).")
        zone, log_zone = ("aware" if _frame.is_zone_aware(parsed) else "naive"), self._settings.get("time_zone")
        if log_zone is not None and zone != log_zone and len(series.dropna()):
            raise UnitError(f"{what}: the times are zone-{zone} but the log's are zone-{log_zone}; give both "
                            "with a UTC offset (e.g. '2026-03-02T09:15:00+01:00') or both without.")
        _refuse_rows(what, _frame.datetimes_out_of_range(parsed), "lie outside the years 1678 to 2261, the "
                     "range of the log's nanosecond times; correct them (a year typed wrong?)", series)
        ns = _frame.datetime_ns(parsed)
        out = (ns - self._time_origin.astype(np.int64)).astype(np.float64) / _frame.NS_PER_SECOND
        out[ns == np.iinfo(np.int64).min] = np.nan
        return out

    @staticmethod
    def _parsed_text(series: pd.Series, what: str) -> pd.Series:
        parsed, offset = _frame.parse_datetime_text(series)
        if offset is not None:
            naive = ~offset & ~_frame.missing_mask(series)
            raise UnitError(f"{what}: {int(offset.sum())} times carry a UTC offset "
                            f"({show_rows(np.flatnonzero(offset))}) and {int(naive.sum())} do not ({show_rows(np.flatnonzero(naive))}); write every time "
                            "with its offset, or none.")
        return parsed

    # -- grouping shared by rules and features ----------------------------------
    def group_ids(self, scope: str) -> np.ndarray:
        """Dense int64 id of the (student, scope) group of every event; -1 where the scope key is missing."""
        if scope not in SCOPES:
            raise LogSchemaError(f"EventLog.group_ids: scope must be one of {list(SCOPES)!r}. "
                                 f"Got {scope!r} instead.{did_you_mean(scope, SCOPES)}")
        key = ("group", scope)
        if key not in self._cache:
            self._cache[key] = derive.group_ids(self._fields, scope)
        return self._cache[key]

    def cached(self, key, compute):
        """Memoise a derived array on this immutable log (shared by every rule and feature)."""
        if key not in self._cache:
            value = compute()
            if isinstance(value, np.ndarray):
                value.flags.writeable = False
            self._cache[key] = value
        return self._cache[key]

    def time_ranks(self) -> tuple[np.ndarray, np.ndarray]:
        """(sorted distinct times, rank of every event's time among them), computed once per log.

        ``student * (len(unique) + 1) + rank`` is an exact integer key that is sorted in log
        order, so one ``searchsorted`` finds time boundaries inside every student at once.
        """
        unique, rank, _ = self._time_order()
        return unique, rank

    def shifted_time_ranks(self, seconds: float) -> np.ndarray:
        """For every event, the rank (among distinct times) of the first time >= its time − seconds.

        The needles are searched in time order, which keeps the binary searches cache-friendly on
        logs of millions of events (a search in log order jumps across the whole array).
        """
        def compute():
            unique, _, order = self._time_order()
            needles = self._fields["time"][order] - float(seconds)
            out = np.empty(len(order), dtype=np.int64)
            out[order] = np.searchsorted(unique, needles, side="left")
            return out
        return self.cached(("shifted-time-ranks", float(seconds)), compute)

    def _time_order(self):
        def compute():
            time = self._fields["time"]
            order = np.argsort(time)  # ties share a rank, so an unstable sort is enough
            ordered = time[order]
            new = np.ones(len(ordered), dtype=bool)
            new[1:] = ordered[1:] != ordered[:-1]
            unique = ordered[new]
            rank = np.empty(len(order), dtype=np.int64)
            rank[order] = np.cumsum(new) - 1
            for arr in (unique, rank, order):
                arr.flags.writeable = False
            return unique, rank, order
        return self.cached(("time-order",), compute)

    def for_students(self, students: Iterable) -> EventLog:
        """A log holding only the events of ``students`` (labels), sharing categories with this one."""
        codes = np.unique(self.student_codes(students, missing="error", where="EventLog.for_students"))
        first, last = self._student_bounds
        if int((last[codes] - first[codes]).sum()) == len(self):
            return self  # every event is kept: the log is immutable, so it is its own sub-log
        take = derive.ranges_to_index(first[codes], last[codes])
        return self._subset(take)

    def _subset(self, take: np.ndarray) -> EventLog:
        new = object.__new__(EventLog)
        new.__dict__.update(self.__dict__)
        new._fields = {k: v[take] for k, v in self._fields.items()}
        new._row = self._row[take]
        for arr in (*new._fields.values(), new._row):
            arr.flags.writeable = False
        new._token = uuid.uuid4().hex
        new._cache = {}
        new._student_bounds = derive.bounds(new._fields["student"], len(self._categories["student"]))
        return new


def _refuse_rows(what: str, bad: np.ndarray, problem: str, series: pd.Series) -> None:
    if bad.any():
        rows = np.flatnonzero(bad)
        shown = ", ".join(f"row {r}: {series.iloc[r]!r}" for r in rows[:5])
        raise UnitError(f"{what}: {int(bad.sum())} values {problem}. First offending rows: {shown}.")


def _check_options(session_gap, duration_cap, duplicates) -> None:
    if duplicates not in ("keep", "drop"):
        raise LogSchemaError(f"The 'duplicates' parameter of EventLog must be one of ['keep', 'drop']. "
                             f"Got {duplicates!r} instead.")
    for name, value in (("session_gap", session_gap), ("duration_cap", duration_cap)):
        if not isinstance(value, (int, float)) or not value > 0:
            raise LogSchemaError(f"The {name!r} parameter of EventLog must be a positive number of seconds. "
                                 f"Got {value!r} instead.")


def read_events(path, *, format: str | None = None, read_options: dict | None = None, **log_options) -> EventLog:
    """Read a CSV or Parquet file of events into an :class:`EventLog`.

    ``format`` is taken from the file suffix when omitted; ``read_options`` go to
    :func:`pandas.read_csv` / :func:`pandas.read_parquet`; everything else goes
    to :class:`EventLog`.
    """
    path = Path(path)
    fmt = (format or path.suffix.lstrip(".")).lower()
    if fmt in ("csv", "txt", "tsv"):
        opts = {"sep": "\t"} if fmt == "tsv" else {}
        data = pd.read_csv(path, **{**opts, **(read_options or {})})
    elif fmt in ("parquet", "pq"):
        data = pd.read_parquet(path, **(read_options or {}))
    else:
        raise LogSchemaError(f"read_events: cannot tell the format of {str(path)!r}; pass format='csv' or "
                             "format='parquet'.")
    return EventLog(data, **log_options)
