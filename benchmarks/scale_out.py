"""Benchmark: featurize and evaluate a student-partitioned log on a local Dask cluster of 2 workers.

The events are simulated in chunks of students (never the whole log in one process) and streamed into
a partitioned Parquet dataset; then, on ``LocalCluster(n_workers=2, threads_per_worker=1,
memory_limit="6GB")``, the rule and mined transformers are fitted on 80 % of the students
(rulefeat.scale.fit) and transform every window (rulefeat.scale.transform), and a small evaluation runs
(rulefeat.scale.incremental_value, cv=2).  Targets (2 cores): events/s per worker; 10M -> 50M events
costs <= 5.5x the featurizing time; no worker above its memory limit.  The baseline of the ratios is
the smallest size measured in the same run; with ``--single`` the smallest size is also featurized by
one process holding the whole log, for a cluster-vs-one-process ratio.  Before any timing each worker
featurizes a tiny log once, so the first size is not charged the workers' one-time JIT compilation.
The client's own peak resident memory is printed too: the simulation streams, so it must stay far below
the size of the log.

    python benchmarks/scale_out.py --events 1M            # quick
    python benchmarks/scale_out.py --events 1M,10M        # the 10x step
    python benchmarks/scale_out.py --events 10M,50M       # the issue's sizes (long on 2 cores)
"""

from __future__ import annotations

import argparse
import shutil
import tempfile
import threading
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from rulefeat import EventLog, LogFeatures, LogRepairWarning, RuleFeatures, scale
from rulefeat.evaluate.value.engine import demo_rules_path
from rulefeat.simulate import tutor_logs

CHUNK_STUDENTS = 1000  # about 550k events per simulated chunk
EVENTS_PER_STUDENT = 550


def parse_events(text: str) -> list[int]:
    scale_of = {"k": 1_000, "m": 1_000_000}
    out = []
    for item in text.split(","):
        item = item.strip().lower()
        out.append(int(float(item[:-1]) * scale_of[item[-1]]) if item[-1] in scale_of else int(item))
    return out


def simulate_into(path: Path, n_events: int, n_partitions: int, seed: int) -> tuple[scale.DistributedLog, pd.DataFrame]:
    """Stream about ``n_events`` simulated events into a partitioned dataset; return it and the windows."""
    windows, n_chunks = [], max(1, round(n_events / (CHUNK_STUDENTS * EVENTS_PER_STUDENT)))
    with scale.PartitionWriter(path, n_partitions) as out:
        for chunk in range(n_chunks):
            sim = tutor_logs(n_students=CHUNK_STUDENTS, seed=seed + chunk)
            events, wins = sim.events, sim.windows[["student", "start", "end", "label"]].copy()
            rename = {s: f"c{chunk:03d}-{s}" for s in events["student"].cat.categories}
            events["student"] = events["student"].cat.rename_categories(rename)
            wins["student"] = wins["student"].cat.rename_categories(rename).astype(str)
            out.write(events)
            windows.append(wins)
            del sim, events
    return scale.DistributedLog(path), pd.concat(windows, ignore_index=True)


class PeakMemory:
    """Poll every worker's resident memory (if ``client``) and this process's twice a second; keep the peaks."""

    def __init__(self, client):
        self.client, self.peak, self._stop = client, {}, threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _run(self):
        while not self._stop.is_set():
            try:
                found = {**(self.client.run(_rss) if self.client is not None else {}), "client": _rss()}
                for worker, rss in found.items():
                    self.peak[worker] = max(self.peak.get(worker, 0), rss)
            except Exception:  # a worker restarting is reported by the run itself
                pass
            self._stop.wait(0.5)

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()


def _rss() -> int:
    import psutil
    return psutil.Process().memory_info().rss


def featurize(dlog, windows, client) -> dict:
    units = windows[["student", "start", "end"]]
    students = np.sort(units["student"].unique())
    train = units[units["student"].isin(set(students[: int(0.8 * len(students))]))]
    t1 = time.perf_counter()
    rules = scale.fit(RuleFeatures(None, demo_rules_path()), dlog, train, client=client)
    mined = scale.fit(LogFeatures(None, random_state=0), dlog, train, client=client)
    t2 = time.perf_counter()
    table_r = scale.transform(rules, dlog, units, client=client)
    table_m = scale.transform(mined, dlog, units, client=client)
    t3 = time.perf_counter()
    return {"fit": t2 - t1, "transform": t3 - t2, "total": t3 - t1,
            "features": table_r.shape[1] + table_m.shape[1], "units": len(units)}


def warm_up() -> None:
    """Featurize a tiny log in this process: compiles the JIT kernels (run on every worker before timing)."""
    sim = tutor_logs(n_students=6, seed=0)
    log, units = EventLog(sim.events), sim.windows[["student", "start", "end"]]
    RuleFeatures(log, demo_rules_path()).fit(units).transform(units)
    LogFeatures(log, random_state=0, bkt_options={"n_restarts": 1, "max_iter": 5}).fit(units).transform(units)


