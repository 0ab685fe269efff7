"""Column-by-column parsing of a raw event table into typed numpy arrays.

Each parser either returns arrays or raises :class:`LogSchemaError` naming the
column and the first offending rows.  Repairs that keep rows (and so must be
reported, not raised) are returned to the caller as :class:`LogIssue` objects.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .. import _frame
from .._text import did_you_mean, show_rows
from ..errors import LogSchemaError, ParameterError

CANONICAL = (
    "student", "time", "action", "correct", "problem", "step", "skill",
    "session", "duration", "population",
)
REQUIRED = ("student", "time", "action")
CATEGORY_FIELDS = ("problem", "step", "skill", "population")
BASE_ACTIONS = ("attempt", "hint")
DERIVED = ("gap", "step_position", "problem_position")


@dataclass(frozen=True)
class LogIssue:
    """One kind of repair or flag the event log applied to its input.

    ``rows`` are 0-based positions in the input table.
    """

    what: str
    count: int
    rows: np.ndarray = field(repr=False)
    action: str

    def __str__(self) -> str:
        return f"{self.what}: {self.count} ({self.action}; {show_rows(self.rows)})"


def _fail(column: str, message: str, rows=None, raw: pd.Series | None = None) -> LogSchemaError:
    where = ""
    if rows is not None and len(rows):
        rows = np.asarray(rows)[:5]
        shown = ", ".join(f"row {r}: {raw.iloc[r]!r}" for r in rows) if raw is not None else show_rows(rows)
        where = f" First offending rows: {shown}."
    return LogSchemaError(f"EventLog: column {column!r}: {message}.{where}")


def resolve_columns(data: pd.DataFrame, columns: dict | None) -> dict[str, str]:
    """Map canonical field -> input column, checking the mapping and the required fields."""
    if not isinstance(data, pd.DataFrame):
        raise LogSchemaError(f"EventLog: expected a pandas DataFrame of events, got {type(data).__name__}.")
    names = [str(c) for c in data.columns]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise LogSchemaError(f"EventLog: column names must be unique; {dup!r} appear more than once. Rename them.")
    if len(data) == 0:
        raise LogSchemaError("EventLog: the event table is empty (0 rows); there is nothing to build a log from.")
    mapping = check_column_mapping(columns or {}, names)
    for fld in CANONICAL:
        if fld not in mapping and fld in names and fld not in mapping.values():
            mapping[fld] = fld
    for fld in REQUIRED:
        if fld not in mapping:
            raise LogSchemaError(
                f"EventLog: required field {fld!r} is missing: no column is named {fld!r} and the "
                f"'columns' mapping does not name one.{did_you_mean(fld, names)} "
                f"Pass columns={{{fld!r}: '<your column>'}}. Columns given: {names!r}."
            )
    for fld, col in mapping.items():
        if col != fld and fld in names and fld not in mapping.values():
            raise LogSchemaError(
                f"EventLog: field {fld!r} is mapped to column {col!r}, but the table also has a column "
                f"named {fld!r}; drop or rename one of them so the field is unambiguous."
            )
    return mapping


def check_column_mapping(columns: dict, names: list[str] | None, where: str = "EventLog") -> dict[str, str]:
    """The ``{field: column}`` mapping checked: known fields, one column each, present among ``names``
    (not checked when ``names`` is None: a live scorer sees its columns only as events arrive)."""
    mapping: dict[str, str] = {}
    seen: dict[str, str] = {}
    for fld, col in columns.items():
        if fld not in CANONICAL:
            raise LogSchemaError(
                f"{where}: unknown field {fld!r} in 'columns'.{did_you_mean(fld, CANONICAL)} "
                f"Fields are {list(CANONICAL)!r}; other columns are kept as they are without mapping."
            )
        if names is not None and col not in names:
            raise LogSchemaError(
                f"{where}: 'columns' maps {fld!r} to {col!r}, which is not a column of the table."
                f"{did_you_mean(col, names)} Columns given: {names!r}."
            )
        if col in seen:
            raise LogSchemaError(
                f"{where}: 'columns' points both {seen[col]!r} and {fld!r} at column {col!r}; "
                "each field needs its own column."
            )
        seen[col] = fld
        mapping[fld] = col
    return mapping


def parse_student(raw: pd.Series, column: str):
    missing = _frame.missing_mask(raw)
    if missing.any():
        raise _fail(column, f"{int(missing.sum())} rows have no student id; every event needs one",
                    np.flatnonzero(missing))
    return _frame.factorize(raw)


def parse_time(raw: pd.Series, column: str, time_unit: str):
    """Return (seconds relative to origin, origin, kind, zone): kind 'datetime' or 'number', zone 'aware',
    'naive' or None (numbers)."""
    missing = _frame.missing_mask(raw)
    if missing.any():
        raise _fail(column, f"{int(missing.sum())} rows have no time", np.flatnonzero(missing), raw)
    if _frame.is_numeric(raw):
        if time_unit not in _frame.TIME_UNITS:
            raise LogSchemaError(
                f"EventLog: time_unit must be one of {list(_frame.TIME_UNITS)!r}. Got {time_unit!r} instead."
            )
        seconds = _frame.to_float(raw) * _frame.TIME_UNITS[time_unit]
        bad = ~np.isfinite(seconds)
        if bad.any():
            raise _fail(column, "times must be finite numbers", np.flatnonzero(bad), raw)
        return seconds, 0.0, "number", None
    parsed = raw if _frame.is_datetime(raw) else _parsed_text(raw, column)
    if _frame.is_datetime(parsed):
        outside = _frame.datetimes_out_of_range(parsed)
        if outside.any():
            raise _fail(column, f"{int(outside.sum())} times lie outside the years 1678 to 2261, the range of "
                        "nanosecond times; correct them (a year typed wrong?) or drop those rows",
                        np.flatnonzero(outside), raw)
    ns = _frame.datetime_ns(parsed)
    bad = ns == np.iinfo(np.int64).min
    if bad.any():
        raise _fail(
            column,
            f"{int(bad.sum())} times could not be parsed; give datetimes, ISO 8601 text "
            "(e.g. '2026-03-02T09:15:00') or numbers of seconds with time_unit",
            np.flatnonzero(bad), raw,
        )
    origin = int(ns.min())
    zone = "aware" if _frame.is_zone_aware(parsed) else "naive"
    return (ns - origin).astype(np.float64) / _frame.NS_PER_SECOND, np.datetime64(origin, "ns"), "datetime", zone


def _parsed_text(raw: pd.Series, column: str) -> pd.Series:
    """ISO text as datetimes; refuse a column mixing entries with and without a UTC offset (a guessed zone)."""
    parsed, offset = _frame.parse_datetime_text(raw)
    if offset is not None:
        naive = ~offset & ~_frame.missing_mask(raw)
        raise LogSchemaError(
            f"EventLog: column {column!r}: {int(offset.sum())} times carry a UTC offset (e.g. "
            f"{show_rows(np.flatnonzero(offset))}) and {int(naive.sum())} do not (e.g. "
            f"{show_rows(np.flatnonzero(naive))}); the zone of the latter is unknown. Write every time with "
            "its offset (e.g. '2026-03-02T09:15:00+01:00'), or convert the column to one zone first "
            "(pd.to_datetime(..., utc=True) if the naive times are UTC)."
        )
    return parsed


def parse_action(raw: pd.Series, column: str, actions: dict | None):
    missing = _frame.missing_mask(raw)
    if missing.any():
        raise _fail(column, f"{int(missing.sum())} rows have no action kind", np.flatnonzero(missing))
    codes, cats = _frame.factorize(raw)
    rename = {}
    for kind, values in (actions or {}).items():
        for value in [values] if isinstance(values, str) else list(values):
            rename[str(value)] = str(kind)
    labels = [rename.get(str(c), str(c)) for c in cats]  # a loop over labels, not rows
    full = sorted(set(labels) | set(BASE_ACTIONS))
    position = {label: code for code, label in enumerate(full)}  # linear in labels, not quadratic
    remap = np.array([position[lbl] for lbl in labels], dtype=np.int32)
    codes = remap[codes] if len(remap) else codes.astype(np.int32)
    base = np.zeros(len(full), dtype=bool)
    base[[position[k] for k in BASE_ACTIONS]] = True
    unknown = ~base[codes]
    return codes.astype(np.int32), pd.Index(full, dtype=object), unknown


def parse_correct(raw: pd.Series, column: str, correct_values):
    """Return int8 codes: 1 correct, 0 wrong, -1 missing."""
    missing = _frame.missing_mask(raw)
    out = np.full(len(raw), -1, dtype=np.int8)
    present = ~missing
    if correct_values is not None:
        yes, no = correct_values  # checked by EventLog (check_correct_values)
        text = raw.astype("string")
        is_yes = (text == str(yes)).fillna(False).to_numpy(bool)
        is_no = (text == str(no)).fillna(False).to_numpy(bool)
        bad = present & ~is_yes & ~is_no
        if bad.any():
            raise _fail(column, f"values must be {yes!r} (correct) or {no!r} (wrong) as declared in "
                        "correct_values", np.flatnonzero(bad), raw)
        out[is_yes] = 1
        out[is_no] = 0
        return out
    if _frame.is_boolean(raw):
        return _frame.bool_codes(raw)
    if _frame.is_numeric(raw):
        num = _frame.to_float(raw)
        bad = present & ~np.isin(num, (0.0, 1.0))
        if bad.any():
            raise _fail(column, "numeric values must be 0 or 1; for other codings pass "
                        "correct_values=(<correct value>, <wrong value>)", np.flatnonzero(bad), raw)
        out[present] = num[present].astype(np.int8)
        return out
    text = raw.astype("string").str.lower()
    is_yes = text.isin(["true", "1"]).to_numpy(bool)
    is_no = text.isin(["false", "0"]).to_numpy(bool)
    bad = present & ~is_yes & ~is_no
    if bad.any():
        raise _fail(column, "text values must be 'true'/'false'; for other codings pass "
                    "correct_values=(<correct value>, <wrong value>)", np.flatnonzero(bad), raw)
    out[is_yes] = 1
    out[is_no] = 0
    return out


def check_correct_values(correct_values) -> None:
    """``correct_values`` is None or a pair of two different codes (compared as text, as the column is)."""
    if correct_values is None:
        return
    pair = isinstance(correct_values, (tuple, list)) and len(correct_values) == 2
    if not pair:
        raise ParameterError(f"The 'correct_values' parameter of EventLog must be a pair (<correct value>, "
                             f"<wrong value>), e.g. ('RIGHT', 'WRONG'). Got {correct_values!r} instead.")
    yes, no = correct_values
    if str(yes) == str(no):
        raise ParameterError(f"The 'correct_values' parameter of EventLog must hold two different codes; both "
                             f"are {str(yes)!r}, so no attempt could be told wrong from right. Got "
                             f"{correct_values!r} instead.")


def check_mappings(columns, actions, where: str = "EventLog") -> None:
    """``columns`` and ``actions`` are mappings (or None): a list would lose which field each column is."""
    examples = {"columns": "{'student': 'learner_id', 'time': 'timestamp'}",
                "actions": "{'hint': ['HINT_REQUEST', 'HINT_SHOWN']}"}
    for name, value in (("columns", columns), ("actions", actions)):
        if value is not None and not isinstance(value, Mapping):
            raise ParameterError(f"The {name!r} parameter of {where} must be None or a mapping, e.g. "
                                 f"{examples[name]}. Got {value!r} instead.")


def parse_duration(raw: pd.Series, column: str):
    seconds = _frame.to_float(raw)
    bad_text = ~_frame.missing_mask(raw) & np.isnan(seconds)
    if bad_text.any():
        raise _fail(column, "durations must be numbers of seconds", np.flatnonzero(bad_text), raw)
    infinite = np.isinf(seconds)
    if infinite.any():
        raise _fail(column, f"{int(infinite.sum())} durations are infinite; durations are finite seconds >= 0 "
                    "(leave unknown ones empty)", np.flatnonzero(infinite), raw)
    neg = seconds < 0
    if neg.any():
        raise _fail(column, f"{int(neg.sum())} durations are negative; durations are seconds >= 0",
                    np.flatnonzero(neg), raw)
    return seconds


def parse_extra(raw: pd.Series):
    """Return (array, kind, categories) for a column the log keeps as it is."""
    if _frame.is_boolean(raw):
        return _frame.bool_codes(raw), "bool", None
    if _frame.is_numeric(raw):
        return _frame.to_float(raw), "number", None
    if _frame.is_datetime(raw):
        ns = _frame.datetime_ns(raw).astype(np.float64)
        ns[ns == float(np.iinfo(np.int64).min)] = np.nan
        return ns / _frame.NS_PER_SECOND, "number", None
    codes, cats = _frame.factorize(raw)
    return codes, "category", cats
