"""Property: a fitted transformer bound to log B scores B's units exactly as in the log of A's and B's events.

The reference is the same transformer bound to the combined log (the "appended to the training log" case of
issue 14); logs are random, with step and skill labels drawn so that B numbers its labels differently from A+B
and holds labels A never saw.
"""

import warnings

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import rulefeat

RULES = rulefeat.RuleSet.from_toml("""
[rules.quick_hint]
when = "action == 'hint' and gap < 3s"
report = ["count", "first_seconds", "first_position"]

[rules.slow_attempt]
when = "action == 'attempt' and duration > 1.5 * typical(duration, per='step')"
report = ["count", "rate", "longest_streak", "first_seconds"]

[rules.odd_skill]
when = "zscore(duration, per='skill') > 1 and step in ['k1', 'k3', 'k9']"
report = ["any", "rate"]
""")


@st.composite
def events(draw, prefix: str, n_students: int):
    rows = []
    for s in range(n_students):
        n = draw(st.integers(1, 12))
        t = draw(st.floats(1e9, 1.1e9, allow_nan=False))  # seconds since 1970, the same axis in every log
        for _ in range(n):
            t += draw(st.sampled_from([0.5, 1.0, 2.0, 3.0, 7.5, 40.0]))
            rows.append({"student": f"{prefix}{s}", "time": t,
                         "action": draw(st.sampled_from(["attempt", "attempt", "hint"])),
                         "correct": draw(st.sampled_from([True, False, None])),
                         "step": draw(st.sampled_from(["k1", "k2", "k3", "k9", None])),
                         "skill": draw(st.sampled_from(["add", "sub", "mul", "div"])),
                         "duration": draw(st.sampled_from([0.5, 1.0, 4.0, 9.0, 30.0, None]))})
    return pd.DataFrame(rows).astype({"correct": "boolean"})


def _log(frame):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rulefeat.RulefeatWarning)
        return rulefeat.EventLog(frame)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(a=events("a", 4), b=events("b", 3), data=st.data())
def test_bound_transform_equals_transform_in_the_combined_log(a, b, data):
    # The training log names every label the rules write as text (the checker refuses unknown labels).
    a = pd.concat([a, pd.DataFrame({"student": "a-all", "time": 1e9 + np.arange(3.0), "action": "attempt",
                                    "correct": pd.array([True, False, True], dtype="boolean"),
                                    "step": ["k1", "k3", "k9"], "skill": "add", "duration": 2.0})],
                  ignore_index=True)
    log_a, log_b, log_ab = _log(a), _log(b), _log(pd.concat([a, b], ignore_index=True))
    train = pd.DataFrame({"student": sorted(a["student"].unique())})
    kind = data.draw(st.sampled_from(["student", "window"]))
    families = ["volume", "correctness", "timing", "mastery", "history"]
    mined = rulefeat.LogFeatures(log_a, unit=kind, families=families, prune=False, min_norm_events=1,
                                 bkt_options={"n_restarts": 1, "max_iter": 5, "min_attempts": 2}, random_state=0)
    rules = rulefeat.RuleFeatures(rules=RULES, log=log_a, unit=kind, min_count=1)
    if kind == "student":
        X_train, X_b = train, pd.DataFrame({"student": sorted(b["student"].unique())})
    else:
        X_train = a.groupby("student", as_index=False)["time"].agg(start="min", end="max")
        X_b = b.groupby("student", as_index=False)["time"].agg(start="min", end="max")
        X_b["end"] += 1.0  # half-open windows: keep the last event
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rulefeat.RulefeatWarning)
        for transformer in (rules, mined):
            fitted = transformer.fit(X_train)
            alone = rulefeat.bind(fitted, log_b, empty_units="empty").transform(X_b)
            joined = rulefeat.bind(fitted, log_ab, empty_units="empty").transform(X_b)
            pd.testing.assert_frame_equal(alone, joined, check_exact=True)
    assert np.isfinite(alone.to_numpy(dtype=float)).any()
