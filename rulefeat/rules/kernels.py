"""Vectorized kernels over events grouped by scope (no loop over events or students).

Each scope is turned once per log into a stable order of events by (group id,
log position); inside that order a group is a contiguous run, so "the n-th
previous event of my group", "how many earlier events of my group" and "the
current run" become index arithmetic and cumulative sums.  Events whose scope
key is missing belong to no group: these kernels give them a missing result.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .operators import FALSE, TRUE, UNKNOWN

__all__ = ["Groups", "groups_for", "shift", "count_before", "count_recent_actions", "count_recent_seconds",
           "window_starts", "streak", "first"]


@dataclass(frozen=True)
class Groups:
    """Events sorted by (group, position); every array below is in that sorted order except ``order``."""

    order: np.ndarray  # sorted index -> event position in the log
    valid: np.ndarray  # the event has a group (its scope key is present)
    rank: np.ndarray   # 0-based position of the event within its group
    start: np.ndarray  # sorted index where the event's group starts
    size: np.ndarray   # number of events in the event's group
    group: np.ndarray  # group id

    def to_log(self, sorted_values: np.ndarray) -> np.ndarray:
        out = np.empty_like(sorted_values)
        out[self.order] = sorted_values
        return out


def build_groups(group_ids: np.ndarray) -> Groups:
    order = np.argsort(group_ids, kind="stable")
    g = group_ids[order]
    m = len(g)
    new = np.ones(m, dtype=bool)
    new[1:] = g[1:] != g[:-1]
    starts = np.flatnonzero(new)
    which = np.cumsum(new) - 1
    sizes = np.diff(np.append(starts, m))
    start = starts[which] if m else np.zeros(0, dtype=np.int64)
    size = sizes[which] if m else np.zeros(0, dtype=np.int64)
    out = Groups(order=order, valid=g >= 0, rank=np.arange(m) - start, start=start, size=size, group=g)
    for arr in vars(out).values():
        arr.flags.writeable = False
    return out


def groups_for(log, scope: str) -> Groups:
    """The sorted grouping of ``log`` by ``scope``, computed once per log and shared by every rule."""
    return log.cached(("rulefeat.rules", "groups", scope), lambda: build_groups(log.group_ids(scope)))


def shift(values: np.ndarray, g: Groups, n: int, fill) -> np.ndarray:
    """Value at the n-th previous (n > 0) or next (n < 0) event of the group; ``fill`` past the edge."""
    vs = values[g.order]
    k = np.arange(len(vs))
    ok = g.valid & ((g.rank >= n) if n > 0 else (g.rank - n < g.size))
    out = np.full(len(vs), fill, dtype=vs.dtype)
    out[ok] = vs[(k - n)[ok]]
    return g.to_log(out)


def _sorted_counts(holds: np.ndarray, g: Groups) -> tuple[np.ndarray, np.ndarray]:
    xs = holds[g.order].astype(np.int64)
    cs0 = np.zeros(len(xs) + 1, dtype=np.int64)
    np.cumsum(xs, out=cs0[1:])
    return xs, cs0


def _numbers(sorted_counts: np.ndarray, g: Groups) -> np.ndarray:
    return g.to_log(np.where(g.valid, sorted_counts.astype(np.float64), np.nan))


def count_before(holds: np.ndarray, g: Groups) -> np.ndarray:
    """Earlier events of the group where ``holds`` is true (the current event excluded)."""
    _, cs0 = _sorted_counts(holds, g)
    k = np.arange(len(g.order))
    return _numbers(cs0[k] - cs0[g.start], g)


def count_recent_actions(holds: np.ndarray, g: Groups, n: int) -> np.ndarray:
    """Events where ``holds`` among the current one and the n-1 before it in the group."""
    _, cs0 = _sorted_counts(holds, g)
    k = np.arange(len(g.order))
    lo = np.maximum(k - (n - 1), g.start)
    return _numbers(cs0[k + 1] - cs0[lo], g)


def window_starts(log, scope: str, seconds: float) -> np.ndarray:
    """For each sorted event, the sorted index where its trailing ``seconds`` window starts (cached per log)."""
    def compute() -> np.ndarray:
        g = groups_for(log, scope)
        # Times never decrease inside a group (the log is sorted by student and time), so the integer key
        # (group, rank of time) is sorted and one searchsorted finds each window's first event.
        uniq, rank = log.time_ranks()
        width = len(uniq) + 1
        key = np.where(g.valid, g.group * width + rank[g.order], -1)
        query = g.group * width + log.shifted_time_ranks(seconds)[g.order]
        return np.minimum(np.searchsorted(key, query, side="left"), np.arange(len(g.order)))
    return log.cached(("rulefeat.rules", "window", scope, float(seconds)), compute)


def count_recent_seconds(holds: np.ndarray, g: Groups, starts: np.ndarray) -> np.ndarray:
    """Events where ``holds`` among the group's events with time >= t - seconds, up to the current one.

    ``starts`` comes from :func:`window_starts` for the same scope and window.
    """
    _, cs0 = _sorted_counts(holds, g)
    k = np.arange(len(g.order))
    return _numbers(cs0[k + 1] - cs0[starts], g)


def streak(holds: np.ndarray, g: Groups) -> np.ndarray:
    """Length of the run of consecutive group events ending at the current one where ``holds``."""
    xs = holds[g.order].astype(bool)
    k = np.arange(len(xs))
    brk = np.where(xs, -1, k)
    brk = np.where(xs & (g.rank == 0), k - 1, brk)
    last = np.maximum.accumulate(brk) if len(brk) else brk
    return _numbers(k - last, g)


def first(holds: np.ndarray | None, g: Groups) -> np.ndarray:
    """True/false/unknown: the first event of its group (where ``holds``, if given)."""
    if holds is None:
        hit = g.rank == 0
    else:
        xs, cs0 = _sorted_counts(holds, g)
        k = np.arange(len(xs))
        hit = (xs == 1) & (cs0[k] - cs0[g.start] == 0)
    tri = np.where(g.valid, np.where(hit, TRUE, FALSE), UNKNOWN).astype(np.uint8)
    return g.to_log(tri)
