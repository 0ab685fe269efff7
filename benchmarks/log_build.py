"""Benchmark: building an EventLog from a large in-memory DataFrame of simulated events.

Targets (2 cores): <= 0.5 s per 1M events (issue 11), so 10M events in <= 5 s; peak memory <= 2x
the input DataFrame.  The one-time loading of the compiled passes is timed and printed apart.
Baseline measured in the same run: a hand-written pandas pass doing the minimum
(stable sort by student and time, per-student gaps, session split) without any
validation or accounting.

    python benchmarks/log_build.py              # 10M events
    python benchmarks/log_build.py --events 1e6
"""

from __future__ import annotations

import argparse
import gc
import time
import tracemalloc
import warnings

import numpy as np
import pandas as pd

from rulefeat import EventLog, LogRepairWarning
from rulefeat.simulate import tutor_logs


def simulated_events(n_events: int, seed: int) -> pd.DataFrame:
    """Simulate about 1M events and tile copies under new student ids up to ``n_events``."""
    base = tutor_logs(n_students=2000, seed=seed).events
    copies = int(np.ceil(n_events / len(base)))
    parts = []
    for k in range(copies):
        part = base.copy()
        part["student"] = part["student"].astype(str) + f"-{k}"
        parts.append(part)
    out = pd.concat(parts, ignore_index=True).iloc[:n_events]
    out["student"] = out["student"].astype("category")
    return out.sample(frac=1.0, random_state=seed).reset_index(drop=True)  # arrive unsorted


def baseline(df: pd.DataFrame) -> pd.DataFrame:
    out = df.sort_values(["student", "time"], kind="stable")
    seconds = out["time"].astype("int64") / 1e9
    gap = seconds.groupby(out["student"], observed=True).diff()
    session = (gap.isna() | (gap > 1800)).cumsum()
    return out.assign(gap=gap.where(gap <= 1800), session=session)


def measure(fn, df):
    gc.collect()
    tracemalloc.start()
    t0 = time.perf_counter()
    result = fn(df)
    elapsed = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return result, elapsed, peak


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--events", type=float, default=10e6)
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()
    df = simulated_events(int(args.events), args.seed)
    size = df.memory_usage(deep=True).sum()
    print(f"input: {len(df):,} events, {size / 2**20:,.0f} MiB in memory")

    def build(frame):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", LogRepairWarning)
            return EventLog(frame)

    t0 = time.perf_counter()
    build(df.iloc[:1000])  # the first build in a process loads the compiled passes from numba's disk cache
    print(f"first build of 1,000 rows in this process (loads the compiled passes): {time.perf_counter() - t0:.2f} s")
    log, t_log, peak_log = measure(build, df)
    _, t_base, peak_base = measure(baseline, df)
    print(f"EventLog: {t_log:6.2f} s  {len(df) / t_log:12,.0f} rows/s  peak {peak_log / 2**20:7,.0f} MiB "
          f"({peak_log / size:.2f}x input)   {t_log / len(df) * 1e6:.2f} s per 1M events (target <= 0.5 s, <= 2x input)")
    print(f"baseline: {t_base:6.2f} s  {len(df) / t_base:12,.0f} rows/s  peak {peak_base / 2**20:7,.0f} MiB "
          f"({peak_base / size:.2f}x input)   (sort + gaps + sessions only)")
    print(f"ratio EventLog / baseline: time {t_log / t_base:.2f}x, memory {peak_log / peak_base:.2f}x")
    print(f"log: {len(log):,} events, {log.n_students:,} students, {len(log.issues)} kinds of issue recorded")


if __name__ == "__main__":
    main()
