"""Compiled linear passes over events grouped by scope (numba, compiled once and cached on disk).

Layout shared by every pass: ``order`` lists the log's events group by group
(the per-scope permutation of :func:`group_order`), each group a contiguous
run in log order — which is time order, since the log is sorted by student
and time once when it is built.  ``group[k]`` is the group id of the k-th
event of that permutation (-1: the scope key is missing; those events come
first and get a missing result).  Every pass walks the permutation once,
keeps a few running values that restart at each group's first event, and
writes its result at the event's position in the log, so no sorted copy of
the inputs or of the output is made.

Conditions arrive as the rule engine's three-valued uint8 arrays; a pass
counts an event where the value equals ``TRUE``.  Passes write into an ``out`` array the caller
allocates with numpy: numpy asks the system for huge pages on large arrays, so a fresh 10M-event
output is not paid for in millions of page faults, as memory allocated inside numba is.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["group_order", "by_key", "shift", "count_before", "count_recent_actions", "count_recent_seconds",
           "streak", "first", "quantile_order_statistics"]


@njit(cache=True, nogil=True)
def group_order(ids, n_groups):
    """Stable counting sort of events by group id (missing ids, -1, first); O(events + groups)."""
    count = np.zeros(n_groups + 2, dtype=np.int64)
    for i in range(len(ids)):
        count[ids[i] + 2] += 1
    for g in range(1, n_groups + 2):
        count[g] += count[g - 1]
    order = np.empty(len(ids), dtype=np.int64)
    for i in range(len(ids)):
        slot = ids[i] + 1
        order[count[slot]] = i
        count[slot] += 1
    return order


@njit(cache=True, nogil=True)
def by_key(per_key, keys, fallback, out):
    """``per_key[key]`` for every event, ``fallback`` where the key is missing (< 0); one pass, one output."""
    for i in range(len(keys)):
        out[i] = per_key[keys[i]] if keys[i] >= 0 else fallback
    return out


@njit(cache=True, nogil=True)
def shift(values, order, group, n, fill, out):
    """``out[event]`` = ``values`` at the n-th previous (n > 0) or next (n < 0) event of its group."""
    m = len(order)
    for k in range(m):
        src = k - n
        if group[k] >= 0 and 0 <= src < m and group[src] == group[k]:
            out[order[k]] = values[order[src]]
        else:
            out[order[k]] = fill
    return out


@njit(cache=True, nogil=True)
def count_before(tri, true, order, group, out):
    """Earlier events of the group where ``tri == true`` (float64; NaN outside any group)."""
    running = 0
    for k in range(len(order)):
        i = order[k]
        if k == 0 or group[k] != group[k - 1]:
            running = 0
        if group[k] < 0:
            out[i] = np.nan
            continue
        out[i] = running
        if tri[i] == true:
            running += 1
    return out


@njit(cache=True, nogil=True)
def count_recent_actions(tri, true, order, group, n, out):
    """Events where ``tri == true`` among the current one and the n - 1 before it in the group."""
    running = 0
    start = 0
    for k in range(len(order)):
        i = order[k]
        if k == 0 or group[k] != group[k - 1]:
            running, start = 0, k
        if group[k] < 0:
            out[i] = np.nan
            continue
        if tri[i] == true:
            running += 1
        leaving = k - n
        if leaving >= start and tri[order[leaving]] == true:
            running -= 1
        out[i] = running
    return out


@njit(cache=True, nogil=True)
def count_recent_seconds(tri, true, order, group, time, seconds, out):
    """Events where ``tri == true`` among the group's events with time >= t - seconds, up to the current one.

    Two pointers: the window's first event only moves forward inside a group, because
    times never decrease along a group's run.
    """
    running = 0
    lo = 0
    for k in range(len(order)):
        i = order[k]
        if k == 0 or group[k] != group[k - 1]:
            running, lo = 0, k
        if group[k] < 0:
            out[i] = np.nan
            continue
        if tri[i] == true:
            running += 1
        edge = time[i] - seconds
        while lo < k and time[order[lo]] < edge:
            if tri[order[lo]] == true:
                running -= 1
            lo += 1
        out[i] = running
    return out


@njit(cache=True, nogil=True)
def streak(tri, true, order, group, out):
    """Length of the run of consecutive group events ending at the current one where ``tri == true``."""
    run = 0
    for k in range(len(order)):
        i = order[k]
        if k == 0 or group[k] != group[k - 1]:
            run = 0
        if group[k] < 0:
            out[i] = np.nan
            continue
        run = run + 1 if tri[i] == true else 0
        out[i] = run
    return out


@njit(cache=True, nogil=True)
def first(tri, true, use_cond, order, group, yes, no, unknown, out):
    """``yes`` at the group's first event (its first event where ``tri == true`` with ``use_cond``)."""
    seen = False
    for k in range(len(order)):
        i = order[k]
        if k == 0 or group[k] != group[k - 1]:
            seen = False
        if group[k] < 0:
            out[i] = unknown
            continue
        hit = (not seen) and ((not use_cond) or tri[i] == true)
        out[i] = yes if hit else no
        seen = seen or hit
    return out


