"""Benchmark: five typical rules, four ways, on the same simulated events.

1. a per-student Python loop (how such features are often hand-coded),
2. a hand-vectorized pandas groupby version,
3. the strongest baseline: numpy over the sorted arrays, as a careful expert writes it
   (shifted comparisons, segmented cumulative sums, one window search per (student, step),
   a pandas groupby median for the norm, fitted inside its timing),
4. rulefeat's RuleFeatures (fit on the windows' students, then transform).

All four must agree (asserted); so must RuleSet.evaluate and the sorted-array firings of the
four rules without window summaries.  Printed: median time of ``--repeat`` untraced runs,
events/s, peak traced memory of one more run, and ratios.
Targets on 2 cores: rulefeat <= 0.7x the sorted-array time (stretch 0.5x), >= 20x faster than the loop,
10M events x 10 rules <= 15 s with peak memory <= 2.5x the event table, and 10x the events
costs <= 11x the time.  The mined feature families have their own script, featurize_mined.py.

    python benchmarks/featurize.py            # 1M events (loop on a 100k-event subset)
    python benchmarks/featurize.py --big      # also 10M events x 10 rules and the scaling ratio
"""

from __future__ import annotations

import argparse
import gc
import statistics
import time
import tracemalloc
import warnings

import numpy as np
import pandas as pd

from rulefeat import EventLog, LogRepairWarning, Rule, RuleFeatures, RuleSet
from rulefeat.simulate import tutor_logs

RULES = {
    "skimmed_hint": "action == 'hint' and prev(action, within='step') == 'hint' and gap < 3s",
    "hasty_error": "action == 'attempt' and not correct and duration < 0.33 * typical(duration, per='step')",
    "struggling_alone": ("action == 'attempt' and not correct and count_before(action == 'attempt' and not "
                         "correct, within='step') >= 2 and count_before(action == 'hint', within='step') == 0"),
    "burst": "action == 'attempt' and count_recent(action == 'attempt', seconds=10, within='step') >= 3",
    "long_pause": "gap > 120s",
}
MORE_RULES = {  # five more of the same shapes, for the 10-rule measurement
    "skimmed_hint_2s": "action == 'hint' and prev(action, within='step') == 'hint' and gap < 2s",
    "hasty_error_half": "action == 'attempt' and not correct and duration < 0.5 * typical(duration, per='skill')",
    "struggling_3": ("action == 'attempt' and not correct and count_before(action == 'attempt' and not correct, "
                     "within='step') >= 3"),
    "burst_20s": "action == 'attempt' and count_recent(action == 'attempt', seconds=20, within='step') >= 4",
    "long_pause_5min": "gap > 5min",
}


def rule_features(log, names):
    rules = [Rule(n, when={**RULES, **MORE_RULES}[n], report=["count"]) for n in names]
    return lambda X: RuleFeatures(rules=rules, log=log).fit(X).transform(X)


# -- hand-vectorized ------------------------------------------------------------------------------------
def typical_by(frame, key, field="duration", min_count=5):
    stats = frame.groupby(key, observed=True)[field].agg(["count", "median"])
    overall = frame[field].median()
    per = stats["median"].where(stats["count"] >= min_count, overall)
    return frame[key].map(per).astype(float).fillna(overall).to_numpy()


def hand_vectorized(frame: pd.DataFrame, X: pd.DataFrame) -> pd.DataFrame:
    hint = (frame["action"] == "hint").to_numpy()
    attempt = (frame["action"] == "attempt").to_numpy()
    wrong = attempt & (frame["correct"] == False).fillna(False).to_numpy()  # noqa: E712 (nullable boolean)
    gap = frame["gap"].to_numpy()
    by_step = frame.groupby(["student", "step"], observed=True, sort=False)
    prev_action = by_step["action"].shift(1)
    fired = {"skimmed_hint": hint & (prev_action == "hint").to_numpy() & (gap < 3)}
    fired["hasty_error"] = wrong & (frame["duration"].to_numpy() < 0.33 * typical_by(frame, "step"))
    keyed = frame[["student", "step"]].assign(w=wrong.astype(int), h=hint.astype(int), a=attempt.astype(int))
    grouped = keyed.groupby(["student", "step"], observed=True, sort=False)
    before_wrong = grouped["w"].cumsum().to_numpy() - wrong
    before_hint = grouped["h"].cumsum().to_numpy() - hint
    fired["struggling_alone"] = wrong & (before_wrong >= 2) & (before_hint == 0)
    recent = recent_count(grouped.ngroup().to_numpy(), frame["time"].to_numpy(), attempt, 10.0)
    fired["burst"] = attempt & (recent >= 3)
    fired["long_pause"] = gap > 120
    return window_counts(frame, X, fired)


