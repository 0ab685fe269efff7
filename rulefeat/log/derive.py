"""Building an event log: parse, account for every row, sort once, derive fields."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .. import _frame
from ..errors import LogSchemaError
from . import parse
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
    order = _sort_order(out)
    keep = _duplicates(out, order, duplicates)
    _apply_order(out, order[keep], dropped=order[~keep])
    _derive(out, session_gap, duration_cap)
    return out


def _parse_fields(data, mapping, out: Built, time_unit, correct_values, actions) -> None:
    col = mapping.__getitem__
    codes, cats = parse.parse_student(data[col("student")], col("student"))
    out.put("student", codes, "category", cats)
    seconds, origin, kind = parse.parse_time(data[col("time")], col("time"), time_unit)
    out.put("time", seconds, "number")
    out.time_origin, out.time_kind = origin, kind
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


def _sort_order(out: Built) -> np.ndarray:
    student, time = out.fields["student"], out.fields["time"]
    # Student codes are dense: below 2**15 students numpy's stable sort of int16 is a radix sort.
    small = student.astype(np.int16) if len(out.categories["student"]) < 2**15 else student
    by_student = np.argsort(small, kind="stable")
    t = time[by_student]
    same = student[by_student][1:] == student[by_student][:-1]
    back = np.flatnonzero(same & (t[1:] < t[:-1])) + 1
    out.flag("rows out of time order within a student", np.sort(by_student[back]), "re-sorted")
    if not len(back):
        order = by_student
    else:  # stable by time, then stable by student: lexsort's order
        by_time = np.argsort(time, kind="stable")
        order = by_time[np.argsort(small[by_time], kind="stable")]
    s, t = student[order], time[order]
    tie = np.flatnonzero((s[1:] == s[:-1]) & (t[1:] == t[:-1])) + 1
    out.flag("events sharing a student and a time with the previous event (ties)", np.sort(order[tie]),
             "kept in input order")
    return order


def _duplicates(out: Built, order: np.ndarray, policy: str) -> np.ndarray:
    """Mask over ``order`` of the events kept; exact duplicates can only hide inside time ties."""
    s, t = out.fields["student"][order], out.fields["time"][order]
    tie = np.zeros(len(order), dtype=bool)
    same = (s[1:] == s[:-1]) & (t[1:] == t[:-1])
    tie[1:] |= same
    tie[:-1] |= same
    keep = np.ones(len(order), dtype=bool)
    if not tie.any():
        return keep
    pos = np.flatnonzero(tie)
    block = pd.DataFrame({k: v[order[pos]] for k, v in out.fields.items()})
    dup = block.duplicated(keep="first").to_numpy()
    rows = np.sort(order[pos[dup]])
    out.flag("exact duplicate events", rows, "dropped" if policy == "drop" else "kept")
    if policy == "drop":
        keep[pos[dup]] = False
    return keep


def _apply_order(out: Built, order: np.ndarray, dropped: np.ndarray) -> None:
    for name in list(out.fields):
        out.fields[name] = np.ascontiguousarray(out.fields[name][order])
    out.row = order.astype(np.int64)
    out.dropped = np.sort(dropped).astype(np.int64)


def _derive(out: Built, session_gap: float, duration_cap: float) -> None:
    f = out.fields
    student, time = f["student"], f["time"]
    n = len(student)
    new_student = np.ones(n, dtype=bool)
    new_student[1:] = student[1:] != student[:-1]
    step_back = np.full(n, np.nan)
    step_back[1:] = time[1:] - time[:-1]
    if "session" not in f:
        starts = new_student | (step_back > session_gap)
        sess = (np.cumsum(starts) - 1).astype(np.int32)
        out.put("session", sess, "category", pd.RangeIndex(int(sess[-1]) + 1 if n else 0))
        same_session = ~starts
    else:
        sess = f["session"]
        same_session = ~new_student
        same_session[1:] &= sess[1:] == sess[:-1]
    gap = np.where(same_session, step_back, np.nan)
    out.put("gap", gap, "number")
    if "duration" not in f:
        nxt = np.full(n, np.nan)
        nxt[:-1] = np.where(same_session[1:], time[1:] - time[:-1], np.nan)
        over = np.flatnonzero(nxt > duration_cap)
        out.flag(f"derived durations longer than duration_cap={duration_cap:g} s", np.sort(out.row[over]),
                 "capped")
        nxt[over] = duration_cap
        out.put("duration", nxt, "number")
    for scope in ("step", "problem"):
        if scope in f:
            out.put(f"{scope}_position", positions(group_ids(f, scope)), "number")


def derive_sorted(fields: dict, kinds: dict, *, session_gap: float, duration_cap: float) -> dict:
    """The derived fields (gap, session, duration, positions) of events already sorted by student and time.

    The same derivation as a log build, for events buffered elsewhere (the live scorer's per-student
    buffers, contract 9); returns the fields with the derived ones added.
    """
    out = Built(fields=dict(fields), kinds=dict(kinds), row=np.arange(len(fields["student"]), dtype=np.int64))
    _derive(out, session_gap, duration_cap)
    return out.fields


def positions(groups: np.ndarray) -> np.ndarray:
    """1-based order of each event within its group (events already in time order); NaN when ungrouped."""
    order = np.argsort(groups, kind="stable")
    g = groups[order]
    start = np.ones(len(g), dtype=bool)
    start[1:] = g[1:] != g[:-1]
    first = np.maximum.accumulate(np.where(start, np.arange(len(g)), 0))
    pos = np.empty(len(g), dtype=np.float64)
    pos[order] = np.arange(len(g)) - first + 1
    pos[groups < 0] = np.nan
    return pos


def group_ids(fields: dict, scope: str) -> np.ndarray:
    student = fields["student"].astype(np.int64)
    if scope == "student":
        return student
    if scope not in fields:
        raise LogSchemaError(f"EventLog: the log has no {scope!r} field, so nothing can be grouped by "
                             f"{scope}. Map a column to {scope!r} when building the log.")
    codes = fields[scope].astype(np.int64)
    key = student * (int(codes.max(initial=-1)) + 2) + codes + 1
    ids, _ = _frame.factorize_values(key, sort=False)
    ids = ids.astype(np.int64)
    ids[codes < 0] = -1
    return ids


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
