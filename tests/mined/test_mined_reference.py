"""A plain-pandas reference of every mined feature, and checks of that reference against hand counts.

The reference is written from the formulas in docs/features.md with pandas
groupby operations only; it shares no code with rulefeat.mined or
rulefeat._aggregate.  test_mined_families.py compares LogFeatures with it, and
benchmarks/featurize_mined.py times it.  BKT forward filtering follows Corbett &
Anderson (1995), vectorized over sequences but written out here afresh.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from rulefeat import EventLog

TOKENS = ("right", "wrong", "hint")


# ----------------------------------------------------------------------------- events
def event_table(log: EventLog) -> pd.DataFrame:
    """The log's events in log order with labels restored, times in seconds, and pandas-derived flags."""
    f = log.to_frame().reset_index(drop=True)
    f["pos"] = np.arange(len(f))
    for name in f.columns:  # plain labels, so groupby and map behave alike on every pandas version
        if isinstance(f[name].dtype, pd.CategoricalDtype):
            f[name] = f[name].astype(object).where(f[name].notna(), None)
    if pd.api.types.is_datetime64_any_dtype(f["time"]):
        f["time"] = (f["time"] - f["time"].min()).dt.total_seconds()
    f["correct"] = f["correct"].astype("boolean").astype("Float64").to_numpy(dtype=float, na_value=np.nan)
    for name in ("step", "problem", "skill"):
        if name not in f:
            f[name] = pd.Series([None] * len(f), dtype=object)
    f["attempt"] = f["action"] == "attempt"
    f["hint"] = f["action"] == "hint"
    f["judged"] = f["attempt"] & f["correct"].notna()
    f["right"] = f["attempt"] & (f["correct"] == 1)
    f["wrong"] = f["attempt"] & (f["correct"] == 0)
    on_step = f["step"].notna()
    step_groups = f[on_step].groupby(["student", "step"], sort=False)
    attempts_so_far = step_groups["attempt"].cumsum()
    f["first_attempt"] = False
    f.loc[on_step, "first_attempt"] = f.loc[on_step, "attempt"] & (attempts_so_far == 1)
    f["hint_early"] = False
    f.loc[on_step, "hint_early"] = f.loc[on_step, "hint"] & (attempts_so_far == 0)
    f["elapsed"] = f["time"] - f.groupby(["student", "session"])["time"].transform("min")
    f["log_duration"] = np.log1p(f["duration"].clip(lower=0))
    f["token"] = np.select([f["right"], f["wrong"], f["hint"]], list(TOKENS), "other")
    return f


def unit_events(f: pd.DataFrame, X: pd.DataFrame, unit: str, n_last: int = 20) -> pd.DataFrame:
    """(unit, event) pairs: one row per event of every unit, sorted by unit then log order."""
    keys = X.reset_index(drop=True).assign(unit=lambda d: np.arange(len(d)))
    pairs = keys.merge(f, on="student", how="inner", suffixes=("_x", ""))
    if unit == "window":
        pairs = pairs[(pairs["time"] >= pairs["start"]) & (pairs["time"] < pairs["end"])]
    elif unit in ("step", "problem", "session"):
        pairs = pairs[pairs[f"{unit}_x"].astype(str) == pairs[unit].astype(str)]
    elif unit == "last":
        pairs = pairs[pairs["time"] <= pairs["time_x"]]
        pairs = pairs.groupby("unit", group_keys=False).tail(n_last)
    return pairs.sort_values(["unit", "pos"]).reset_index(drop=True)