def evaluate(dlog, windows, client) -> float:
    t0 = time.perf_counter()
    scale.incremental_value(dlog, windows, "label", demo_rules_path(), client=client, n_jobs=2, cv=2, n_boot=100,
                            ablation=False, learning_curve=(1.0,), transfer=False, random_state=0,
                            mined={"bkt_options": {"n_restarts": 1}})
    return time.perf_counter() - t0


def single_process(dlog, windows) -> float:
    """The same featurizing in one process holding every event (the baseline of the smallest size)."""
    frames = [dlog.read(k) for k in range(dlog.n_partitions)]
    t0 = time.perf_counter()
    log = EventLog(pd.concat(frames, ignore_index=True))
    del frames
    units = windows[["student", "start", "end"]]
    students = np.sort(units["student"].unique())
    train = units[units["student"].isin(set(students[: int(0.8 * len(students))]))]
    RuleFeatures(log, demo_rules_path()).fit(train).transform(units)
    LogFeatures(log, random_state=0).fit(train).transform(units)
    return time.perf_counter() - t0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--events", default="1M", help="comma-separated sizes, e.g. 1M,10M,50M")
    parser.add_argument("--partitions", type=int, default=0,
                        help="partitions (default: scale.partitions_for, about 500k events each, at least 4)")
    parser.add_argument("--memory-limit", default="6GB")
    parser.add_argument("--no-evaluate", action="store_true", help="featurize only")
    parser.add_argument("--single", action="store_true", help="also featurize the smallest size in one process")
    args = parser.parse_args()
    from distributed import Client, LocalCluster

    warnings.simplefilter("ignore", LogRepairWarning)
    sizes, rows = parse_events(args.events), []
    with tempfile.TemporaryDirectory() as tmp, LocalCluster(
            n_workers=2, threads_per_worker=1, memory_limit=args.memory_limit, processes=True,
            dashboard_address=None) as cluster, Client(cluster) as client:
        n_workers = len(client.scheduler_info()["workers"])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            client.run(warm_up)
        for n in sizes:
            parts = args.partitions or max(4, scale.partitions_for(n))
            t0 = time.perf_counter()
            with PeakMemory(None) as own:
                dlog, windows = simulate_into(Path(tmp) / f"events-{n}", n, parts, seed=1)
            simulate_s = time.perf_counter() - t0
            with PeakMemory(client) as memory:
                timing = featurize(dlog, windows, client)
                print(f"{dlog.n_events:,} events featurized in {timing['total']:.1f} s "
                      f"(fit {timing['fit']:.1f} s, transform {timing['transform']:.1f} s)", flush=True)
                client.run(_collect)
                eval_s = float("nan") if args.no_evaluate else evaluate(dlog, windows, client)
            peak = max((v for k, v in memory.peak.items() if k != "client"), default=float("nan"))
            single_s = single_process(dlog, windows) if args.single and n == min(sizes) else float("nan")
            rows.append({"events": dlog.n_events, "partitions": parts, "units": timing["units"],
                         "simulate_s": simulate_s, **{f"{k}_s": v for k, v in timing.items() if k not in ("units", "features")},
                         "events_per_s_per_worker": dlog.n_events / timing["total"] / n_workers,
                         "evaluate_s": eval_s, "peak_worker_GB": peak / 1e9,
                         "client_GB": max(own.peak["client"], memory.peak.get("client", 0)) / 1e9,
                         "single_process_s": single_s})
            print(pd.DataFrame([rows[-1]]).to_string(index=False, float_format=lambda v: f"{v:,.2f}"), flush=True)
            del dlog
            client.run(_collect)
            shutil.rmtree(Path(tmp) / f"events-{n}")
    table = pd.DataFrame(rows)
    print("\n" + table.to_string(index=False, float_format=lambda v: f"{v:,.2f}"))
    base = table.iloc[0]
    for _, row in table.iloc[1:].iterrows():
        print(f"{base['events'] / 1e6:.1f}M -> {row['events'] / 1e6:.1f}M events ({row['events'] / base['events']:.1f}x): "
              f"featurize {row['total_s'] / base['total_s']:.2f}x the time (target for 10M -> 50M: <= 5.5x)")
    if not np.isnan(base["single_process_s"]):
        print(f"one process / cluster at {base['events'] / 1e6:.1f}M events: "
              f"{base['single_process_s'] / base['total_s']:.2f}x")
    print(f"peak worker memory {table['peak_worker_GB'].max():.2f} GB of {args.memory_limit} per worker; "
          f"client (simulating, gathering tables) {table['client_GB'].max():.2f} GB")


def _collect() -> None:
    """Between stages and sizes: collect garbage and hand freed heap back to the OS (glibc keeps it otherwise,
    and a worker then starts the next stage already holding the last one's peak as unmanaged memory)."""
    import ctypes
    import gc
    gc.collect()
    try:
        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except (OSError, AttributeError):  # not glibc
        pass


if __name__ == "__main__":
    main()