def exact_keys(group, t, queries):
    """Integer keys (group, rank of time) for events and for query times: exact, unlike group * big + t."""
    unique, rank = np.unique(t, return_inverse=True)
    width = len(unique) + 1
    return group * width + rank, [g * width + np.searchsorted(unique, q) for g, q in queries]


def recent_count(group, t, flag, seconds):
    """Events with ``flag`` in the same group within [t - seconds, t], up to and including each event."""
    order = np.lexsort((np.arange(len(t)), group))
    g, ts = group[order], t[order]
    key, (query,) = exact_keys(g, ts, [(g, ts - seconds)])
    csum = np.concatenate([[0], np.cumsum(flag[order])])
    first = np.searchsorted(key, query, side="left")
    out = np.empty(len(t))
    out[order] = csum[np.arange(1, len(t) + 1)] - csum[first]
    return out


def window_counts(frame, X, fired) -> pd.DataFrame:
    codes = frame["student"].cat.codes.to_numpy().astype(np.int64)
    xcodes = frame["student"].cat.categories.get_indexer(X["student"]).astype(np.int64)
    key, (start, end) = exact_keys(codes, frame["time"].to_numpy(),
                                   [(xcodes, X["start"].to_numpy()), (xcodes, X["end"].to_numpy())])
    lo = np.searchsorted(key, start, side="left")
    hi = np.searchsorted(key, end, side="left")
    out = {}
    for name, mask in fired.items():
        csum = np.concatenate([[0], np.cumsum(mask)])
        out[f"{name}__count"] = (csum[hi] - csum[lo]).astype(float)
    return pd.DataFrame(out, index=X.index)


# -- sorted arrays ----------------------------------------------------------------------------------------
def sorted_arrays(frame: pd.DataFrame, X: pd.DataFrame) -> pd.DataFrame:
    return window_counts(frame, X, sorted_firings(frame))


def sorted_firings(frame: pd.DataFrame) -> dict:
    """What a careful expert writes by hand: numpy over the (student, time)-sorted events.

    One stable sort by (student, step) lays every step attempt out contiguously; previous-event
    context is a shifted comparison, counts-before a segmented cumulative sum, the trailing
    window one search per (student, step) run, and the norm a pandas groupby median (fitted
    here, inside the timing).
    """
    action = frame["action"].cat.codes.to_numpy()
    labels = list(frame["action"].cat.categories)
    hint, attempt = action == labels.index("hint"), action == labels.index("attempt")
    correct = frame["correct"].to_numpy(dtype=np.float64, na_value=np.nan)
    wrong = attempt & (correct == 0)
    gap, duration, t = frame["gap"].to_numpy(), frame["duration"].to_numpy(), frame["time"].to_numpy()
    step = frame["step"].cat.codes.to_numpy().astype(np.int64)
    key = frame["student"].cat.codes.to_numpy().astype(np.int64) * (step.max() + 2) + step + 1
    order = np.argsort(key, kind="stable")
    k = key[order]
    first = np.ones(len(k), dtype=bool)
    first[1:] = k[1:] != k[:-1]
    start = np.maximum.accumulate(np.where(first, np.arange(len(k)), 0))
    valid = step[order] >= 0

    def to_log(sorted_values):
        out = np.empty_like(sorted_values)
        out[order] = sorted_values
        return out

    def before(flag):  # segmented cumulative sum, the current event excluded
        cs = np.concatenate([[0], np.cumsum(flag[order])])
        return to_log(cs[np.arange(len(k))] - cs[start])

    prev_hint = np.zeros(len(k), dtype=bool)
    prev_hint[1:] = ~first[1:] & hint[order][:-1]
    fired = {"skimmed_hint": hint & to_log(prev_hint & valid) & (gap < 3)}
    fired["hasty_error"] = wrong & (duration < 0.33 * typical_by(frame, "step"))
    fired["struggling_alone"] = wrong & to_log(valid) & (before(wrong) >= 2) & (before(hint) == 0)
    # Exact (group, time rank) keys; the needles t - 10 are searched in time order (sorted needles
    # keep the binary searches cache-friendly), so both key arrays come out sorted along the runs.
    by_time = np.argsort(t, kind="stable")
    t_sorted = t[by_time]
    new = np.ones(len(t), dtype=bool)
    new[1:] = t_sorted[1:] != t_sorted[:-1]
    unique = t_sorted[new]
    rank, shifted = np.empty(len(t), dtype=np.int64), np.empty(len(t), dtype=np.int64)
    rank[by_time] = np.cumsum(new) - 1
    shifted[by_time] = np.searchsorted(unique, t_sorted - 10.0, side="left")
    group = np.cumsum(first) - 1
    width = len(unique) + 1
    search, query = group * width + rank[order], group * width + shifted[order]
    lo = np.minimum(np.searchsorted(search, query, side="left"), np.arange(len(k)))
    cs = np.concatenate([[0], np.cumsum(attempt[order])])
    recent = to_log(cs[np.arange(1, len(k) + 1)] - cs[lo])
    fired["burst"] = attempt & to_log(valid) & (recent >= 3)
    fired["long_pause"] = gap > 120
    return fired