# ----------------------------------------------------------------------------- reference
def reference(log: EventLog, X: pd.DataFrame, unit: str, train_students, params=None, *,
              min_norm_events: int = 5, quantiles=(0.9, 0.99), threshold: float = 0.95,
              level: str = "hint_level", total: str = "hint_levels_total", pairs=None) -> pd.DataFrame:
    """Every mined feature of every row of X, named ``family__feature``."""
    f = event_table(log)
    p = unit_events(f, X, unit) if pairs is None else pairs
    n = len(X)
    g = p.groupby("unit")
    out = {}
    out.update(_volume(p, g))
    out.update(_correctness(p, g, out["volume__steps"]))
    out.update(_help(p, g, out["volume__steps"], level, total))
    train = f[f["student"].isin(set(train_students))]
    out.update(_timing(f, p, g, train, min_norm_events, quantiles))
    out.update(_sequence(p, g))
    out.update(_history(f, p, g))
    out.update(_mastery(f, p, params, threshold))
    frame = pd.DataFrame({k: v for k, v in out.items()}).reindex(np.arange(n))
    counts = [c for c in frame if c.split("__")[1] in _COUNT_FEATURES or "__pauses_over_" in c]
    frame[counts] = frame[counts].fillna(0.0)
    return frame


_COUNT_FEATURES = {"actions", "attempts", "hints", "steps", "problems", "skills", "longest_error_streak",
                   "prior_attempts"}


def _div(num: pd.Series, den: pd.Series) -> pd.Series:
    num, den = num.astype(float), den.astype(float)
    return (num / den.where(den > 0)).where(den > 0)


def _volume(p, g) -> dict:
    last = g.tail(1).set_index("unit")
    first = g.head(1).set_index("unit")
    active = last["time"] + last["duration"].fillna(0.0) - first["time"]
    minutes = active / 60.0
    actions, attempts, hints = g.size().astype(float), g["attempt"].sum(), g["hint"].sum()
    return {"volume__actions": actions, "volume__attempts": attempts, "volume__hints": hints,
            "volume__active_seconds": active, "volume__actions_per_minute": _div(actions, minutes),
            "volume__attempts_per_minute": _div(attempts, minutes),
            "volume__hints_per_minute": _div(hints, minutes),
            "volume__steps": g["step"].nunique(), "volume__problems": g["problem"].nunique(),
            "volume__skills": g["skill"].nunique()}


def _correctness(p, g, steps) -> dict:
    judged = p[p["judged"]].copy()
    judged["run"] = (~judged["wrong"]).astype(int).groupby(judged["unit"]).cumsum()
    streak = judged[judged["wrong"]].groupby(["unit", "run"]).size().groupby(level="unit").max()
    first = p[p["judged"] & p["first_attempt"]].groupby("unit")
    return {"correctness__accuracy": _div(g["right"].sum(), g["judged"].sum()),
            "correctness__first_attempt_accuracy": _div(first["right"].sum(), first.size()),
            "correctness__errors_per_step": _div(g["wrong"].sum(), steps),
            "correctness__longest_error_streak": streak}


def _help(p, g, steps, level, total) -> dict:
    early = p[p["hint_early"]].groupby("unit")["step"].nunique().reindex(steps.index, fill_value=0)
    out = {"help__hints_per_step": _div(g["hint"].sum(), steps),
           "help__hint_before_attempt_step_share": _div(early, steps)}
    if level in p and total in p:
        hints = p[p["hint"]]
        bottom = hints[(hints[total] > 0) & (hints[level] >= hints[total])]
        reached = bottom.groupby("unit")["step"].nunique().reindex(steps.index, fill_value=0)
        share = _div(reached, steps)
        known = hints[hints[level].notna() & hints[total].notna()].groupby("unit").size()
        has_hints = hints.groupby("unit").size()
        unknown = has_hints.index[~has_hints.index.isin(known.index)]
        out["help__last_hint_step_share"] = share.where(~share.index.isin(unknown))
    else:
        out["help__last_hint_step_share"] = pd.Series(np.nan, index=steps.index)
    return out


