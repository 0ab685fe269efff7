"""Simulated tutoring logs with known truth, from the fictional "Zorbleth" platform.

:func:`tutor_logs` writes the logs of students from a few fictional schools
practising made-up maths skills, plants four behaviours whose events are marked,
lets a simulated human coder label observation windows from those behaviours,
and scores each student on a pre- and a post-test.  Everything that produced the
data comes back in :class:`SimulationTruth`, so tests can check that rules fire
where a behaviour was planted, that knowledge tracing follows the latent
knowledge, and that an evaluation keeps its false-positive rate in a null setting.

Generative process
------------------
1. **Skills.**  Skill ``k`` has a difficulty ``d ~ U(-1, 1)`` and BKT parameters
   ``p_init = clip(0.3 - 0.12 d + U(-0.08, 0.08), 0.05, 0.6)``,
   ``p_learn ~ U(0.02, 0.12)``, ``p_guess ~ U(0.1, 0.3)``, ``p_slip ~ U(0.03, 0.1)``.
2. **Problems and steps.**  ``problems_per_skill`` problems per skill, numbered
   ``p001, p002, ...`` skill by skill; a problem has ``U{steps_per_problem}`` steps
   named ``"p012-s2"`` (unique on the platform); a step has ``U{hint_levels}`` hint
   levels (the last one, the bottom-out hint, shows the answer) and difficulty
   ``d_skill + N(0, 0.3)``.
3. **Schools.**  ``n_schools`` schools.  Each school multiplies the pace and the
   rate of every behaviour by ``exp(s u) / mean``, with ``u`` evenly spaced on
   [-1, 1] in a random order drawn separately for each behaviour and the mean
   taken over schools (``s = school_spread``, halved for pace): the schools always
   differ, and the rates averaged over schools stay at the base rates.  Base
   rates (share of step visits with an episode): rapid_guess 0.06, hint_skim 0.05,
   help_avoid 0.05, idle 0.04, each times ``behaviours[name]`` (default 1).
4. **Students.**  A student (``"s0001", ...``) joins a school uniformly at random;
   ``pace = school pace * LogNormal(0, 0.25)``; ``ability ~ N(0, 1)``; for every
   behaviour a propensity ``~ Beta(m * 8, (1 - m) * 8)`` where ``m`` is the school's
   rate (0 if ``m`` is 0).  Pace, ability and the propensities are independent.
5. **Work plan.**  A student works each problem with probability ``coverage``
   (at least one problem), skill after skill in curriculum order, every step of a
   problem in order.  The visits are cut into ``U{sessions_per_student}``
   contiguous sessions of random size, one per school day (1 to 3 days apart),
   starting in the school's class period and at least an hour after the
   student's previous session ended.
6. **Episodes.**  At every step visit each behaviour switches on independently
   with the student's propensity (idle never on a session's first step, where
   the pause could not be seen).  Episodes ignore knowledge and each other.
7. **A step visit**, in this order (segments always run to their planned length,
   so the events a behaviour leaves never depend on the other behaviours):

   - *help_avoid*: two wrong attempts, then ``U{1, 3}`` more wrong attempts at
     ordinary pace, no hint (the student is stuck and does not ask); the attempts
     after the second wrong one are the behaviour's events;
   - *hint_skim*: hints 1, 2, ..., last level in a row; after the first, each
     comes 0.3-2.5 s after the previous one; all of them are the behaviour's events;
   - *rapid_guess*: a wrong attempt, then up to ``U{2, 4}`` fast attempts
     (0.3-2.5 s), each correct at the skill's guess rate, the first correct one
     ending the step; the fast attempts are the behaviour's events;
   - *ordinary work* until a correct attempt or 10 ordinary actions.  The student
     asks for the next hint with probability 0.05 before any attempt, 0.3 after
     one wrong attempt, 0.6 after two or more, 0.45 right after a hint (never
     past the last level), each moved on the logit scale by the student's own
     help-seeking tendency ``N(0, 1.5^2)`` (so hint counts alone say little about
     skimming); an attempt is correct with ``1 - p_slip`` if the skill
     is known or the bottom-out hint was seen, else with ``p_guess``.

   *idle* adds a pause of ``U(2, 10)`` minutes to the step's first action, whatever
   it is (that action is the idle event).
8. **Learning** (no forgetting).  The skill starts known with ``p_init``.  After
   each ordinary or help-avoidance attempt (right or wrong) an unknown skill
   becomes known with the student's own rate
   ``expit(logit(p_learn) + ability_sd * ability)``; after a read hint with half of it.
   Skimmed hints, rapid guesses and the wrong attempt opening a rapid-guess
   episode teach nothing.  Knowledge carries over from step to step of the skill.
9. **Timing.**  ``time`` is the moment an action was submitted and ``duration``
   the seconds spent on it, i.e. since the student's previous action in the
   session (or since the session began); durations are whole milliseconds, so
   within a session ``time[i] - time[i-1] == duration[i]`` exactly.  Ordinary
   durations are log-normal (median 14 s for attempts, 8 s for hints, sigma 0.5)
   times ``pace * exp(0.35 * step difficulty)``, times 0.7 for an attempt on a
   known skill, 1.3 for an action right after a hint, 1.5 for the first action of
   a problem, clipped to [0.3, 240] s.  Fast hints and fast attempts are
   log-normal with medians 1.0 s and 1.3 s (sigma 0.35) clipped to [0.3, 2.5] s;
   half of the first attempts on a known skill are *fluent*, as fast as a rapid
   guess (a fast attempt alone does not reveal guessing; its context does).
   No gap inside a session reaches 30 minutes; sessions are hours or days apart.
10. **Windows.**  Each session is cut into consecutive blocks of ``window_steps``
    step visits (a short tail is dropped); every student gets up to
    ``windows_per_student`` blocks drawn at random without replacement, so windows
    never overlap.  A window is the half-open time interval ``[start, end)`` with
    ``start`` 1 ms after the student's action before the block (the moment they
    started on its first action) and ``end`` 1 ms after its last action: an event
    belongs to the window when ``start <= time < end``.  Windows last from about
    a minute to several minutes (longer with an idle pause).
11. **Labels.**  ``f_b`` is the number of the window's steps holding an episode of
    behaviour ``b`` (0 to ``window_steps``).  The true label is 1 with probability
    ``expit(a_school + sum_b label_links[b] * f_b)``; the intercept ``a_school`` is
    set (by bisection) so that the mean of this probability over the school's
    windows equals ``label_rate``.  Because every school has the same label rate,
    a behaviour whose link is 0 is independent of the label even though its rate
    varies by school.  The coder then reads a true 0 as 1 with probability
    ``coder_error[0]`` and a true 1 as 0 with ``coder_error[1]`` (one number sets
    both; default 0.08 and 0.16).  Labels are drawn after the log, from their own
    random stream, so changing ``label_links``, ``label_rate`` or ``coder_error``
    leaves the events as they are.  Default links: rapid_guess 7, hint_skim 7,
    help_avoid 0, idle 2, label rate 0.3, windows of 6 steps: a window holding a
    planted episode is almost surely a true 1, so the best possible detector of the
    coded labels (the true probability) reaches an AUC of about 0.85-0.89, and the
    coder agrees with the truth at kappa about 0.74-0.80 (``SimulationTruth.ceiling_auc``
    and ``coder_kappa`` report both for each simulation); detectors of this field are
    typically judged against human coding agreeing at kappa >= 0.6 (common practice,
    no source).
12. **Tests.**  Pre- and post-test are the proportion right of 40 items; an item
    is right with probability ``0.15 + 0.75 * K + 0.05 * ability`` plus ``N(0, 0.05)``
    day-to-day form, clipped to [0.02, 0.98], where ``K`` is the share of the
    student's practised skills known before (pretest) or after (posttest)
    practice; the posttest also loses 0.6 times the student's share of steps
    with a rapid-guess episode and 0.4 times the share with a hint-skim episode.

Null setting by design
----------------------
The events a behaviour leaves depend only on its own episode switches and
draws; episodes are switched independently of each other, of knowledge and of
the choice of windows; every window holds the same number of steps (windows
of fixed *duration* would let an idle pause crowd out the other behaviours);
and all schools share one label rate.  So with ``label_links[b] = 0`` the
episodes and events of ``b`` are independent of the labels, while ``b`` still
happens at its usual rate in an unchanged log.  What no simulator can promise
is that a *rule* aimed at ``b`` sees only ``b``: ordinary work sometimes looks
like a behaviour (a quick second hint, wrong attempts without a hint inside a
rapid-guess burst), and such overlap is part of what a rule evaluation measures.

Ground truth
------------
Per event: which behaviour produced it and the latent knowledge before it;
per skill: the BKT parameters; per student: pace, ability, propensities and the
share of skills known before and after; per school: pace and rates; per window:
events and episodes of each behaviour and the true-label probability; and the
label model itself (links, intercepts, coder error).  See :class:`SimulationTruth`.

Every random draw comes from ``np.random.default_rng(seed)``, split with
``spawn`` into one stream per stage (so, e.g., the label knobs never change the
log, and ``behaviours={"idle": 0}`` only removes the idle pauses); there is no
global random state.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .._text import did_you_mean
from ..errors import SimulationError
from ..stats.inference import auc, cohen_kappa
from . import clock as _sim_time
from . import frames as _sim_frames
from . import labels as _sim_labels
from . import plan as _sim_plan
from . import steps as _sim_steps
from .frames import Names
from .plan import BEHAVIOURS

__all__ = ["BEHAVIOURS", "DEFAULT_LABEL_LINKS", "SimulatedTutorData", "SimulationTruth", "tutor_logs"]

DEFAULT_LABEL_LINKS = {"rapid_guess": 7.0, "hint_skim": 7.0, "help_avoid": 0.0, "idle": 2.0}
PLATFORM = "Zorbleth"


@dataclass(frozen=True, eq=False)
class SimulationTruth:
    """What produced a simulated log.

    Attributes
    ----------
    event_behaviour : DataFrame
        Aligned row for row with ``events``; one bool column per behaviour, True
        where the event was produced by that behaviour (idle can coincide with
        another behaviour on the same event).
    knowledge : ndarray of int8
        Aligned with ``events``: the latent 0/1 state of the student on the row's
        skill just before the action.
    skill_params : DataFrame
        Per skill: ``skill, p_init, p_learn, p_guess, p_slip, difficulty``.
    student_params : DataFrame
        Per student: ``student, population, pace, ability``, ``p_<behaviour>`` (propensity,
        per step visit), ``known_start``, ``known_end`` (share of practised skills
        known before and after practice) and ``n_steps`` (step visits).
    school_params : DataFrame
        Per school: ``population, pace`` and ``rate_<behaviour>`` (mean propensity).
    label_links : dict
        Behaviour -> weight of ``f_b`` in the label model, as used.
    label_intercept : dict
        School -> intercept ``a_school`` of the label model.
    label_rate : float
        Mean probability of a true label 1 in every school.
    coder_error : tuple of float
        ``(P(coded 1 | true 0), P(coded 0 | true 1))``.
    window_behaviour : DataFrame
        Per window: ``window_id``, the number of events of each behaviour (column
        named after it), ``<behaviour>_episodes`` (the ``f_b`` of the label model)
        and ``p_true_label``.
    ceiling_auc : float
        AUC of the true-label probability ``p_true_label`` against the coded labels:
        the best any detector of these coded windows can expect (NaN with one class).
    coder_kappa : float
        Cohen's kappa between the true and the coded labels: how well the simulated
        coder agrees with the truth (NaN when undefined).

    Examples
    --------
    >>> from rulefeat.simulate import tutor_logs
    >>> truth = tutor_logs(10, seed=2, label_links={"idle": 0.0}).truth
    >>> truth.label_links
    {'rapid_guess': 7.0, 'hint_skim': 7.0, 'help_avoid': 0.0, 'idle': 0.0}
    >>> bool((truth.knowledge[:-1] <= 1).all())
    True
    """

    event_behaviour: pd.DataFrame
    knowledge: np.ndarray
    skill_params: pd.DataFrame
    student_params: pd.DataFrame
    school_params: pd.DataFrame
    label_links: dict[str, float]
    label_intercept: dict[str, float]
    label_rate: float
    coder_error: tuple[float, float]
    window_behaviour: pd.DataFrame
    ceiling_auc: float = float("nan")
    coder_kappa: float = float("nan")


@dataclass(frozen=True, eq=False)
class SimulatedTutorData:
    """A simulated log, its coded windows, test scores and the truth behind them.

    Attributes
    ----------
    events : DataFrame
        One row per action, ordered by student then time, columns ``student,
        time, action, correct, problem, step, skill, hint_level,
        hint_levels_total, duration, population``.  String columns are pandas
        categoricals (to keep memory low on millions of rows); ``time`` is naive
        ``datetime64[ns]``; ``action`` is ``"attempt"`` or ``"hint"``; ``correct``
        is nullable ``"boolean"`` (``<NA>`` on hints); ``hint_level`` is nullable
        ``Int64`` (1 to ``hint_levels_total`` on hints, ``<NA>`` on attempts);
        ``duration`` is float seconds (see the module docstring for the timing).
    windows : DataFrame
        One row per coded window: ``window_id, student, start, end, label,
        true_label, population``; the window is the half-open interval ``[start, end)``.
    outcomes : DataFrame
        One row per student: ``student, population, pretest, posttest``, each test
        the proportion right of 40 items (0 to 1).
    truth : SimulationTruth
        The ground truth.

    Examples
    --------
    >>> from rulefeat.simulate import tutor_logs
    >>> data = tutor_logs(10, seed=2)
    >>> skims = data.events[data.truth.event_behaviour["hint_skim"]]
    >>> set(skims["action"])
    {'hint'}
    """

    events: pd.DataFrame
    windows: pd.DataFrame
    outcomes: pd.DataFrame
    truth: SimulationTruth


def _fail(name: str, expected: str, value: object) -> SimulationError:
    return SimulationError(f"The {name!r} parameter of tutor_logs must be {expected}. Got {value!r} instead.")


def _is_int(value: object) -> bool:
    return isinstance(value, (int, np.integer)) and not isinstance(value, (bool, np.bool_))


def _check_int(name: str, value: object, low: int, high: int | None = None) -> int:
    within = _is_int(value) and value >= low and (high is None or value <= high)
    if not within:
        bound = f"an int >= {low}" if high is None else f"an int from {low} to {high}"
        raise _fail(name, bound, value)
    return int(value)


def _check_span(name: str, value: object, low: int, high: int) -> tuple[int, int]:
    pair = tuple(value) if isinstance(value, (tuple, list)) else None
    if pair is None or len(pair) != 2 or not all(_is_int(v) for v in pair) or not low <= pair[0] <= pair[1] <= high:
        raise _fail(name, f"a pair of ints (lo, hi) with {low} <= lo <= hi <= {high}", value)
    return int(pair[0]), int(pair[1])


def _check_real(name: str, value: object, low: float, high: float, *, open_low: bool, open_high: bool) -> float:
    ok = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, (bool, np.bool_))
    ok = ok and math.isfinite(value)
    ok = ok and (value > low if open_low else value >= low) and (value < high if open_high else value <= high)
    if not ok:
        interval = f"{'(' if open_low else '['}{low}, {high}{')' if open_high else ']'}"
        raise _fail(name, f"a number in {interval}", value)
    return float(value)


def _check_behaviour_map(name: str, values: Mapping[str, float] | None, low: float | None) -> dict[str, float]:
    """Validate a {behaviour: number} mapping; unknown names get a did-you-mean."""
    if values is None:
        return {}
    if not isinstance(values, Mapping):
        raise _fail(name, "a dict mapping behaviour names to numbers", values)
    for key, value in values.items():
        if key not in BEHAVIOURS:
            raise SimulationError(
                f"Unknown behaviour {key!r} in the {name!r} parameter of tutor_logs; "
                f"the behaviours are {list(BEHAVIOURS)}.{did_you_mean(str(key), BEHAVIOURS)}"
            )
        bad = isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.integer, np.floating))
        if bad or not math.isfinite(value) or (low is not None and value < low):
            need = "a finite number" if low is None else f"a finite number >= {low}"
            raise _fail(f"{name}[{key!r}]", need, value)
    return {key: float(value) for key, value in values.items()}


def _check_coder_error(value: object) -> tuple[float, float]:
    pair = tuple(value) if isinstance(value, (tuple, list)) else (value, value)
    if len(pair) != 2:
        raise _fail("coder_error", "a number or a pair of numbers in [0, 0.5)", value)
    try:
        return tuple(
            _check_real("coder_error", v, 0.0, 0.5, open_low=False, open_high=True) for v in pair
        )
    except SimulationError as exc:
        raise _fail("coder_error", "a number or a pair (false positive, false negative) in [0, 0.5)", value) from exc


def _rates(scale: dict[str, float], school_spread: float) -> np.ndarray:
    """Base episode rates times the user's scale, refused when a school's mean would be too high."""
    rates = _sim_plan.BASE_RATES * np.array([scale.get(b, 1.0) for b in BEHAVIOURS])
    worst = rates * math.exp(school_spread)  # bound on a school's multiplier (before centring)
    for b, name in enumerate(BEHAVIOURS):
        if worst[b] > _sim_plan.MAX_PROPENSITY_MEAN:
            raise SimulationError(
                f"behaviours[{name!r}] = {scale.get(name, 1.0)!r} in tutor_logs could give a school a mean "
                f"episode rate above {_sim_plan.MAX_PROPENSITY_MEAN} per step (base rate "
                f"{_sim_plan.BASE_RATES[b]}, school_spread {school_spread}); lower the scale or the school_spread."
            )
    return rates


def tutor_logs(
    n_students: int = 200,
    *,
    seed: int | None = 0,
    n_skills: int = 8,
    problems_per_skill: int = 16,
    steps_per_problem: tuple[int, int] = (1, 4),
    hint_levels: tuple[int, int] = (2, 4),
    sessions_per_student: tuple[int, int] = (2, 5),
    coverage: float = 0.8,
    n_schools: int = 3,
    school_spread: float = 0.5,
    ability_sd: float = 1.0,
    behaviours: Mapping[str, float] | None = None,
    label_links: Mapping[str, float] | None = None,
    label_rate: float = 0.3,
    coder_error: float | tuple[float, float] = (0.08, 0.16),
    window_steps: int = 6,
    windows_per_student: int = 6,
) -> SimulatedTutorData:
    """Simulate tutoring logs, coded windows and test scores with known ground truth.

    The full generative process is described in the :mod:`rulefeat.simulate`
    module docstring.  The same arguments and seed always give identical frames.

    Parameters
    ----------
    n_students : int, default 200
        Number of students (about 500 events each with the defaults).
    seed : int or None, default 0
        Seed of ``np.random.default_rng``; None draws fresh entropy.
    n_skills : int, default 8
        Number of skills on the platform.
    problems_per_skill : int, default 16
        Problems practising each skill.
    steps_per_problem : (int, int), default (1, 4)
        Inclusive range of the number of steps of a problem.
    hint_levels : (int, int), default (2, 4)
        Inclusive range of the number of hint levels of a step (2 to 10).
    sessions_per_student : (int, int), default (2, 5)
        Inclusive range of a student's number of sessions (fewer if they have
        fewer step visits).
    coverage : float, default 0.8
        Probability that a student works a given problem, in (0, 1].
    n_schools : int, default 3
        Number of fictional schools (1 to 8), stored in the ``population`` column.
    school_spread : float, default 0.5
        How much schools differ: school rates of a behaviour span a factor of
        ``exp(2 * school_spread)`` (pace ``exp(school_spread)``); 0 makes schools alike.
    ability_sd : float, default 1.0
        Spread of student ability, which moves every skill's ``p_learn`` by
        ``ability_sd * N(0, 1)`` on the logit scale; 0 gives every student the
        skill's exact BKT parameters.
    behaviours : dict, optional
        Scale of each behaviour's base rate, e.g. ``{"idle": 0.0}`` switches idle
        pauses off and ``{"rapid_guess": 2.0}`` doubles rapid guessing.
    label_links : dict, optional
        Weights of the label model overriding :data:`DEFAULT_LABEL_LINKS` name by
        name; ``{"hint_skim": 0.0}`` gives the null setting in which hint skimming
        happens as usual but is independent of the labels.
    label_rate : float, default 0.3
        Mean probability of a true label 1 in each school, in (0, 1).
    coder_error : float or (float, float), default (0.08, 0.16)
        Probability that the coder flips a label; a pair gives
        ``(P(1 | true 0), P(0 | true 1))``.  Each in [0, 0.5).
    window_steps : int, default 6
        Step visits in a coded window.  Windows are cut by steps rather than by
        minutes so that the amounts of the behaviours in a window stay
        independent (see "Null setting by design"); they last about 20 s to a
        few minutes.
    windows_per_student : int, default 6
        Coded windows per student (fewer if their sessions hold fewer blocks).

    Returns
    -------
    SimulatedTutorData
        ``events``, ``windows``, ``outcomes`` and ``truth``.

    Raises
    ------
    SimulationError
        A knob is out of range, of the wrong type, or names an unknown behaviour.

    Examples
    --------
    >>> from rulefeat.simulate import tutor_logs
    >>> data = tutor_logs(20, seed=1)
    >>> len(data.outcomes), data.windows["window_id"].is_unique
    (20, True)
    >>> list(data.events.columns)
    ['student', 'time', 'action', 'correct', 'problem', 'step', 'skill', 'hint_level', 'hint_levels_total', 'duration', 'population']
    >>> sorted(data.events["action"].unique())
    ['attempt', 'hint']
    >>> data.truth.label_links["help_avoid"]
    0.0
    """
    if seed is not None and not (_is_int(seed) and seed >= 0):
        raise _fail("seed", "a non-negative int or None", seed)
    knobs = {
        "n_students": _check_int("n_students", n_students, 1),
        "n_skills": _check_int("n_skills", n_skills, 1),
        "problems_per_skill": _check_int("problems_per_skill", problems_per_skill, 1),
        "steps_per_problem": _check_span("steps_per_problem", steps_per_problem, 1, 50),
        "hint_levels": _check_span("hint_levels", hint_levels, 2, 10),
        "sessions_per_student": _check_span("sessions_per_student", sessions_per_student, 1, 100),
        "coverage": _check_real("coverage", coverage, 0.0, 1.0, open_low=True, open_high=False),
        "n_schools": _check_int("n_schools", n_schools, 1, len(_sim_plan.SCHOOLS)),
        "school_spread": _check_real("school_spread", school_spread, 0.0, 2.0, open_low=False, open_high=False),
        "ability_sd": _check_real("ability_sd", ability_sd, 0.0, 3.0, open_low=False, open_high=False),
        "label_rate": _check_real("label_rate", label_rate, 0.0, 1.0, open_low=True, open_high=True),
        "coder_error": _check_coder_error(coder_error),
        "window_steps": _check_int("window_steps", window_steps, 1),
        "windows_per_student": _check_int("windows_per_student", windows_per_student, 0),
    }
    scale = _check_behaviour_map("behaviours", behaviours, 0.0)
    links = {**DEFAULT_LABEL_LINKS, **_check_behaviour_map("label_links", label_links, None)}
    knobs["rates"] = _rates(scale, knobs["school_spread"])
    return _simulate(np.random.default_rng(seed), knobs, links)


def _simulate(rng: np.random.Generator, knobs: dict, links: dict[str, float]) -> SimulatedTutorData:
    r_platform, r_people, r_plan, r_steps, r_time, r_windows, r_labels, r_tests = rng.spawn(8)
    platform = _sim_plan.draw_platform(
        r_platform, knobs["n_skills"], knobs["problems_per_skill"], knobs["steps_per_problem"],
        knobs["hint_levels"],
    )
    people = _sim_plan.draw_population(
        r_people, knobs["n_students"], knobs["n_schools"], knobs["rates"], knobs["school_spread"]
    )
    plan = _sim_plan.draw_plan(r_plan, platform, people, knobs["coverage"], knobs["sessions_per_student"])
    actions = _sim_steps.simulate_actions(r_steps, platform, plan, knobs["ability_sd"] * people.ability)
    perm = _sim_time.event_order(actions)
    ev = {key: getattr(actions, key)[perm] for key in _sim_frames.EVENT_FIELDS}
    dur = _sim_time.durations_ms(r_time, ev, platform, plan, people)
    time = _sim_time.event_times(r_time, dur, plan.session[ev["visit"]], plan, people)
    names = Names(platform, knobs["n_students"])
    events = _sim_frames.events_frame(ev, dur, time, platform, plan, people, names)
    first = _sim_labels.pick_windows(r_windows, plan, knobs["window_steps"], knobs["windows_per_student"])
    windows, window_behaviour, intercept = _sim_frames.windows_frames(
        r_labels, first, actions, time, dur, plan, people, names, knobs, links
    )
    scores = _sim_labels.draw_test_scores(r_tests, actions, platform, plan, people)
    outcomes = pd.DataFrame({
        "student": names.students(), "population": names.schools(people.student_school, people),
        "pretest": scores["pretest"], "posttest": scores["posttest"],
    })
    truth = SimulationTruth(
        event_behaviour=_sim_frames.event_behaviour(ev, plan),
        knowledge=ev["known"].astype(np.int8),
        skill_params=_sim_frames.skill_params(platform),
        student_params=_sim_frames.student_params(people, names, scores),
        school_params=_sim_frames.school_params(people),
        label_links={b: float(links[b]) for b in BEHAVIOURS},
        label_intercept=dict(zip(people.school_names, map(float, intercept), strict=True)),
        label_rate=knobs["label_rate"],
        coder_error=knobs["coder_error"],
        window_behaviour=window_behaviour,
        ceiling_auc=_ceiling_auc(windows["label"].to_numpy(), window_behaviour["p_true_label"].to_numpy()),
        coder_kappa=_coder_kappa(windows["true_label"].to_numpy(), windows["label"].to_numpy()),
    )
    return SimulatedTutorData(events, windows, outcomes, truth)


def _ceiling_auc(coded: np.ndarray, p_true: np.ndarray) -> float:
    if len(np.unique(coded)) < 2:
        return float("nan")
    return float(auc(coded, p_true))


def _coder_kappa(true: np.ndarray, coded: np.ndarray) -> float:
    if len(true) == 0 or (len(np.unique(true)) < 2 and len(np.unique(coded)) < 2):
        return float("nan")
    return float(cohen_kappa(true, coded))
