"""The compiled linear passes of the log build (numba, cached on disk).

``student_time_order`` is what ``np.lexsort((time, student))`` returns — events by student, then by
time, ties in input order — found without sorting the whole table: a stable counting sort on the
dense student codes, then a stable merge sort of each student's times only where they are out of
order (none at all when the input arrives sorted).  Each student's run is short, so the sorting
stays in cache even on logs of tens of millions of events.

``sessions_and_gaps`` derives, over the sorted log, whether each event continues its predecessor's
session, the session number when sessions are derived, ``gap`` and the derived ``duration`` — the
same float subtractions as the array expressions they replace, in one pass.

``group_positions`` numbers the (student, key) groups of a log already in that order, in order of
first appearance — the ids ``pandas.factorize(..., sort=False)`` gives the pair — and counts each
event's 1-based position in its group, in one pass with a table over the key's codes that is reset
at every student boundary.

``search_times`` finds time boundaries inside students: a binary search within each student's run
of the sorted log, so a units table needs no ranking of the whole log's times.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["student_time_order", "permute", "sessions_and_gaps", "group_positions", "search_times"]


@njit(cache=True, nogil=True)
def student_time_order(student, time, n_students, order, t, back, local, unsorted):
    """Fill ``order`` (the sort), ``t`` (the times in that order), ``back`` (a mask over input rows out
    of time order within their student), ``unsorted`` (per student code: were its rows out of time
    order) and, inside those students' runs, ``local`` (the position in the student's run, in input
    order, of the event at each position); return the first position of every student code and,
    last, one past the end.  :func:`permute` moves any field the same way.

    A row is out of time order when an earlier row of the same student (in input order) has a later
    time.  Outputs come allocated from numpy (huge pages for large arrays, see rules/scan.py).
    """
    n = len(student)
    start = np.zeros(n_students + 1, dtype=np.int64)
    for i in range(n):
        start[student[i] + 1] += 1
    for s in range(n_students):
        start[s + 1] += start[s]
    fill = start[:-1].copy()
    for i in range(n):
        k = fill[student[i]]
        order[k] = i
        t[k] = time[i]
        fill[student[i]] = k + 1
    back[:] = False
    longest = 0
    for s in range(n_students):
        longest = max(longest, start[s + 1] - start[s])
    t_buf = np.empty(longest, dtype=np.float64)
    i_buf = np.empty(longest, dtype=np.int64)
    rows = np.empty(longest, dtype=np.int64)
    for s in range(n_students):
        a, b = start[s], start[s + 1]
        unsorted[s] = False
        for k in range(a + 1, b):
            if t[k] < t[k - 1]:
                back[order[k]] = True
                unsorted[s] = True
        if unsorted[s]:
            for k in range(a, b):
                local[k] = k - a
                rows[k - a] = order[k]
            _stable_sort(t[a:b], local[a:b], t_buf, i_buf)
            for k in range(a, b):
                order[k] = rows[local[k]]
    return start


@njit(cache=True, nogil=True)
def permute(values, student, start, local, unsorted, out):
    """``out`` = ``values`` in the order :func:`student_time_order` found, without a random gather.

    First a counting-sort scatter by student (rows read in input order; each student's write
    position only moves forward, so the writes stay in cache), then, for students whose rows
    were out of time order, a permutation inside the student's short run.
    """
    fill = start[:-1].copy()
    for i in range(len(values)):
        out[fill[student[i]]] = values[i]
        fill[student[i]] += 1
    longest = 0
    for s in range(len(unsorted)):
        if unsorted[s]:
            longest = max(longest, start[s + 1] - start[s])
    run = np.empty(longest, dtype=out.dtype)
    for s in range(len(unsorted)):
        if unsorted[s]:
            a, b = start[s], start[s + 1]
            run[:b - a] = out[a:b]
            for k in range(a, b):
                out[k] = run[local[k]]
    return out


@njit(cache=True, nogil=True)
def _stable_sort(keys, items, key_buf, item_buf):
    """Sort ``keys`` in place, stably, moving ``items`` alongside: insertion-sorted runs, then merges.

    Hand-written rather than ``np.argsort(kind="mergesort")`` so that the on-disk cache holds the
    whole compiled pass (numba's own sort is compiled again in every new process).
    """
    n = len(keys)
    run = 32
    for lo in range(0, n, run):
        hi = min(lo + run, n)
        for k in range(lo + 1, hi):
            key, item = keys[k], items[k]
            j = k - 1
            while j >= lo and keys[j] > key:
                keys[j + 1], items[j + 1] = keys[j], items[j]
                j -= 1
            keys[j + 1], items[j + 1] = key, item
    width = run
    while width < n:
        for lo in range(0, n, 2 * width):
            mid, hi = min(lo + width, n), min(lo + 2 * width, n)
            i, j = lo, mid
            for k in range(lo, hi):
                if j < hi and (i >= mid or keys[j] < keys[i]):  # equal keys: the left run first
                    key_buf[k], item_buf[k] = keys[j], items[j]
                    j += 1
                else:
                    key_buf[k], item_buf[k] = keys[i], items[i]
                    i += 1
        keys[:] = key_buf[:n]
        items[:] = item_buf[:n]
        width *= 2


@njit(cache=True, nogil=True)
def sessions_and_gaps(student, time, session, session_gap, number, gap, following):
    """Fill the derived session numbers, ``gap`` and the time to the next event in the session.

    ``session`` holds given session codes, or is empty to derive sessions: a new one starts at each
    student's first event and after a pause longer than ``session_gap``.  The time to the next event
    is NaN at a session's last event (the caller caps it into the derived ``duration``); ``number``
    is only written when sessions are derived.
    """
    n = len(student)
    derive = len(session) == 0
    gap[:] = np.nan
    following[:] = np.nan
    current = -1
    for i in range(n):
        same = False
        if i > 0 and student[i] == student[i - 1]:
            step = time[i] - time[i - 1]
            same = not step > session_gap if derive else session[i] == session[i - 1]
        if same:
            gap[i] = time[i] - time[i - 1]
            following[i - 1] = gap[i]
        if derive:
            current += 0 if same else 1
            number[i] = current


@njit(cache=True, nogil=True)
def group_positions(student, codes, n_codes, ids, pos):
    """Fill the group id and the 1-based position in the group of every event; -1 and NaN where the
    code is missing.

    ``student`` must hold each student's events in one contiguous run (the log's order).  Missing
    codes (-1) take an id of their own at their first appearance, as the factorized pair does.
    """
    n = len(codes)
    slot = np.full(n_codes + 1, -1, dtype=np.int64)
    count = np.zeros(n_codes + 1, dtype=np.int64)
    touched = np.empty(n_codes + 1, dtype=np.int64)
    n_touched = 0
    next_id = 0
    for i in range(n):
        if i > 0 and student[i] != student[i - 1]:
            for j in range(n_touched):
                slot[touched[j]] = -1
            n_touched = 0
        c = codes[i] + 1
        if slot[c] < 0:
            slot[c] = next_id
            next_id += 1
            count[c] = 0
            touched[n_touched] = c
            n_touched += 1
        count[c] += 1
        if c == 0:
            ids[i] = -1
            pos[i] = np.nan
        else:
            ids[i] = slot[c]
            pos[i] = count[c]


@njit(cache=True, nogil=True)
def search_times(time, first, last, students, times, right, out):
    """Position of the first event of each ``students[q]`` with time >= ``times[q]`` (> with ``right``).

    ``first``/``last`` bound each student code's run of the sorted ``time``; a NaN time sorts after
    every time (as in ``np.searchsorted``); a student code below 0 gives 0.
    """
    for q in range(len(students)):
        s = students[q]
        if s < 0:
            out[q] = 0
            continue
        lo, hi = first[s], last[s]
        t = times[q]
        if not t == t:
            out[q] = hi
            continue
        while lo < hi:
            mid = (lo + hi) // 2
            if time[mid] < t or (right and time[mid] == t):
                lo = mid + 1
            else:
                hi = mid
        out[q] = lo
    return out