def _norm(train, p, key, base, min_events):
    overall = train[base].median()  # over every training duration, with or without a key
    values = train[[key, base]].dropna()
    per = values.groupby(key)[base].agg(["median", "size"])
    per = per[(per["size"] >= min_events) & (per["median"] > 0)]["median"]
    return p[key].map(per).astype(float).fillna(overall)


def _timing(f, p, g, train, min_events, quantiles) -> dict:
    out = {}
    for base in ("duration", "log_duration"):
        for suffix, key in (("", None), ("_norm_step", "step"), ("_norm_skill", "skill")):
            values = p[base]
            if key is not None:
                typical = _norm(train, p, key, base, min_events)
                values = values - typical if base == "log_duration" else (values / typical).where(typical > 0)
            grouped = values.groupby(p["unit"])
            for name, series in (("mean", grouped.mean()), ("median", grouped.median()),
                                 ("max", grouped.max()), ("sd", grouped.std(ddof=1))):
                out[f"timing__{base}_{name}{suffix}"] = series
    gaps = train["gap"].dropna()
    for q in quantiles:
        cut = gaps.quantile(q) if len(gaps) else np.nan
        label = f"{q * 100:g}".replace(".", "_")
        out[f"timing__pauses_over_q{label}"] = (p["gap"] > cut).groupby(p["unit"]).sum()
    out["timing__session_elapsed_at_start"] = g["elapsed"].first()
    out["timing__session_elapsed_at_end"] = g["elapsed"].last()
    return out


def _sequence(p, g) -> dict:
    prev_pos = g["pos"].shift()
    linked = prev_pos == p["pos"] - 1
    prev_token = g["token"].shift()
    total = linked.groupby(p["unit"]).sum()
    out = {}
    for a in TOKENS:
        for b in TOKENS:
            hit = linked & (prev_token == a) & (p["token"] == b)
            out[f"sequence__{a}_then_{b}"] = _div(hit.groupby(p["unit"]).sum(), total)
    return out


def _history(f, p, g) -> dict:
    unit_skills = p.dropna(subset=["skill"])[["unit", "student", "skill"]].drop_duplicates()
    unit_skills = unit_skills.merge(g["time"].min().rename("t0"), left_on="unit", right_index=True)
    past = unit_skills.merge(f.dropna(subset=["skill"]), on=["student", "skill"])
    past = past[past["time"] < past["t0"]]
    sums = past.groupby("unit")[["attempt", "judged", "right", "hint"]].sum()
    sums["action"] = past.groupby("unit").size()
    sums = sums.reindex(g.size().index, fill_value=0)
    return {"history__prior_accuracy": _div(sums["right"], sums["judged"]),
            "history__prior_hint_rate": _div(sums["hint"], sums["action"]),
            "history__prior_attempts": sums["attempt"].astype(float)}


def bkt_trace(f: pd.DataFrame, params) -> pd.DataFrame:
    """P(known) before/after and P(correct) of every judged attempt (Corbett & Anderson 1995).

    Sequences are (student, skill) with unlabelled attempts one sequence per
    student; the loop runs over the position within a sequence, updating every
    sequence at that position at once.
    """
    att = f[f["judged"]].copy()
    skills = list(params["skills"])
    att["code"] = att["skill"].map({s: i for i, s in enumerate(skills)}).fillna(-1).astype(int)
    table = params["table"](att["code"].to_numpy())
    L0, T, G, S = (table[:, k] for k in range(4))
    att["k"] = att.groupby(["student", "code"]).cumcount()
    c = att["correct"].to_numpy()
    before, after, pc = np.empty(len(att)), np.empty(len(att)), np.empty(len(att))
    seq = att.groupby(["student", "code"]).ngroup().to_numpy()
    prior = np.zeros(seq.max() + 1 if len(seq) else 0)
    k = att["k"].to_numpy()
    for step in range(int(k.max()) + 1 if len(k) else 0):
        rows = np.flatnonzero(k == step)
        s = seq[rows]
        L = np.where(step == 0, L0[rows], prior[s])
        right = L * (1 - S[rows]) + (1 - L) * G[rows]
        post = np.where(c[rows] == 1, L * (1 - S[rows]) / right, L * S[rows] / (1 - right))
        before[rows], pc[rows] = L, right
        after[rows] = post + (1 - post) * T[rows]
        prior[s] = after[rows]
    att["before"], att["after"], att["p_correct"] = before, after, pc
    return att[["pos", "code", "before", "after", "p_correct"]]