# -- per-student loop ------------------------------------------------------------------------------------
def per_student_loop(frame: pd.DataFrame, X: pd.DataFrame) -> pd.DataFrame:
    typical = typical_by(frame, "step")
    fired = {name: np.zeros(len(frame), dtype=bool) for name in RULES}
    rows = frame[["student", "step", "time", "action", "correct", "duration", "gap"]].itertuples(index=False)
    history: dict = {}
    for i, (student, step, t, action, correct, duration, gap) in enumerate(rows):
        h = history.setdefault((student, step), {"prev": None, "wrong": 0, "hint": 0, "attempt_times": []})
        is_wrong = action == "attempt" and correct is not pd.NA and not bool(correct)
        fired["skimmed_hint"][i] = action == "hint" and h["prev"] == "hint" and gap < 3
        fired["hasty_error"][i] = is_wrong and duration < 0.33 * typical[i]
        fired["struggling_alone"][i] = is_wrong and h["wrong"] >= 2 and h["hint"] == 0
        if action == "attempt":
            h["attempt_times"].append(t)
            fired["burst"][i] = sum(1 for s in h["attempt_times"] if s >= t - 10) >= 3
        fired["long_pause"][i] = gap > 120
        h["prev"], h["wrong"], h["hint"] = action, h["wrong"] + is_wrong, h["hint"] + (action == "hint")
    return window_counts(frame, X, fired)


# -- harness -----------------------------------------------------------------------------------------------
def measure(fn, *args, repeat=None):
    """(result, median seconds of untraced runs, peak traced bytes of one more run)."""
    times = []
    for _ in range(repeat or REPEAT):
        gc.collect()
        t0 = time.perf_counter()
        out = fn(*args)
        times.append(time.perf_counter() - t0)
    del out
    gc.collect()
    tracemalloc.start()
    out = fn(*args)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return out, statistics.median(times), peak


REPEAT = 3


