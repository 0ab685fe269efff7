"""The action-by-action simulation of every step visit (private helper of rulefeat.simulate).

A step visit is a small state machine.  Planned behaviour segments run first, in
a fixed order, and always run to their planned length, so the number of events
a behaviour leaves never depends on which other behaviours share the step:

1. help avoidance: two wrong attempts, then ``n_avoid`` more wrong attempts, no hint;
2. hint skimming: every hint level in a row, from 1 to the last;
3. rapid guessing: one wrong attempt, then up to ``n_burst`` fast guesses, each
   correct at the skill's guess rate; a correct guess ends the step;
4. ordinary work until a correct attempt (or ``ORDINARY_CAP`` ordinary actions).

The loop runs over the position of a visit within its (student, skill) sequence
and, inside, over the action index; each iteration handles all live visits at
once with numpy, so there is no Python loop per student or per event.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .plan import HELP_AVOID, HINT_SKIM, RAPID_GUESS, Plan, Platform

ORDINARY_CAP = 10  # ordinary actions on one step before the student moves on unsolved
P_HINT_FIRST = 0.05  # asks for a hint before any attempt
P_HINT_ONE_WRONG = 0.3  # ... after one wrong attempt
P_HINT_TWO_WRONG = 0.6  # ... after two or more wrong attempts
P_HINT_AGAIN = 0.45  # ... right after reading a hint
# Students differ in how readily they ask for help: every ordinary hint probability of a student is moved by
# the same N(0, HELP_SD^2) draw on the logit scale, so hint counts alone say little about skimming.
HELP_SD = 1.5
HINT_LEARN_SHARE = 0.5  # a read (not skimmed) hint teaches with this share of p_learn

TIME_ATTEMPT, TIME_HINT, TIME_FAST_HINT, TIME_FAST_ATTEMPT = range(4)


@dataclass(frozen=True, eq=False)
class Actions:
    """Every simulated action, in simulation order (not yet in time order)."""

    visit: np.ndarray
    index: np.ndarray
    is_hint: np.ndarray
    correct: np.ndarray
    hint_level: np.ndarray
    behaviour: np.ndarray
    timing: np.ndarray
    known: np.ndarray
    after_hint: np.ndarray
    n_actions: np.ndarray
    initial_known: np.ndarray
    final_known: np.ndarray


def _shift_probability(p: np.ndarray, shift: np.ndarray) -> np.ndarray:
    """``expit(logit(p) + shift)``: a student's own learning rate on a skill."""
    return 1.0 / (1.0 + (1.0 - p) / p * np.exp(-shift))


class _Live:
    """State of the visits still running, kept as aligned arrays."""

    def __init__(self, **arrays: np.ndarray) -> None:
        self.__dict__.update(arrays)

    def keep(self, mask: np.ndarray) -> None:
        for name, values in self.__dict__.items():
            setattr(self, name, values[mask])


def _start(platform: Platform, plan: Plan, vis: np.ndarray, known: np.ndarray, shift: np.ndarray,
           help_shift: np.ndarray) -> _Live:
    step = plan.step[vis]
    skill = platform.step_skill[step]
    levels = platform.step_levels[step]
    flags = plan.flags[vis]
    n_avoid = plan.n_avoid[vis]
    zero = np.zeros(vis.size, dtype=np.int64)
    return _Live(
        vis=vis, pos=np.arange(vis.size), known=known.copy(), levels=levels,
        guess=platform.p_guess[skill], slip=platform.p_slip[skill],
        learn=_shift_probability(platform.p_learn[skill], shift[plan.student[vis]]),
        help=help_shift[plan.student[vis]],
        n_avoid=n_avoid, avoid_left=np.where(flags[:, HELP_AVOID], 2 + n_avoid, 0),
        skim_left=np.where(flags[:, HINT_SKIM], levels, 0), trigger=flags[:, RAPID_GUESS].copy(),
        burst_left=np.where(flags[:, RAPID_GUESS], plan.n_burst[vis], 0),
        wrong=zero, level=zero.copy(), ordinary_n=zero.copy(), last_hint=np.zeros(vis.size, dtype=bool),
    )