MASTERY = ("p_known_at_start", "p_known_at_end", "p_known_mean", "p_known_change", "mastered_attempt_share",
           "surprise_mean")


def _mastery(f, p, params, threshold) -> dict:
    if params is None:  # no model: the training students made no judged attempt
        return {f"mastery__{name}": pd.Series(np.nan, index=[0]) for name in MASTERY}
    trace = bkt_trace(f, params)
    a = p.merge(trace, on="pos")
    a = a.sort_values(["unit", "pos"])
    by_skill = a.groupby(["unit", "code"])
    start = by_skill["before"].first().groupby(level="unit").mean()
    end = by_skill["after"].last().groupby(level="unit").mean()
    unit = a.groupby("unit")
    return {"mastery__p_known_at_start": start, "mastery__p_known_at_end": end,
            "mastery__p_known_mean": unit["before"].mean(), "mastery__p_known_change": end - start,
            "mastery__mastered_attempt_share": (a["before"] >= threshold).groupby(a["unit"]).mean(),
            "mastery__surprise_mean": (a["correct"] - a["p_correct"]).groupby(a["unit"]).mean()}


def bkt_params_of(features, log: EventLog) -> dict:
    """What the reference needs from a fitted LogFeatures' BKT model: skill labels and a parameter lookup."""
    model = features.family_state_["mastery"]
    if model is None:
        return None
    return {"skills": log.categories("skill") if log.has("skill") else [], "table": model.params_.for_skills}


# ----------------------------------------------------------------------------- checks of the reference
def hand_log() -> EventLog:
    """Two students; the expected numbers in the tests below were counted by hand from this table."""
    events = pd.DataFrame({
        "student": ["s1"] * 7 + ["s2"] * 3,
        "time": [0.0, 10.0, 12.0, 20.0, 30.0, 35.0, 100.0, 0.0, 50.0, 60.0],
        "action": ["attempt", "hint", "hint", "attempt", "attempt", "attempt", "attempt",
                   "hint", "attempt", "attempt"],
        "correct": [0, None, None, 0, 1, 0, 1, None, 1, 0],
        "step": ["a", "a", "a", "a", "a", "b", "c", "x", "x", "y"],
        "skill": ["k1", "k1", "k1", "k1", "k1", "k2", "k1", "k1", "k1", None],
        "duration": [10.0, 2.0, 8.0, 10.0, 5.0, 65.0, 4.0, 50.0, 10.0, np.nan],
        "hint_level": [np.nan, 1, 2, np.nan, np.nan, np.nan, np.nan, 1, np.nan, np.nan],
        "hint_levels_total": [np.nan, 2, 2, np.nan, np.nan, np.nan, np.nan, 3, np.nan, np.nan],
    })
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return EventLog(events)


HAND_WINDOWS = pd.DataFrame({"student": ["s1", "s1", "s2"], "start": [0.0, 25.0, 0.0],
                             "end": [31.0, 200.0, 100.0]})


@pytest.fixture(scope="module")
def hand_reference():
    return reference(hand_log(), HAND_WINDOWS, "window", ["s1", "s2"], min_norm_events=1)