def dataset(n_students, seed):
    sim = tutor_logs(n_students=n_students, seed=seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        log = EventLog(sim.events)
    frame = log.to_frame().reset_index(drop=True)
    frame["time"] = log.values("time")  # seconds on the log's axis, as the hand-written versions use
    X = sim.windows[["student", "start", "end"]].copy()
    return log, frame, X


def in_seconds(log, X):
    """The windows on the log's time axis, for the hand-written versions."""
    return X.assign(start=log.to_seconds(X["start"]), end=log.to_seconds(X["end"]))


def report(label, n, seconds, peak, table_bytes):
    print(f"  {label:<18} {seconds:8.2f} s  {n / seconds:14,.0f} events/s  peak {peak / 2**20:8,.0f} MiB "
          f"({peak / table_bytes:.2f}x event table)")


def run(n_students, seed, loop_students):
    log, frame, X = dataset(n_students, seed)
    table = frame.memory_usage(deep=True).sum()
    print(f"{len(log):,} events, {len(X):,} windows, {len(RULES)} rules (event table {table / 2**20:,.0f} MiB)")
    ours, t_ours, m_ours = measure(rule_features(log, list(RULES)), X)
    hand, t_hand, m_hand = measure(hand_vectorized, frame, in_seconds(log, X))
    arrays, t_arrays, m_arrays = measure(sorted_arrays, frame, in_seconds(log, X))
    pd.testing.assert_frame_equal(ours, hand[ours.columns], check_dtype=False)
    pd.testing.assert_frame_equal(ours, arrays[ours.columns], check_dtype=False)
    report("rulefeat", len(log), t_ours, m_ours, table)
    report("groupby pandas", len(log), t_hand, m_hand, table)
    report("sorted arrays", len(log), t_arrays, m_arrays, table)
    issue_rules = ["skimmed_hint", "hasty_error", "struggling_alone", "burst"]
    rules = RuleSet([Rule(n, when=RULES[n]) for n in issue_rules])
    fired, t_eval, _ = measure(rules.evaluate, log)
    by_hand, t_fire, _ = measure(sorted_firings, frame)
    for name in issue_rules:
        np.testing.assert_array_equal(fired[name].to_numpy(), by_hand[name])
    print(f"  firings only, {len(issue_rules)} rules: RuleSet.evaluate {t_eval:.2f} s, sorted arrays {t_fire:.2f} s "
          f"-> {t_eval / t_fire:.2f}x")
    sub_students = set(log.students[:loop_students])
    sub = frame[frame["student"].isin(sub_students)].reset_index(drop=True)
    sub["student"] = sub["student"].cat.remove_unused_categories()
    sub_x = X[X["student"].isin(sub_students)].reset_index(drop=True)
    looped, t_loop, m_loop = measure(per_student_loop, sub, in_seconds(log, sub_x))
    sub_log = log.for_students(sorted(sub_students))
    mine_sub = RuleFeatures(rules=[Rule(n, when=w, report=["count"]) for n, w in RULES.items()],
                            log=sub_log).fit(sub_x).transform(sub_x)
    hand_sub = hand_vectorized(sub, in_seconds(log, sub_x))
    pd.testing.assert_frame_equal(looped, hand_sub[looped.columns], check_dtype=False)
    pd.testing.assert_frame_equal(mine_sub, looped[mine_sub.columns], check_dtype=False)
    report(f"loop ({len(sub):,} ev)", len(sub), t_loop, m_loop, table)
    print(f"  all four agree. rulefeat / sorted arrays (the strongest baseline): {t_ours / t_arrays:.2f}x "
          f"(target <= 0.7x, stretch 0.5x); rulefeat / groupby pandas: {t_ours / t_hand:.2f}x; "
          f"loop / rulefeat per event: {(t_loop / len(sub)) / (t_ours / len(log)):.0f}x (target >= 20x)")
    return log, X, t_ours


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--students", type=int, default=1800, help="about 570 events per student")
    parser.add_argument("--big", action="store_true", help="also run 10x the students with 10 rules")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--repeat", type=int, default=3, help="timed runs per measurement (median printed)")
    args = parser.parse_args()
    global REPEAT
    REPEAT = args.repeat
    log, X, t_small = run(args.students, args.seed, loop_students=max(args.students // 10, 20))
    if not args.big:
        return
    big_log, big_frame, big_x = dataset(args.students * 10, args.seed + 1)
    table = big_frame.memory_usage(deep=True).sum()
    del big_frame
    gc.collect()
    t0 = time.perf_counter()
    rule_features(big_log, list(RULES))(big_x)
    t_first = time.perf_counter() - t0
    # Timed like the small run (median of --repeat runs on the same log), so the ratio compares like with like.
    five, t5, m5 = measure(rule_features(big_log, list(RULES)), big_x)
    ten, t10, m10 = measure(rule_features(big_log, [*RULES, *MORE_RULES]), big_x, repeat=1)
    print(f"{len(big_log):,} events, {len(big_x):,} windows")
    report("rulefeat 5 rules", len(big_log), t5, m5, table)
    report("rulefeat 10 rules", len(big_log), t10, m10, table)
    print(f"  first run of 5 rules on the new log (it builds its per-scope orderings): {t_first:.2f} s")
    print(f"  10 rules: {t10:.1f} s (target <= 15 s), peak {m10 / table:.2f}x table (target <= 2.5x); "
          f"10x events with 5 rules costs {t5 / t_small:.1f}x the time (target <= 11x)")


if __name__ == "__main__":
    main()
