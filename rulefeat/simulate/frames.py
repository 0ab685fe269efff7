"""Assembly of the simulator's output tables (private helper of rulefeat.simulate).

The one place where the simulator's numpy arrays become pandas objects:
categoricals for the string columns, nullable ``boolean`` / ``Int64`` columns,
and the truth tables.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from . import labels as _sim_labels
from . import plan as _sim_plan
from .plan import BEHAVIOURS, IDLE

EVENT_FIELDS = ("visit", "index", "is_hint", "correct", "hint_level", "behaviour", "timing", "known", "after_hint")


class Names:
    """The category labels of the string columns: students, problems, steps, skills, schools."""

    def __init__(self, platform: _sim_plan.Platform, n_students: int) -> None:
        width = max(4, len(str(n_students)))
        self.student = [f"s{i + 1:0{width}d}" for i in range(n_students)]
        n_problems = platform.problem_skill.size
        pwidth = max(3, len(str(n_problems)))
        self.problem = [f"p{p + 1:0{pwidth}d}" for p in range(n_problems)]
        self.step = [
            f"{self.problem[p]}-s{i + 1}" for p, i in zip(platform.step_problem, platform.step_index, strict=True)
        ]

    def students(self, codes: np.ndarray | None = None) -> pd.Categorical:
        codes = np.arange(len(self.student)) if codes is None else codes
        return pd.Categorical.from_codes(codes, categories=self.student)

    @staticmethod
    def schools(codes: np.ndarray, people: _sim_plan.Population) -> pd.Categorical:
        return pd.Categorical.from_codes(codes, categories=people.school_names)


def events_frame(ev, dur, time, platform, plan, people, names) -> pd.DataFrame:
    visit = ev["visit"]
    step = plan.step[visit]
    student = plan.student[visit]
    is_hint = ev["is_hint"]
    return pd.DataFrame({
        "student": names.students(student),
        "time": time,
        "action": pd.Categorical.from_codes(is_hint.astype(np.int8), categories=["attempt", "hint"]),
        "correct": pd.arrays.BooleanArray(ev["correct"] == 1, is_hint.copy()),
        "problem": pd.Categorical.from_codes(platform.step_problem[step], categories=names.problem),
        "step": pd.Categorical.from_codes(step, categories=names.step),
        "skill": pd.Categorical.from_codes(platform.step_skill[step], categories=platform.skill_names),
        "hint_level": pd.arrays.IntegerArray(ev["hint_level"].astype(np.int64), ~is_hint),
        "hint_levels_total": platform.step_levels[step].astype(np.int64),
        "duration": dur / 1000.0,
        "population": names.schools(people.student_school[student], people),
    })


def windows_frames(rng, first, actions, time, dur, plan, people, names, knobs, links):
    """The coded windows, their behaviour contents and the label model's intercepts."""
    k = knobs["window_steps"]
    bounds = np.concatenate([[0], np.cumsum(actions.n_actions)])
    first_event, last_event = bounds[first], bounds[first + k] - 1
    one_ms = np.timedelta64(1, "ms")
    start = time[first_event] - (dur[first_event] - 1) * one_ms
    end = time[last_event] + one_ms
    counts, episodes = _sim_labels.window_contents(actions, plan, first, k)
    school = people.student_school[plan.student[first]]
    eta = episodes @ np.array([links[b] for b in BEHAVIOURS])
    n_schools = len(people.school_names)
    intercept = _sim_labels.school_intercepts(eta, school, n_schools, knobs["label_rate"])
    p_true = _sim_labels.expit(intercept[school] + eta)
    true, coded = _sim_labels.code_labels(rng, p_true, knobs["coder_error"])
    window_id = np.arange(first.size)
    windows = pd.DataFrame({
        "window_id": window_id, "student": names.students(plan.student[first]), "start": start, "end": end,
        "label": coded, "true_label": true, "population": names.schools(school, people),
    })
    contents = {"window_id": window_id}
    contents.update({b: counts[:, j] for j, b in enumerate(BEHAVIOURS)})
    contents.update({f"{b}_episodes": episodes[:, j].astype(np.int64) for j, b in enumerate(BEHAVIOURS)})
    contents["p_true_label"] = p_true
    return windows, pd.DataFrame(contents), intercept


def event_behaviour(ev: dict[str, np.ndarray], plan: _sim_plan.Plan) -> pd.DataFrame:
    marked = {b: ev["behaviour"] == j for j, b in enumerate(BEHAVIOURS[:IDLE])}
    marked["idle"] = (ev["index"] == 0) & plan.flags[ev["visit"], IDLE]
    return pd.DataFrame(marked)


def skill_params(platform: _sim_plan.Platform) -> pd.DataFrame:
    return pd.DataFrame({
        "skill": pd.Categorical(platform.skill_names, categories=platform.skill_names),
        "p_init": platform.p_init, "p_learn": platform.p_learn, "p_guess": platform.p_guess,
        "p_slip": platform.p_slip, "difficulty": platform.difficulty,
    })


def student_params(people: _sim_plan.Population, names: Names, scores: dict) -> pd.DataFrame:
    frame = {
        "student": names.students(), "population": names.schools(people.student_school, people),
        "pace": people.student_pace, "ability": people.ability,
    }
    frame.update({f"p_{b}": people.propensity[:, j] for j, b in enumerate(BEHAVIOURS)})
    frame.update({key: scores[key] for key in ("known_start", "known_end", "n_steps")})
    return pd.DataFrame(frame)


def school_params(people: _sim_plan.Population) -> pd.DataFrame:
    frame = {
        "population": pd.Categorical(people.school_names, categories=people.school_names),
        "pace": people.school_pace,
    }
    frame.update({f"rate_{b}": people.school_rates[:, j] for j, b in enumerate(BEHAVIOURS)})
    return pd.DataFrame(frame)
