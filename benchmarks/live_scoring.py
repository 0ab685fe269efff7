"""Live per-event scoring throughput: events/s and p99 latency per event, against the batch engine on the same log.

The five demo rules (rulefeat/data/demo_rules.toml), mined features off (``make_detector(..., mined=False)``), on
a simulated day of the Zorbleth platform replayed in time order across students.  Events go to
``LiveScorer.feed`` one at a time (as dicts) and in calls of 10, 100 and 1000 (DataFrame slices, made before the
clock starts).  A call's duration is the latency of every event in it; it covers ``feed`` and reading the
probabilities of the units the call closed (``unit_columns``), and in the second pair of columns also building
the call's ``units`` DataFrame.  The model predicts with one thread (``predict_params={"num_threads": 1}``):
LightGBM's threads cost more than they save on a call's few windows.  The baseline is the batch path on the same
events: building the EventLog, evaluating the rules and scoring every window, in one go.  It checks on the way
that the live probabilities equal the batch ones.  Figures depend on the machine's load; run it on a quiet one.

    python benchmarks/live_scoring.py [--students 120] [--single 3000]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
import pandas as pd

import rulefeat
from rulefeat.evaluate.value.engine import demo_rules_path
from rulefeat.simulate import tutor_logs


def setup(n_students: int):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rulefeat.RulefeatWarning)
        train = tutor_logs(n_students=80, seed=1)
        log = rulefeat.EventLog(train.events)
        X = train.windows[["student", "start", "end"]]
        detector = rulefeat.make_detector(log, demo_rules_path(), mined=False, random_state=0)
        detector.fit(X, train.windows["label"])
    day = tutor_logs(n_students=n_students, seed=2)
    events = day.events.sort_values("time", kind="stable").reset_index(drop=True)
    return detector, events, day.windows[["student", "start", "end"]]


def batch(detector, events, windows) -> tuple[float, np.ndarray]:
    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rulefeat.RulefeatWarning)
        p = rulefeat.bind(detector, rulefeat.EventLog(events)).predict_proba(windows)[:, 1]
    return time.perf_counter() - start, p


def live(detector, events, windows, size: int, limit: int | None, table: bool, empty_units: str = "error"):
    """(events/s, p99 ms per event, closed-unit tables) of one replay in calls of ``size``.

    A call's time covers ``feed`` and reading its closed units' probabilities (``unit_columns``); with
    ``table``, also building its ``units`` DataFrame (pandas' constructor costs more than the rest of a
    small call, so a service that keeps the arrays skips it).
    """
    part = events.iloc[:limit] if limit else events
    calls = ([row for row in part.to_dict("records")] if size == 1
             else [part.iloc[i:i + size] for i in range(0, len(part), size)])
    params = {"predict_params": {"num_threads": 1}} if not isinstance(detector, rulefeat.RuleFeatures) else {}
    scorer = rulefeat.LiveScorer(detector, windows=windows, empty_units=empty_units, **params)  # one thread
    took, units, read = [], [], []
    for call in calls:
        start = time.perf_counter()
        out = scorer.feed(call)
        read.append(out.units if table else out.unit_columns.get("probability"))
        took.append(time.perf_counter() - start)
        units.append(out)
    units = [out.units for out in units] + [scorer.close().units]
    per_event = np.repeat(took, [1 if size == 1 else len(c) for c in calls])
    return len(part) / sum(took), float(np.percentile(per_event, 99)) * 1e3, units


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--students", type=int, default=120, help="students in the replayed day (default 120)")
    parser.add_argument("--single", type=int, default=3000,
                        help="events fed one at a time (the slowest mode; default the first 3000)")
    args = parser.parse_args()
    detector, events, windows = setup(args.students)
    with warnings.catch_warnings():  # compile the kernels before any clock runs; the day's later windows
        warnings.simplefilter("ignore", rulefeat.RulefeatWarning)  # close empty when this prefix ends
        live(detector, events.iloc[:200], windows, 10, None, table=True, empty_units="empty")
    seconds, p = batch(detector, events, windows)
    base = len(events) / seconds
    print(f"{len(events):,} events, {events['student'].nunique()} students, {len(windows)} windows; 5 demo rules, "
          "no mined features")
    print(f"batch baseline (EventLog + rules + windows scored): {base:12,.0f} events/s")
    print(f"{'':>24} {'arrays (unit_columns)':^40} {'+ units DataFrame':^28}")
    print(f"{'live, events per call':>24} {'events/s':>12} {'x batch':>8} {'p99 latency/event':>18} "
          f"{'events/s':>12} {'p99 latency':>14}")
    rules_only = dict(detector.named_steps["features"].transformer_list)["rules"]
    for label, scorer in (("detector", detector), ("features only", rules_only)):
        print(f"-- {label}" + (" (firings and window features; no model predict_proba)" if scorer is rules_only
                               else " (firings, window features, probabilities)"))
        for size in (1, 10, 100, 1000):
            limit = args.single if size == 1 else None
            part = {"empty_units": "empty"} if limit else {}  # a prefix of the day leaves later windows empty
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", rulefeat.RulefeatWarning)
                rate, p99, units = live(scorer, events, windows, size, limit, table=False, **part)
                with_table, p99_table, _ = live(scorer, events, windows, size, limit, table=True, **part)
            print(f"{size:>24} {rate:12,.0f} {rate / base:8.2f} {p99:15.2f} ms {with_table:12,.0f} "
                  f"{p99_table:11.2f} ms")
            if size == 1000 and scorer is detector:
                table = [u for u in units if len(u)]
                got = pd.concat(table).merge(windows.assign(batch=p), on=["student", "start", "end"])
                same = bool((got["probability"] == got["batch"]).all()) and len(got) == len(windows)
                print(f"{'':>24} live probabilities equal batch for all {len(windows)} windows: {same}")


if __name__ == "__main__":
    main()