def _one_action(rng: np.random.Generator, s: _Live) -> tuple[dict, np.ndarray]:
    """Take one action on every live visit; return what was logged and which visits ended."""
    n = s.vis.size
    u_hint, u_correct, u_learn = rng.random((3, n))
    in_avoid = s.avoid_left > 0
    in_skim = ~in_avoid & (s.skim_left > 0)
    rest = ~in_avoid & ~in_skim
    in_trigger = rest & s.trigger
    in_burst = rest & ~s.trigger & (s.burst_left > 0)
    ordinary = rest & ~s.trigger & (s.burst_left == 0)
    bottom = s.level >= s.levels
    p_hint = np.where(s.wrong == 0, P_HINT_FIRST, np.where(s.wrong == 1, P_HINT_ONE_WRONG, P_HINT_TWO_WRONG))
    p_hint = _shift_probability(np.where(s.last_hint, P_HINT_AGAIN, p_hint), s.help)
    is_hint = in_skim | (ordinary & ~bottom & (u_hint < p_hint))
    attempt = ~is_hint
    # Having seen the last (bottom-out) hint the student can copy the answer.
    p_correct = np.where(in_burst, s.guess, np.where(s.known | bottom, 1.0 - s.slip, s.guess))
    correct = attempt & ~in_avoid & ~in_trigger & (u_correct < p_correct)
    behaviour = np.full(n, -1, dtype=np.int8)
    behaviour[in_burst] = RAPID_GUESS
    behaviour[in_skim] = HINT_SKIM
    behaviour[in_avoid & (s.avoid_left <= s.n_avoid)] = HELP_AVOID
    timing = np.where(is_hint, TIME_HINT, TIME_ATTEMPT)
    timing[in_skim & (s.level > 0)] = TIME_FAST_HINT
    timing[in_burst] = TIME_FAST_ATTEMPT
    logged = {
        "visit": s.vis, "is_hint": is_hint, "correct": np.where(is_hint, -1, correct).astype(np.int8),
        "hint_level": np.where(is_hint, s.level + 1, 0).astype(np.int8), "behaviour": behaviour,
        "timing": timing.astype(np.int8), "known": s.known, "after_hint": s.last_hint,
    }
    # Skimmed hints and rapid guesses are not practice: they teach nothing.  (State arrays are
    # replaced below, never changed in place, so the logged arrays stay as they were.)
    p_learn = np.where(attempt & ~in_burst & ~in_trigger, s.learn, 0.0)
    p_learn = np.where(is_hint & ~in_skim, HINT_LEARN_SHARE * s.learn, p_learn)
    s.known = s.known | (u_learn < p_learn)
    s.level = s.level + is_hint
    s.wrong = s.wrong + (attempt & ~correct)
    s.last_hint = is_hint
    s.avoid_left = s.avoid_left - in_avoid
    s.skim_left = s.skim_left - in_skim
    s.trigger = s.trigger & ~in_trigger
    s.burst_left = s.burst_left - in_burst
    s.ordinary_n = s.ordinary_n + ordinary
    return logged, correct | (s.ordinary_n >= ORDINARY_CAP)


def _run_batch(rng, platform, plan, vis, known, shift, help_shift, logs, n_actions) -> np.ndarray:
    """Run one visit per (student, skill) pair to its end; return the knowledge after it."""
    s = _start(platform, plan, vis, known, shift, help_shift)
    known_after = known.copy()
    index = 0
    while s.vis.size:
        logged, ended = _one_action(rng, s)
        logged["index"] = np.full(s.vis.size, index, dtype=np.int32)
        logs.append(logged)
        index += 1
        n_actions[s.vis[ended]] = index
        known_after[s.pos[ended]] = s.known[ended]
        s.keep(~ended)
    return known_after


def simulate_actions(
    rng: np.random.Generator, platform: Platform, plan: Plan, learn_shift: np.ndarray
) -> Actions:
    """Simulate every action of every visit; knowledge carries over along each skill.

    ``learn_shift`` (one per student) moves the skill's ``p_learn`` on the logit scale.
    """
    n_students = learn_shift.size
    skill_of_visit = platform.step_skill[plan.step]
    known = rng.random((n_students, len(platform.skill_names))) < platform.p_init
    help_shift = rng.normal(0.0, HELP_SD, n_students)
    initial = known.copy()
    order = np.argsort(plan.seq_pos, kind="stable")
    bounds = np.searchsorted(plan.seq_pos[order], np.arange(plan.seq_pos.max() + 2))
    logs: list[dict] = []
    n_actions = np.zeros(plan.student.size, dtype=np.int64)
    for t in range(bounds.size - 1):
        vis = order[bounds[t] : bounds[t + 1]]
        stu, skl = plan.student[vis], skill_of_visit[vis]
        known[stu, skl] = _run_batch(rng, platform, plan, vis, known[stu, skl], learn_shift, help_shift, logs,
                                     n_actions)
    joined = {key: np.concatenate([log[key] for log in logs]) for key in logs[0]}
    return Actions(**joined, n_actions=n_actions, initial_known=initial, final_known=known)
