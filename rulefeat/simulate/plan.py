"""The fictional platform, its schools and students, and each student's plan of work.

Private helper of :mod:`rulefeat.simulate`: it draws everything that is fixed
before the first action is simulated (skill parameters, problems and steps,
school profiles, student propensities, the ordered list of step visits, the
sessions, and which behaviour episodes switch on at each visit).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

BEHAVIOURS = ("rapid_guess", "hint_skim", "help_avoid", "idle")
RAPID_GUESS, HINT_SKIM, HELP_AVOID, IDLE = range(4)

# Share of step visits with an episode, averaged over schools (before the ``behaviours`` scale).
BASE_RATES = np.array([0.06, 0.05, 0.05, 0.04])
# Beta concentration of student propensities: a few students carry most episodes.
PROPENSITY_CONCENTRATION = 8.0
MAX_PROPENSITY_MEAN = 0.6

SCHOOLS = (
    "Bruvelk School",
    "Tazquorin School",
    "Ovandrel School",
    "Czelvorin School",
    "Lyskavend School",
    "Sorvellaq School",
    "Fyzmorrel School",
    "Gvarnisko School",
)

SKILLS = (
    "fraction-compare",
    "fraction-add-unlike",
    "decimal-place-value",
    "ratio-tables",
    "percent-of-quantity",
    "integer-ops",
    "linear-eq-1step",
    "linear-eq-2step",
    "area-composite",
    "angle-sum",
    "exponent-rules",
    "mean-median",
    "proportion-solve",
    "coordinate-plot",
    "slope-from-points",
    "inequality-1var",
)


@dataclass(frozen=True, eq=False)
class Platform:
    """Content of the platform: skills with BKT parameters, problems, steps."""

    skill_names: list[str]
    p_init: np.ndarray
    p_learn: np.ndarray
    p_guess: np.ndarray
    p_slip: np.ndarray
    difficulty: np.ndarray
    problem_skill: np.ndarray
    problem_first_step: np.ndarray
    problem_n_steps: np.ndarray
    step_problem: np.ndarray
    step_index: np.ndarray
    step_skill: np.ndarray
    step_levels: np.ndarray
    step_difficulty: np.ndarray


@dataclass(frozen=True, eq=False)
class Population:
    """Schools and students: pace and behaviour propensities."""

    school_names: list[str]
    school_pace: np.ndarray
    school_rates: np.ndarray
    student_school: np.ndarray
    student_pace: np.ndarray
    propensity: np.ndarray
    ability: np.ndarray


@dataclass(frozen=True, eq=False)
class Plan:
    """Ordered step visits (student-major, curriculum order) and their episode switches."""

    student: np.ndarray
    step: np.ndarray
    seq_pos: np.ndarray
    session: np.ndarray
    session_first: np.ndarray
    flags: np.ndarray
    n_avoid: np.ndarray
    n_burst: np.ndarray
    session_student: np.ndarray
    session_rank: np.ndarray


def skill_names(n_skills: int) -> list[str]:
    """Made-up maths skill names; past the list, names repeat with a numeric suffix."""
    base = len(SKILLS)
    return [SKILLS[k % base] + ("" if k < base else f"-{k // base + 1}") for k in range(n_skills)]


def draw_platform(
    rng: np.random.Generator,
    n_skills: int,
    problems_per_skill: int,
    steps_per_problem: tuple[int, int],
    hint_levels: tuple[int, int],
) -> Platform:
    """Draw skills (BKT parameters, difficulty) and the problems and steps practising them."""
    difficulty = rng.uniform(-1.0, 1.0, n_skills)
    # Harder skills are less often known on arrival.
    p_init = np.clip(0.3 - 0.12 * difficulty + rng.uniform(-0.08, 0.08, n_skills), 0.05, 0.6)
    p_learn = rng.uniform(0.02, 0.12, n_skills)
    p_guess = rng.uniform(0.1, 0.3, n_skills)
    p_slip = rng.uniform(0.03, 0.1, n_skills)
    n_problems = n_skills * problems_per_skill
    problem_skill = np.repeat(np.arange(n_skills), problems_per_skill)
    problem_n_steps = rng.integers(steps_per_problem[0], steps_per_problem[1] + 1, n_problems)
    problem_first_step = np.concatenate([[0], np.cumsum(problem_n_steps)[:-1]])
    step_problem = np.repeat(np.arange(n_problems), problem_n_steps)
    n_steps = step_problem.size
    step_index = np.arange(n_steps) - problem_first_step[step_problem]
    step_skill = problem_skill[step_problem]
    step_levels = rng.integers(hint_levels[0], hint_levels[1] + 1, n_steps)
    step_difficulty = difficulty[step_skill] + rng.normal(0.0, 0.3, n_steps)
    return Platform(
        skill_names(n_skills), p_init, p_learn, p_guess, p_slip, difficulty,
        problem_skill, problem_first_step, problem_n_steps,
        step_problem, step_index, step_skill, step_levels, step_difficulty,
    )


def _school_factors(rng: np.random.Generator, n_schools: int, spread: float) -> np.ndarray:
    """Multipliers exp(spread * u) with u evenly spaced on [-1, 1] in random order, mean 1.

    Even spacing guarantees the schools differ by the chosen spread whatever the seed.
    """
    u = rng.permutation(np.linspace(-1.0, 1.0, n_schools)) if n_schools > 1 else np.zeros(1)
    factor = np.exp(spread * u)
    return factor / factor.mean()


def draw_population(
    rng: np.random.Generator,
    n_students: int,
    n_schools: int,
    rates: np.ndarray,
    school_spread: float,
) -> Population:
    """Draw school profiles, then students: school, pace and one propensity per behaviour."""
    school_pace = _school_factors(rng, n_schools, 0.5 * school_spread)
    school_rates = np.column_stack(
        [rates[b] * _school_factors(rng, n_schools, school_spread) for b in range(len(BEHAVIOURS))]
    )
    student_school = rng.integers(0, n_schools, n_students)
    student_pace = school_pace[student_school] * rng.lognormal(0.0, 0.25, n_students)
    ability = rng.standard_normal(n_students)
    mean = school_rates[student_school]
    kappa = PROPENSITY_CONCENTRATION
    # One stream per behaviour (Beta sampling uses a variable number of draws), and a draw
    # even where the mean is 0: scaling one behaviour leaves the others' propensities as they were.
    safe = np.where(mean > 0, mean, 0.5)
    propensity = np.column_stack([
        stream.beta(safe[:, b] * kappa, (1.0 - safe[:, b]) * kappa)
        for b, stream in enumerate(rng.spawn(len(BEHAVIOURS)))
    ]) * (mean > 0)
    return Population(
        list(SCHOOLS[:n_schools]), school_pace, school_rates, student_school, student_pace, propensity, ability
    )


def _visits(rng: np.random.Generator, platform: Platform, n_students: int, coverage: float):
    """Each student works a random share of the problems, skill by skill, in curriculum order."""
    n_problems = platform.problem_skill.size
    worked = rng.random((n_students, n_problems)) < coverage
    empty = ~worked.any(axis=1)
    worked[np.flatnonzero(empty), rng.integers(0, n_problems, empty.sum())] = True
    stu, prob = np.nonzero(worked)
    n_steps = platform.problem_n_steps[prob]
    student = np.repeat(stu, n_steps)
    first = np.repeat(platform.problem_first_step[prob], n_steps)
    starts = np.concatenate([[0], np.cumsum(n_steps)[:-1]])
    step = first + np.arange(student.size) - np.repeat(starts, n_steps)
    return student, step


def rank_within(keys: np.ndarray) -> np.ndarray:
    """Position of each row within its run of equal consecutive keys."""
    new = np.ones(keys.size, dtype=bool)
    new[1:] = keys[1:] != keys[:-1]
    starts = np.flatnonzero(new)
    return np.arange(keys.size) - np.repeat(starts, np.diff(np.append(starts, keys.size)))


def _sessions(rng: np.random.Generator, student: np.ndarray, n_students: int, sessions: tuple[int, int]):
    """Cut each student's visits into contiguous sessions of random (Dirichlet) shares."""
    per_student = np.bincount(student, minlength=n_students)
    n_sess = np.minimum(rng.integers(sessions[0], sessions[1] + 1, n_students), per_student)
    n_sess = np.maximum(n_sess, 1)
    width = sessions[1]
    share = rng.gamma(6.0, size=(n_students, width)) * (np.arange(width) < n_sess[:, None])
    cum = np.cumsum(share, axis=1) / share.sum(axis=1, keepdims=True)
    # Every session gets one visit, the rest are shared out: boundaries strictly increase.
    spare = (per_student - n_sess)[:, None]
    bounds = np.arange(1, width + 1) + np.rint(cum * spare).astype(np.int64)
    bounds = np.where(np.arange(width) < n_sess[:, None], bounds, np.iinfo(np.int64).max)
    rank = rank_within(student)
    local = (rank[:, None] >= bounds[student]).sum(axis=1)
    session_offset = np.concatenate([[0], np.cumsum(n_sess)[:-1]])
    session = session_offset[student] + local
    session_student = np.repeat(np.arange(n_students), n_sess)
    session_rank = np.arange(session_student.size) - np.repeat(session_offset, n_sess)
    return session, session_student, session_rank


def draw_plan(
    rng: np.random.Generator,
    platform: Platform,
    population: Population,
    coverage: float,
    sessions: tuple[int, int],
) -> Plan:
    """Lay out every student's step visits, sessions and behaviour episodes."""
    n_students = population.student_school.size
    student, step = _visits(rng, platform, n_students, coverage)
    skill = platform.step_skill[step]
    seq_pos = rank_within(student * len(platform.skill_names) + skill)
    session, session_student, session_rank = _sessions(rng, student, n_students, sessions)
    session_first = np.ones(student.size, dtype=bool)
    session_first[1:] = session[1:] != session[:-1]
    flags = rng.random((student.size, len(BEHAVIOURS))) < population.propensity[student]
    # An idle pause before a session's first action would fall between sessions, unseen.
    flags[:, IDLE] &= ~session_first
    n_avoid = rng.integers(1, 4, student.size)
    n_burst = rng.integers(2, 5, student.size)
    return Plan(
        student, step, seq_pos, session, session_first, flags, n_avoid, n_burst,
        session_student, session_rank,
    )
