"""Grouped kernels over events: one cached per-scope permutation, then one linear pass per call.

Each scope is turned once per log into a permutation that lists the events
group by group (a stable counting sort of the group ids, O(events)); inside it
a group is a contiguous run in time order.  "The n-th previous event of my
group", "how many earlier events of my group", the current run and the
trailing window are then single passes of :mod:`rulefeat.rules.scan` that
write straight into log order.  Events whose scope key is missing belong to
no group: these kernels give them a missing result.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import scan
from .operators import FALSE, TRUE, UNKNOWN

__all__ = ["Groups", "groups_for", "shift", "count_before", "count_recent_actions", "count_recent_seconds",
           "streak", "first"]


@dataclass(frozen=True)
class Groups:
    """The events of a log listed group by group."""

    order: np.ndarray  # k-th event of the permutation -> its position in the log
    group: np.ndarray  # group id of the k-th event (-1: no group; those come first)


def build_groups(group_ids: np.ndarray) -> Groups:
    ids = np.ascontiguousarray(group_ids, dtype=np.int64)
    n_groups = int(ids.max(initial=-1)) + 1
    order = scan.group_order(ids, n_groups)
    out = Groups(order=order, group=ids[order])
    for arr in vars(out).values():
        arr.flags.writeable = False
    return out


def groups_for(log, scope: str) -> Groups:
    """The grouping of ``log`` by ``scope``, computed once per log and shared by every rule."""
    return log.cached(("rulefeat.rules", "groups", scope), lambda: build_groups(log.group_ids(scope)))


def _flat(values: np.ndarray) -> np.ndarray:
    # Constants arrive broadcast (stride 0); one contiguous layout keeps one compiled variant per dtype.
    return np.ascontiguousarray(values)


def _events(g: Groups, dtype) -> np.ndarray:
    # Outputs are allocated here, by numpy (huge pages on large arrays), not inside the compiled pass.
    return np.empty(len(g.order), dtype=dtype)


def shift(values: np.ndarray, g: Groups, n: int, fill) -> np.ndarray:
    """Value at the n-th previous (n > 0) or next (n < 0) event of the group; ``fill`` past the edge."""
    values = _flat(values)
    out = np.empty(len(values), dtype=values.dtype)
    return scan.shift(values, g.order, g.group, n, values.dtype.type(fill), out)


def count_before(tri: np.ndarray, g: Groups) -> np.ndarray:
    """Earlier events of the group where ``tri`` is true (the current event excluded)."""
    return scan.count_before(_flat(tri), TRUE, g.order, g.group, _events(g, np.float64))


def count_recent_actions(tri: np.ndarray, g: Groups, n: int) -> np.ndarray:
    """Events where ``tri`` is true among the current one and the n-1 before it in the group."""
    return scan.count_recent_actions(_flat(tri), TRUE, g.order, g.group, n, _events(g, np.float64))


def count_recent_seconds(tri: np.ndarray, g: Groups, time: np.ndarray, seconds: float) -> np.ndarray:
    """Events where ``tri`` is true among the group's events with time >= t - seconds, up to the current one."""
    return scan.count_recent_seconds(_flat(tri), TRUE, g.order, g.group, time, float(seconds),
                                     _events(g, np.float64))


def streak(tri: np.ndarray, g: Groups) -> np.ndarray:
    """Length of the run of consecutive group events ending at the current one where ``tri`` is true."""
    return scan.streak(_flat(tri), TRUE, g.order, g.group, _events(g, np.float64))


def first(tri: np.ndarray | None, g: Groups) -> np.ndarray:
    """True/false/unknown: the first event of its group (where ``tri`` is true, if given)."""
    use = tri is not None
    tri = _flat(tri) if use else np.zeros(1, dtype=np.uint8)
    return scan.first(tri, TRUE, use, g.order, g.group, TRUE, FALSE, UNKNOWN, _events(g, np.uint8))
