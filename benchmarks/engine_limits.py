"""Benchmark: the rule engine's resource behaviour on hostile-but-legal inputs.

Four cases, each printed with its time and extra peak memory (traced allocations):

1. one rule with 400 trailing-window calls (distinct windows) on 200k events
   (target <= 8 s and <= 600 MiB extra, or refused at bind time naming the budget);
2. a chain of 3,000 rules, each referring to the previous, on a 20-student log (target <= 6 s);
3. a rule comparing a field that has 1M distinct labels with a misspelt label (error <= 3 s);
4. an EventLog whose action field has 64k distinct labels (built <= 3 s).

Each case is run ``--repeat`` times and the median is printed.  The events come from a
plain numpy generator of our own (no simulator), so the figures do not depend on it.

    python benchmarks/engine_limits.py
    python benchmarks/engine_limits.py --case chain --repeat 5
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

from rulefeat import EventLog, LogRepairWarning, Rule, RuleSet
from rulefeat.errors import RuleCheckError


def events(n_events: int, n_students: int, seed: int = 0, **extra) -> pd.DataFrame:
    """Sorted-by-nothing events: students, increasing times per student, attempts and hints on a few steps."""
    rng = np.random.default_rng(seed)
    student = np.sort(rng.integers(0, n_students, n_events))
    time = np.cumsum(rng.exponential(4.0, n_events))
    frame = pd.DataFrame({
        "student": pd.Categorical([f"p{s:05d}" for s in range(n_students)])[student],
        "time": time,
        "action": np.where(rng.random(n_events) < 0.7, "attempt", "hint"),
        "correct": np.where(rng.random(n_events) < 0.6, 1.0, 0.0),
        "step": rng.integers(0, 40, n_events).astype(str),
    })
    frame.loc[frame["action"] == "hint", "correct"] = np.nan
    for name, values in extra.items():
        frame[name] = values
    return frame


def quiet_log(frame: pd.DataFrame, **options) -> EventLog:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        return EventLog(frame, **options)


def measured(fn, repeat: int) -> tuple[float, float, object]:
    """(median seconds over ``repeat`` runs, extra peak MiB of one more traced run, last result).

    Timed runs are not traced: tracemalloc slows allocation-heavy Python code several times over.
    """
    times, out = [], None
    for _ in range(repeat):
        gc.collect()
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    gc.collect()
    tracemalloc.start()
    fn()
    peak = tracemalloc.get_traced_memory()[1] / 2**20
    tracemalloc.stop()
    return statistics.median(times), peak, out


def case_windows(repeat: int) -> str:
    log = quiet_log(events(200_000, 200))
    calls = " or ".join(f"count_recent(tried, seconds={k + 1}s) > {k // 4 + 2}" for k in range(400))
    rules = RuleSet([Rule("tried", when="action == 'attempt'", report=[]), Rule("many_windows", when=calls)])

    def run():
        try:
            return int(rules.evaluate(log)["many_windows"].sum())
        except RuleCheckError as exc:
            return f"refused: {str(exc).splitlines()[0][:160]}"
    t, peak, out = measured(run, repeat)
    return f"400 window calls, 200k events: {t:6.2f} s, +{peak:6.0f} MiB  ({out})  [target <= 8 s, <= 600 MiB]"


def case_chain(repeat: int) -> str:
    log = quiet_log(events(20 * 200, 20))
    rules = RuleSet([Rule("r0", when="action == 'hint' and gap < 30s")]
                    + [Rule(f"r{k}", when=f"r{k - 1} or (gap < {k % 7 + 1}s and prev(r{k - 1}))")
                       for k in range(1, 3000)])
    t, peak, out = measured(lambda: int(rules.evaluate(log).to_numpy().sum()), repeat)
    return f"3,000 chained rules, 20 students: {t:6.2f} s, +{peak:6.0f} MiB  ({out} firings)  [target <= 6 s]"


def case_misspelt(repeat: int) -> str:
    n = 1_000_000
    frame = events(n, 500, item=[f"item-{k:07d}" for k in range(n)])
    log = quiet_log(frame)
    rules = RuleSet([Rule("one_item", when="item == 'itme-0123456'")])

    def run():
        try:
            rules.bind(log)
        except RuleCheckError as exc:
            return str(exc).splitlines()[0][:120]
        return "no error"
    t, peak, out = measured(run, repeat)
    return f"misspelt label among 1M labels: {t:6.2f} s, +{peak:6.0f} MiB  ({out})  [target <= 3 s]"


def case_labels(repeat: int) -> str:
    n, k = 1_000_000, 64_000
    frame = events(n, 500)
    rng = np.random.default_rng(1)
    labels = np.array(["attempt", "hint", *(f"act{j:05d}" for j in range(k - 2))], dtype=object)
    frame["action"] = labels[np.concatenate([np.arange(k), rng.integers(0, k, n - k)])]
    t, peak, log = measured(lambda: quiet_log(frame), repeat)
    return (f"EventLog, 1M events with {len(log.categories('action')):,} action labels: {t:6.2f} s, "
            f"+{peak:6.0f} MiB  [target <= 3 s]")


CASES = {"windows": case_windows, "chain": case_chain, "misspelt": case_misspelt, "labels": case_labels}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--case", choices=[*CASES, "all"], default="all")
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    for name, case in CASES.items():
        if args.case in ("all", name):
            print(case(args.repeat), flush=True)


if __name__ == "__main__":
    main()
