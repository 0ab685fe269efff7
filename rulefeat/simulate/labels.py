"""Observation windows, their coded labels, and pre/post test scores (helper of rulefeat.simulate)."""

from __future__ import annotations

import numpy as np

from .plan import (
    BEHAVIOURS,
    HINT_SKIM,
    IDLE,
    RAPID_GUESS,
    Plan,
    Platform,
    Population,
    rank_within,
)
from .steps import Actions

TEST_ITEMS = 40  # items on the pre- and post-test
TEST_FLOOR = 0.15  # chance of an item right with nothing known
TEST_KNOWN_GAIN = 0.75  # extra chance with every practised skill known
TEST_PENALTY = {RAPID_GUESS: 0.6, HINT_SKIM: 0.4}  # per share of steps with an episode
TEST_STUDENT_SD = 0.05  # day-to-day form of the student on the test
TEST_ABILITY = 0.05  # a stable test-taking edge of able students, on both tests


def pick_windows(
    rng: np.random.Generator, plan: Plan, window_steps: int, windows_per_student: int
) -> np.ndarray:
    """First visit of each window: whole blocks of ``window_steps`` visits inside one session.

    Sessions are cut into consecutive blocks (a short tail is dropped); each student
    gets up to ``windows_per_student`` of their blocks, drawn without replacement, so
    windows never overlap.  The choice ignores what happened in the blocks.
    """
    rank = rank_within(plan.session)
    size = np.bincount(plan.session)[plan.session]
    is_first = (rank % window_steps == 0) & (rank // window_steps < size // window_steps)
    first = np.flatnonzero(is_first)
    student = plan.student[first]
    order = np.lexsort((rng.random(first.size), student))
    chosen = order[rank_within(student[order]) < windows_per_student]
    return first[np.sort(chosen)]


def _per_visit_counts(actions: Actions, n_visits: int) -> np.ndarray:
    """Events of each behaviour per visit (idle excluded: it is a per-visit flag)."""
    counts = np.zeros((n_visits, len(BEHAVIOURS)), dtype=np.int64)
    marked = actions.behaviour >= 0
    np.add.at(counts, (actions.visit[marked], actions.behaviour[marked]), 1)
    return counts


def window_contents(
    actions: Actions, plan: Plan, first: np.ndarray, window_steps: int
) -> tuple[np.ndarray, np.ndarray]:
    """Per window: events of each behaviour, and visits holding an episode of it."""
    counts = _per_visit_counts(actions, plan.student.size)
    counts[:, IDLE] = plan.flags[:, IDLE]  # an idle episode leaves exactly one idle event
    zero = np.zeros((1, len(BEHAVIOURS)), dtype=np.int64)
    c_events = np.vstack([zero, np.cumsum(counts, axis=0)])
    c_episodes = np.vstack([zero, np.cumsum(plan.flags, axis=0)])
    last = first + window_steps
    return c_events[last] - c_events[first], c_episodes[last] - c_episodes[first]


def expit(x: np.ndarray) -> np.ndarray:
    return 0.5 * (1.0 + np.tanh(0.5 * x))


def school_intercepts(eta: np.ndarray, school: np.ndarray, n_schools: int, rate: float) -> np.ndarray:
    """Per-school intercept making the mean P(true label) of that school's windows equal ``rate``.

    Bisection on all schools at once; the mean is increasing in the intercept.
    """
    low = np.full(n_schools, -40.0)
    high = np.full(n_schools, 40.0)
    n = np.bincount(school, minlength=n_schools)
    for _ in range(80):
        mid = 0.5 * (low + high)
        mean = np.bincount(school, weights=expit(mid[school] + eta), minlength=n_schools)
        too_high = mean > rate * n
        high = np.where(too_high, mid, high)
        low = np.where(too_high, low, mid)
    mid = 0.5 * (low + high)
    return np.where(n > 0, mid, np.log(rate / (1.0 - rate)))


def code_labels(
    rng: np.random.Generator,
    p_true: np.ndarray,
    coder_error: tuple[float, float],
) -> tuple[np.ndarray, np.ndarray]:
    """Draw true labels, then the coder's: 0 read as 1 w.p. error[0], 1 read as 0 w.p. error[1]."""
    u_true, u_coder = rng.random((2, p_true.size))
    true = u_true < p_true
    flip = u_coder < np.where(true, coder_error[1], coder_error[0])
    return true.astype(np.int64), (true ^ flip).astype(np.int64)


def draw_test_scores(
    rng: np.random.Generator, actions: Actions, platform: Platform, plan: Plan, population: Population
) -> dict[str, np.ndarray]:
    """Pre/post test: proportion right of ``TEST_ITEMS`` items, driven by known practised skills."""
    n_students, n_skills = actions.initial_known.shape
    practised = np.zeros((n_students, n_skills), dtype=bool)
    practised[plan.student, platform.step_skill[plan.step]] = True
    n_practised = practised.sum(axis=1)
    known_start = (actions.initial_known & practised).sum(axis=1) / n_practised
    known_end = (actions.final_known & practised).sum(axis=1) / n_practised
    n_visits = np.bincount(plan.student, minlength=n_students)
    penalty = np.zeros(n_students)
    for b, weight in TEST_PENALTY.items():
        penalty += weight * np.bincount(plan.student, weights=plan.flags[:, b], minlength=n_students) / n_visits
    form = rng.normal(0.0, TEST_STUDENT_SD, (2, n_students)) + TEST_ABILITY * population.ability
    p_pre = np.clip(TEST_FLOOR + TEST_KNOWN_GAIN * known_start + form[0], 0.02, 0.98)
    p_post = np.clip(TEST_FLOOR + TEST_KNOWN_GAIN * known_end - penalty + form[1], 0.02, 0.98)
    right = rng.binomial(TEST_ITEMS, np.stack([p_pre, p_post]))
    return {
        "pretest": right[0] / TEST_ITEMS, "posttest": right[1] / TEST_ITEMS,
        "known_start": known_start, "known_end": known_end, "n_steps": n_visits,
    }
