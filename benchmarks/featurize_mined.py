"""Benchmark: LogFeatures with every default family on simulated windows, against plain pandas.

Targets (2 cores): the full default set on 10M events <= 100 s with peak memory
<= 3x the event table; BKT fit + forward on 1M attempts <= 15 s; 10x the events
<= 11x the time.  The baseline, measured in the same run, is the hand-written
pandas groupby version of the same features in tests/test_mined_reference.py;
the script asserts that both agree on every feature.

    python benchmarks/featurize_mined.py                 # about 1M events
    python benchmarks/featurize_mined.py --big           # 1M and 10M events, and the 10x time ratio
    python benchmarks/featurize_mined.py --no-reference  # skip the (slow, memory-hungry) pandas baseline
"""

from __future__ import annotations

import argparse
import gc
import sys
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from rulefeat import EventLog, LogRepairWarning
from rulefeat.mined.mastery import BKT
from rulefeat.mined.transformer import LogFeatures
from rulefeat.simulate import tutor_logs

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "mined"))
from test_mined_reference import bkt_params_of, event_table, reference  # noqa: E402

BASE_STUDENTS = 2000  # about 1.1M events with the simulator's defaults


def simulated(n_events: int, seed: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Events and windows of about ``n_events``: one simulation, tiled under new student ids."""
    sim = tutor_logs(n_students=BASE_STUDENTS, seed=seed)
    copies = max(1, int(round(n_events / len(sim.events))))
    events, windows = [], []
    for k in range(copies):
        rename = {s: f"{s}-{k}" for s in sim.events["student"].cat.categories}
        events.append(sim.events.assign(student=sim.events["student"].astype(str).map(rename)))
        windows.append(sim.windows.assign(student=sim.windows["student"].astype(str).map(rename)))
    events = pd.concat(events, ignore_index=True)
    events["student"] = events["student"].astype("category")
    return events, pd.concat(windows, ignore_index=True)


def traced(fn):
    """(result, seconds, peak traced bytes) of ``fn()``."""
    gc.collect()
    tracemalloc.start()
    t0 = time.perf_counter()
    result = fn()
    seconds = time.perf_counter() - t0
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return result, seconds, peak


def log_bytes(log: EventLog) -> int:
    return sum(log.values(name).nbytes for name in log.fields) + log.row_numbers.nbytes


def window_pairs(log: EventLog, windows: pd.DataFrame) -> pd.DataFrame:
    """(unit, event) pairs of non-overlapping windows with pandas merge_asof (the reference's unit step)."""
    f = event_table(log)
    origin = log.decoded("time").min()
    keys = pd.DataFrame({"student": windows["student"].astype(str).to_numpy(),
                         "unit": np.arange(len(windows)),
                         "start": (windows["start"] - origin).dt.total_seconds().to_numpy(),
                         "end": (windows["end"] - origin).dt.total_seconds().to_numpy()})
    f["student"] = f["student"].astype(str)
    joined = pd.merge_asof(f.sort_values("time"), keys.sort_values("start"), left_on="time",
                           right_on="start", by="student", direction="backward")
    joined = joined[joined["time"] < joined["end"]]
    joined["unit"] = joined["unit"].astype(np.int64)
    return joined.sort_values(["unit", "pos"]).reset_index(drop=True)


def run_size(n_events: int, seed: int, with_reference: bool) -> dict:
    events, windows = simulated(n_events, seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        log = EventLog(events)
    X = windows[["student", "start", "end"]]
    feats = LogFeatures(log, prune=False, random_state=0)
    out, seconds, peak = traced(lambda: feats.fit_transform(X, windows["label"]))
    row = {"events": len(log), "windows": len(X), "features": out.shape[1], "seconds": seconds,
           "events_per_s": len(log) / seconds, "peak_mb": peak / 2**20, "table_mb": log_bytes(log) / 2**20}
    again = time.perf_counter()
    feats.transform(X)
    row["transform_seconds"] = time.perf_counter() - again
    if with_reference:
        t0 = time.perf_counter()
        pairs = window_pairs(log, windows)
        want = reference(log, X, "window", X["student"].unique(), bkt_params_of(feats, log),
                         pairs=pairs)
        row["pandas_seconds"] = time.perf_counter() - t0
        # BKT recursions over long sequences differ in the last digits between the numba kernel and
        # the reference's algebra; P(known) differences near 1 then show ~1e-8 absolute noise.
        for col in out.columns:
            np.testing.assert_allclose(out[col].to_numpy(), want[col].to_numpy(dtype=float), rtol=1e-7,
                                       atol=1e-6, equal_nan=True, err_msg=col)
        row["agree"] = True
    return row, log


def run_bkt(log: EventLog, n_attempts: int) -> dict:
    """BKT fit + forward (default options, seeded) on ``n_attempts`` judged attempts.

    The log's attempts are repeated under new student codes when it has fewer.
    """
    judged = np.flatnonzero((log.values("action") == log.categories("action").get_loc("attempt"))
                            & (log.values("correct") >= 0))
    student, skill = log.values("student")[judged], log.values("skill")[judged]
    correct = log.values("correct")[judged]
    copies = -(-n_attempts // len(judged))
    width = int(student.max()) + 1
    student = np.concatenate([student.astype(np.int64) + k * width for k in range(copies)])[:n_attempts]
    skill, correct = np.tile(skill, copies)[:n_attempts], np.tile(correct, copies)[:n_attempts]
    t0 = time.perf_counter()
    model = BKT(random_state=0).fit(student, skill, correct)
    fitted = time.perf_counter() - t0
    model.forward(student, skill, correct)
    return {"attempts": len(student), "fit_seconds": fitted, "fit_forward_seconds": time.perf_counter() - t0}


def show(rows: list[dict], bkt: dict) -> None:
    for row in rows:
        line = (f"{row['events']:>11,} events {row['windows']:>8,} windows {row['features']} features: "
                f"fit_transform {row['seconds']:7.2f} s ({row['events_per_s']:,.0f} events/s), "
                f"transform {row['transform_seconds']:6.2f} s, peak {row['peak_mb']:8.1f} MiB = "
                f"{row['peak_mb'] / row['table_mb']:.2f}x the event table ({row['table_mb']:.1f} MiB)")
        if "pandas_seconds" in row:
            line += (f"; pandas baseline {row['pandas_seconds']:7.2f} s "
                     f"(x{row['pandas_seconds'] / row['seconds']:.1f} slower), agree on every feature")
        print(line)
    if len(rows) == 2:
        print(f"{rows[1]['events'] / rows[0]['events']:.1f}x events -> "
              f"{rows[1]['seconds'] / rows[0]['seconds']:.2f}x time")
    print(f"BKT fit + forward on {bkt['attempts']:,} attempts: {bkt['fit_forward_seconds']:.2f} s "
          f"(fit {bkt['fit_seconds']:.2f} s)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--big", action="store_true", help="also run 10M events")
    parser.add_argument("--events", type=float, default=1e6, help="events of the small run")
    parser.add_argument("--no-reference", action="store_true", help="skip the pandas baseline")
    parser.add_argument("--seed", type=int, default=3)
    args = parser.parse_args()
    rows = []
    small, log = run_size(int(args.events), args.seed, not args.no_reference)
    rows.append(small)
    bkt = run_bkt(log, 1_000_000)
    del log
    if args.big:
        big, _ = run_size(int(args.events) * 10, args.seed, not args.no_reference)
        rows.append(big)
    show(rows, bkt)


if __name__ == "__main__":
    main()