def test_reference_counts_by_hand(hand_reference):
    r = hand_reference
    assert r["volume__actions"].tolist() == [5, 3, 3]
    assert r["volume__attempts"].tolist() == [3, 3, 2]
    # Window 0: from t=0 to the end of the attempt at 30 (+5 s) = 35 s, 5 actions -> 5 / (35/60) per minute.
    assert r["volume__active_seconds"].tolist() == [35.0, 74.0, 60.0]
    assert r.loc[0, "volume__actions_per_minute"] == pytest.approx(5 / (35 / 60))
    assert r["volume__steps"].tolist() == [1, 3, 2]
    assert r["volume__skills"].tolist() == [1, 2, 1]


def test_reference_correctness_and_help_by_hand(hand_reference):
    r = hand_reference
    assert r["correctness__accuracy"].tolist() == pytest.approx([1 / 3, 2 / 3, 1 / 2])
    # s1 step a: first attempt (t=0) wrong; window 1 holds the first attempts on b (wrong) and c (right).
    assert r["correctness__first_attempt_accuracy"].tolist() == pytest.approx([0.0, 0.5, 0.5])
    assert r["correctness__longest_error_streak"].tolist() == [2, 1, 1]  # hints do not break a run
    assert r["correctness__errors_per_step"].tolist() == pytest.approx([2.0, 1 / 3, 1 / 2])
    assert r["help__hints_per_step"].tolist() == pytest.approx([2.0, 0.0, 0.5])
    # s2 asked for a hint on x before attempting it; s1's hints on a came after an attempt.
    assert r["help__hint_before_attempt_step_share"].tolist() == pytest.approx([0.0, 0.0, 0.5])
    # s1 reached level 2 of 2 on step a; s2 saw level 1 of 3.
    assert r["help__last_hint_step_share"].tolist() == pytest.approx([1.0, 0.0, 0.0])


def test_reference_sequence_and_history_by_hand(hand_reference):
    r = hand_reference
    # Window 0 stream: wrong, hint, hint, wrong, right -> 4 pairs.
    assert r.loc[0, "sequence__wrong_then_hint"] == pytest.approx(0.25)
    assert r.loc[0, "sequence__hint_then_hint"] == pytest.approx(0.25)
    assert r.loc[0, "sequence__hint_then_wrong"] == pytest.approx(0.25)
    assert r.loc[0, "sequence__wrong_then_right"] == pytest.approx(0.25)
    # Window 1 starts at t=30 on skills k1, k2: before it s1 made 2 k1 attempts (both wrong) and 2 hints.
    assert r.loc[1, "history__prior_attempts"] == 2
    assert r.loc[1, "history__prior_accuracy"] == 0.0
    assert r.loc[1, "history__prior_hint_rate"] == pytest.approx(0.5)
    assert np.isnan(r.loc[0, "history__prior_accuracy"])


def test_reference_timing_by_hand(hand_reference):
    r = hand_reference
    assert r.loc[0, "timing__duration_mean"] == pytest.approx(7.0)
    assert r.loc[0, "timing__duration_median"] == pytest.approx(8.0)
    # Step a's median duration over all training events is 8 s (10, 2, 8, 10, 5).
    assert r.loc[0, "timing__duration_max_norm_step"] == pytest.approx(10 / 8)
    assert r.loc[0, "timing__session_elapsed_at_end"] == 30.0


def test_reference_bkt_trace_matches_example_hand_computed_from_published_equations():
    """Hand-computed from the published equations of Corbett & Anderson (1995): L0 .4, T .1, G .2, S .1."""
    f = pd.DataFrame({"student": ["s"] * 3, "skill": ["k"] * 3, "judged": True, "pos": [0, 1, 2],
                      "correct": [1.0, 0.0, 1.0]})
    params = {"skills": ["k"], "table": lambda codes: np.tile([0.4, 0.1, 0.2, 0.1], (len(codes), 1))}
    trace = bkt_trace(f, params)
    assert trace["p_correct"].tolist() == pytest.approx([0.48, 0.7425, 0.459612], abs=1e-6)
    assert trace["after"].tolist() == pytest.approx([0.775, 191 / 515, 991 / 1315])
