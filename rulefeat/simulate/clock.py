"""Durations and time stamps of the simulated actions (private helper of rulefeat.simulate).

A time stamp marks the moment an action was submitted; its duration is the time
the student spent on it, that is the time since their previous action in the
session (or since the session began).  Durations are whole milliseconds, so
within a session ``time[i] - time[i - 1] == duration[i]`` holds exactly.
"""

from __future__ import annotations

import numpy as np

from .plan import IDLE, Plan, Platform, Population
from .steps import TIME_ATTEMPT, TIME_FAST_ATTEMPT, TIME_HINT, Actions

LOG_START = np.datetime64("2031-02-03T00:00:00", "ns")  # a Monday in the fictional school year
MEDIAN_SECONDS = np.array([14.0, 8.0, 1.0, 1.3])  # by timing class: attempt, hint, fast hint, fast attempt
SIGMA = np.array([0.5, 0.5, 0.35, 0.35])  # log-normal spread by timing class
MAX_SECONDS = np.array([240.0, 240.0, 2.5, 2.5])
MIN_SECONDS = 0.3
KNOWN_FACTOR = 0.7  # attempts on a known skill are quicker
AFTER_HINT_FACTOR = 1.3  # an action right after a hint includes reading that hint
NEW_PROBLEM_FACTOR = 1.5  # the first action of a problem includes reading the problem
DIFFICULTY_SLOPE = 0.35  # log-duration per unit of step difficulty
IDLE_SECONDS = (120.0, 600.0)  # idle pause added before the action
# Share of first attempts on a known skill answered at a glance, as fast as a rapid guess: fluent work looks
# quick too, so a fast attempt alone does not reveal guessing (its context does).
FLUENT_SHARE = 0.5
SESSION_REST_MS = 3_600_000  # at least an hour between a student's sessions
MS = 1_000_000  # nanoseconds in a millisecond


def event_order(actions: Actions) -> np.ndarray:
    """Permutation putting actions in time order: visits in plan order, actions in step order."""
    offset = np.concatenate([[0], np.cumsum(actions.n_actions)[:-1]])
    perm = np.empty(actions.visit.size, dtype=np.int64)
    perm[offset[actions.visit] + actions.index] = np.arange(actions.visit.size)
    return perm


def durations_ms(
    rng: np.random.Generator,
    ev: dict[str, np.ndarray],
    platform: Platform,
    plan: Plan,
    population: Population,
) -> np.ndarray:
    """Draw every action's duration (in ms) from its timing class, pace and difficulty."""
    visit = ev["visit"]
    timing = ev["timing"]
    n = visit.size
    step = plan.step[visit]
    noise = rng.standard_normal(n)
    pause = rng.uniform(*IDLE_SECONDS, size=plan.student.size)
    fluent = (timing == TIME_ATTEMPT) & ev["known"] & (ev["index"] == 0) & (rng.random(n) < FLUENT_SHARE)
    timing = np.where(fluent, TIME_FAST_ATTEMPT, timing)
    seconds = MEDIAN_SECONDS[timing] * np.exp(SIGMA[timing] * noise)
    ordinary = (timing == TIME_ATTEMPT) | (timing == TIME_HINT)
    factor = population.student_pace[plan.student[visit]] * np.exp(
        DIFFICULTY_SLOPE * platform.step_difficulty[step]
    )
    factor = factor * np.where((timing == TIME_ATTEMPT) & ev["known"], KNOWN_FACTOR, 1.0)
    factor = factor * np.where(ev["after_hint"], AFTER_HINT_FACTOR, 1.0)
    first = ev["index"] == 0
    factor = factor * np.where(first & (platform.step_index[step] == 0), NEW_PROBLEM_FACTOR, 1.0)
    seconds = np.where(ordinary, seconds * factor, seconds)
    seconds = np.clip(seconds, MIN_SECONDS, MAX_SECONDS[timing])
    seconds = seconds + np.where(first & plan.flags[visit, IDLE], pause[visit], 0.0)
    return np.rint(seconds * 1000.0).astype(np.int64)


def _session_starts(
    rng: np.random.Generator, plan: Plan, population: Population, length_ms: np.ndarray
) -> np.ndarray:
    """Sessions fall on later school days, in the school's class period, never overlapping."""
    n_students = population.student_school.size
    width = int(plan.session_rank.max()) + 1
    day = np.cumsum(rng.integers(1, 4, (n_students, width)), axis=1) - 1
    school = population.student_school[:, None]
    minute = 8 * 60 + 95 * (school % 4) + rng.uniform(0.0, 40.0, (n_students, width))
    planned = (day * 1440.0 + minute) * 60_000.0
    grid_start = np.rint(planned).astype(np.int64)
    grid_len = np.zeros((n_students, width), dtype=np.int64)
    grid_len[plan.session_student, plan.session_rank] = length_ms
    for j in range(1, width):
        earliest = grid_start[:, j - 1] + grid_len[:, j - 1] + SESSION_REST_MS
        grid_start[:, j] = np.maximum(grid_start[:, j], earliest)
    return grid_start[plan.session_student, plan.session_rank]


def event_times(
    rng: np.random.Generator, dur_ms: np.ndarray, session: np.ndarray, plan: Plan, population: Population
) -> np.ndarray:
    """Time stamps (datetime64[ns]) as cumulative durations from each session's start."""
    n_sessions = plan.session_student.size
    length = np.bincount(session, weights=dur_ms, minlength=n_sessions).astype(np.int64)
    start = _session_starts(rng, plan, population, length)
    total = np.cumsum(dur_ms)
    first = np.ones(session.size, dtype=bool)
    first[1:] = session[1:] != session[:-1]
    before = (total - dur_ms)[first]
    within = total - np.repeat(before, np.diff(np.append(np.flatnonzero(first), session.size)))
    return LOG_START + (start[session] + within) * MS