@njit(cache=True, nogil=True)
def _select(a, lo, hi, k):
    """Move the k-th smallest of ``a[lo:hi]`` to ``a[lo + k]`` (Hoare partition with median of three)."""
    target = lo + k
    hi -= 1
    while hi > lo:
        mid = (lo + hi) // 2
        x, y, z = a[lo], a[mid], a[hi]
        pivot = max(min(x, y), min(max(x, y), z))
        i, j = lo, hi
        while i <= j:
            while a[i] < pivot:
                i += 1
            while a[j] > pivot:
                j -= 1
            if i <= j:
                a[i], a[j] = a[j], a[i]
                i += 1
                j -= 1
        if target <= j:
            hi = j
        elif target >= i:
            lo = i
        else:
            return


@njit(cache=True, nogil=True)
def _ranks(c, q):
    # numpy.quantile's 'linear' ranks (Hyndman & Fan type 7), in the same float arithmetic.
    top = max(c - 1, 0)
    virtual = top * q
    if virtual >= top:
        return top, top
    lo = int(np.floor(virtual))
    return lo, min(lo + 1, top)


@njit(cache=True, nogil=True)
def quantile_order_statistics(values, keys, among, use_among, n_keys, q, buffer):
    """Per key and overall, the two order statistics of the q-quantile of the training values.

    Training values are those not NaN (and where ``among`` is true, with ``use_among``); the
    overall statistics (index ``n_keys``) are over all of them, a key's over those whose key is
    present (>= 0).  One pass counts, one pass buckets (a counting sort), then each bucket is
    partially ordered by selection: O(n) on average, and exact — an order statistic does not
    depend on how it was found.  ``buffer`` (float64, at least as long as ``values``) holds the
    buckets.  Returns (count, low, high) with ``n_keys + 1`` entries.
    """
    # One bucket per key and, last, one for values without a key: every value is stored once, and
    # the overall statistics are selected over the whole array after the keys' own (selection only
    # reorders values inside the range it is given, so the whole array keeps every value).
    count = np.zeros(n_keys + 2, dtype=np.int64)
    for i in range(len(values)):
        if values[i] != values[i] or (use_among and not among[i]):
            continue
        count[(keys[i] if keys[i] >= 0 else n_keys) + 1] += 1
    start = count.copy()
    for g in range(1, n_keys + 2):
        start[g] += start[g - 1]
    fill = start[:n_keys + 1].copy()
    bucket = buffer[:start[n_keys + 1]]
    for i in range(len(values)):
        if values[i] != values[i] or (use_among and not among[i]):
            continue
        g = keys[i] if keys[i] >= 0 else n_keys
        bucket[fill[g]] = values[i]
        fill[g] += 1
    count[n_keys + 1] = len(bucket)  # the overall count
    low = np.full(n_keys + 1, np.nan)
    high = np.full(n_keys + 1, np.nan)
    for g in range(n_keys + 1):
        lo, hi = (start[g], start[g + 1]) if g < n_keys else (0, len(bucket))
        if hi == lo:
            continue
        r_lo, r_hi = _ranks(hi - lo, q)
        _select(bucket, lo, hi, r_lo)
        low[g] = bucket[lo + r_lo]
        if r_hi == r_lo:
            high[g] = low[g]
        else:  # after selection everything right of the r_lo-th is >= it: the next one is their minimum
            best = bucket[lo + r_lo + 1]
            for j in range(lo + r_lo + 2, hi):
                best = min(best, bucket[j])
            high[g] = best
    return count[1:], low, high
