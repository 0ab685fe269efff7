"""Building an event log: parse, account for every row, sort once, derive fields."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .. import _frame
from ..errors import LogSchemaError
from . import parse, passes
from .parse import LogIssue


@dataclass
class Built:
    fields: dict = field(default_factory=dict)
    kinds: dict = field(default_factory=dict)
    categories: dict = field(default_factory=dict)
    row: np.ndarray | None = None
    time_origin: object = 0.0
    time_kind: str = "number"
    settings: dict = field(default_factory=dict)
    issues: list = field(default_factory=list)
    dropped: np.ndarray | None = None
    n_input: int = 0

    def put(self, name, values, kind, categories=None):
        self.fields[name] = values
        self.kinds[name] = kind
        if categories is not None:
            self.categories[name] = categories

    def flag(self, what, rows, action):
        rows = np.asarray(rows, dtype=np.int64)
        if len(rows):
            self.issues.append(LogIssue(what=what, count=len(rows), rows=rows, action=action))


def build(data: pd.DataFrame, *, columns, time_unit, correct_values, actions, session_gap,
          duration_cap, duplicates) -> Built:
    mapping = parse.resolve_columns(data, columns)
    out = Built(n_input=len(data))
    out.settings = {"time_unit": time_unit, "session_gap": session_gap, "duration_cap": duration_cap,
                    "duplicates": duplicates, "columns": dict(mapping),
                    "session_derived": "session" not in mapping, "duration_derived": "duration" not in mapping}
    _parse_fields(data, mapping, out, time_unit, correct_values, actions)
    _flag_content(out, has_correct="correct" in mapping)
    order, tie, ordered, sorting = _sort_order(out)
    keep = _duplicates(out, order, tie, duplicates)
    _apply_order(out, order, keep, ordered, sorting)
    del order, tie, ordered, sorting, keep  # the sort's work arrays go before the derived fields arrive
    _derive(out, session_gap, duration_cap)
    return out


def _parse_fields(data, mapping, out: Built, time_unit, correct_values, actions) -> None:
    col = mapping.__getitem__
    codes, cats = parse.parse_student(data[col("student")], col("student"))
    out.put("student", codes, "category", cats)
    seconds, origin, kind, zone = parse.parse_time(data[col("time")], col("time"), time_unit)
    out.put("time", seconds, "number")
    out.time_origin, out.time_kind = origin, kind
    out.settings["time_zone"] = zone
    codes, cats, unknown = parse.parse_action(data[col("action")], col("action"), actions)
    out.put("action", codes, "category", cats)
    out.flag("actions of a kind other than 'attempt' or 'hint'", np.flatnonzero(unknown), "kept")
    if "correct" in mapping:
        out.put("correct", parse.parse_correct(data[col("correct")], col("correct"), correct_values), "bool")
    else:
        out.put("correct", np.full(len(data), -1, dtype=np.int8), "bool")
    for name in (*parse.CATEGORY_FIELDS, "session"):
        if name in mapping:
            codes, cats = _frame.factorize(data[col(name)])
            out.put(name, codes, "category", cats)
    if "duration" in mapping:
        out.put("duration", parse.parse_duration(data[col("duration")], col("duration")), "number")
    used = set(mapping.values())
    for name in data.columns:
        if name in used:
            continue
        if str(name) in (*parse.DERIVED, "session", "duration", "correct"):
            raise LogSchemaError(
                f"EventLog: column {name!r} has the name of a field the log derives itself; drop the "
                "column or rename it (EventLog.to_frame(derived=False) gives a table without them)."
            )
        values, kind, cats = parse.parse_extra(data[name])
        out.put(str(name), values, kind, cats)


def _flag_content(out: Built, has_correct: bool) -> None:
    action_cats = list(out.categories["action"])
    action = out.fields["action"]
    correct = out.fields["correct"]
    is_hint = action == action_cats.index("hint")
    hint_with = np.flatnonzero(is_hint & (correct >= 0))
    if len(hint_with):
        correct[hint_with] = -1
    out.flag("hints with a 'correct' value", hint_with, "set to missing")
    if has_correct:
        is_attempt = action == action_cats.index("attempt")
        out.flag("attempts without a 'correct' value", np.flatnonzero(is_attempt & (correct < 0)),
                 "kept as missing")


def _sort_order(out: Built) -> tuple[np.ndarray, np.ndarray, dict, dict]:
    """The one sort (by student, then time, ties in input order), the positions in it tied in time, the
    sorted student and time arrays (made by the sort itself, so they need no gather) and what
    :func:`passes.permute` needs to move the other fields the same way."""
    student, time = out.fields["student"], out.fields["time"]
    n_students, n = len(out.categories["student"]), len(student)
    order, ordered_time, back = np.empty(n, dtype=np.int64), np.empty(n), np.empty(n, dtype=bool)
    local, unsorted = np.empty(n, dtype=np.int64), np.empty(n_students, dtype=bool)
    start = passes.student_time_order(student, time, n_students, order, ordered_time, back, local, unsorted)
    out.flag("rows out of time order within a student", np.flatnonzero(back), "re-sorted")
    ordered_student = np.repeat(np.arange(n_students, dtype=student.dtype), np.diff(start))
    same = (ordered_student[1:] == ordered_student[:-1]) & (ordered_time[1:] == ordered_time[:-1])
    tie = np.flatnonzero(same) + 1
    tied = np.zeros(len(order), dtype=bool)
    tied[order[tie]] = True
    out.flag("events sharing a student and a time with the previous event (ties)", np.flatnonzero(tied),
             "kept in input order")
    sorting = {"student": student, "start": start, "local": local, "unsorted": unsorted}
    return order, tie, {"student": ordered_student, "time": ordered_time}, sorting


def _duplicates(out: Built, order: np.ndarray, tie_after: np.ndarray, policy: str) -> np.ndarray:
    """Mask over ``order`` of the events kept; exact duplicates can only hide inside time ties."""
    keep = np.ones(len(order), dtype=bool)
    if not len(tie_after):
        return keep
    tie = np.zeros(len(order), dtype=bool)
    tie[tie_after] = True
    tie[tie_after - 1] = True
    pos = np.flatnonzero(tie)
    block = pd.DataFrame({k: v[order[pos]] for k, v in out.fields.items()})
    dup = block.duplicated(keep="first").to_numpy()
    rows = np.sort(order[pos[dup]])
    out.flag("exact duplicate events", rows, "dropped" if policy == "drop" else "kept")
    if policy == "drop":
        keep[pos[dup]] = False
    return keep


def _apply_order(out: Built, order: np.ndarray, keep: np.ndarray, ordered: dict, sorting: dict) -> None:
    """Put every field in log order, moved the way the sort moved the rows (no random gather)."""
    dropped = not keep.all()
    for name in list(out.fields):
        values = ordered[name] if name in ordered else _permuted(out.fields[name], order, sorting)
        out.fields[name] = np.ascontiguousarray(values[keep] if dropped else values)
    out.row = np.ascontiguousarray(order[keep] if dropped else order, dtype=np.int64)
    out.dropped = np.sort(order[~keep]).astype(np.int64)


def _permuted(values: np.ndarray, order: np.ndarray, sorting: dict) -> np.ndarray:
    if values.dtype.kind not in "biuf":
        return values[order]
    return passes.permute(np.ascontiguousarray(values), sorting["student"], sorting["start"], sorting["local"],
                          sorting["unsorted"], np.empty(len(values), dtype=values.dtype))


def _derive(out: Built, session_gap: float, duration_cap: float) -> None:
    f = out.fields
    given = f.get("session", np.zeros(0, dtype=np.int32))
    n = len(f["student"])
    sess = np.empty(0 if "session" in f else n, dtype=np.int32)
    gap, following = np.empty(n), np.empty(n)
    passes.sessions_and_gaps(f["student"], f["time"], given, session_gap, sess, gap, following)
    if "session" not in f:
        out.put("session", sess, "category", pd.RangeIndex(int(sess[-1]) + 1 if len(sess) else 0))
    out.put("gap", gap, "number")
    if "duration" not in f:
        over = np.flatnonzero(following > duration_cap)
        out.flag(f"derived durations longer than duration_cap={duration_cap:g} s", np.sort(out.row[over]),
                 "capped")
        following[over] = duration_cap
        out.put("duration", following, "number")
    for scope in ("step", "problem"):
        if scope in f:
            out.put(f"{scope}_position", _group_positions(f, scope)[1], "number")


def derive_sorted(fields: dict, kinds: dict, *, session_gap: float, duration_cap: float) -> dict:
    """The derived fields (gap, session, duration, positions) of events already sorted by student and time.

    The same derivation as a log build, for events buffered elsewhere (the live scorer's per-student
    buffers, contract 9); returns the fields with the derived ones added.
    """
    out = Built(fields=dict(fields), kinds=dict(kinds), row=np.arange(len(fields["student"]), dtype=np.int64))
    _derive(out, session_gap, duration_cap)
    return out.fields


def group_ids(fields: dict, scope: str) -> np.ndarray:
    """Ids of the (student, scope) groups in order of first appearance; -1 where the scope key is missing."""
    if scope == "student":
        return fields["student"].astype(np.int64)
    if scope not in fields:
        raise LogSchemaError(f"EventLog: the log has no {scope!r} field, so nothing can be grouped by "
                             f"{scope}. Map a column to {scope!r} when building the log.")
    return _group_positions(fields, scope)[0]


def _group_positions(fields: dict, scope: str) -> tuple[np.ndarray, np.ndarray]:
    # One pass over the log's order: each student's events are one contiguous run.
    codes = np.ascontiguousarray(fields[scope], dtype=np.int32)
    ids, pos = np.empty(len(codes), dtype=np.int64), np.empty(len(codes), dtype=np.float64)
    passes.group_positions(fields["student"], codes, int(codes.max(initial=-1)) + 1, ids, pos)
    return ids, pos


def bounds(student: np.ndarray, n_codes: int) -> tuple[np.ndarray, np.ndarray]:
    codes = np.arange(n_codes)
    first = np.searchsorted(student, codes, side="left")
    last = np.searchsorted(student, codes, side="right")
    for a in (first, last):
        a.flags.writeable = False
    return first, last


def ranges_to_index(starts: np.ndarray, ends: np.ndarray) -> np.ndarray:
    """Concatenate ``arange(s, e)`` for every pair, vectorized."""
    starts = np.asarray(starts, dtype=np.int64)
    lengths = np.maximum(np.asarray(ends, dtype=np.int64) - starts, 0)
    total = int(lengths.sum())
    if total == 0:
        return np.zeros(0, dtype=np.int64)
    offsets = np.cumsum(lengths) - lengths
    return np.arange(total, dtype=np.int64) - np.repeat(offsets - starts, lengths)
