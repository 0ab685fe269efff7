"""Building an EventLog from pyarrow / polars tables and from xAPI statements, against plain baselines.

Prints, in one run on the same simulated events:

- EventLog from a pyarrow Table and from a polars DataFrame, as a ratio to EventLog from the pandas frame
  (the cost of the columnar conversion; the logs are checked to be equal);
- read_xapi on JSON lines, as a ratio to a hand-written baseline that only parses the lines with ``json.loads``
  and flattens them with ``pandas.json_normalize`` (no mapping, no checks, no log), i.e. the floor of reading
  the file at all.

    python benchmarks/input_formats.py                   # 200 students (about 100,000 events)
    python benchmarks/input_formats.py --students 1000 --statements 200000
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

import rulefeat
from rulefeat.simulate import tutor_logs

HINT = "https://example.org/xapi/verbs/asked-for-hint"


def best_of(repeats: int, fn):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def statements(events: pd.DataFrame) -> list[dict]:
    stamps = pd.to_datetime(events["time"]).dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ").tolist()
    out = []
    for i, (student, action, correct, step, problem, duration) in enumerate(zip(
            events["student"].astype(str), events["action"].astype(str), events["correct"].astype(object),
            events["step"].astype(str), events["problem"].astype(str), events["duration"], strict=True)):
        st = {"id": f"00000000-0000-4000-8000-{i:012d}", "actor": {"account": {"homePage": "https://example.org",
                                                                             "name": student}},
              "verb": {"id": "http://adlnet.gov/expapi/verbs/answered" if action == "attempt" else HINT},
              "object": {"id": f"https://example.org/steps/{step}"},
              "context": {"contextActivities": {"parent": [{"id": f"https://example.org/problems/{problem}"}]}},
              "timestamp": stamps[i], "result": {"duration": f"PT{duration:.3f}S"}}
        if action == "attempt" and correct is not pd.NA:
            st["result"]["success"] = bool(correct)
        out.append(st)
    return out


def baseline(path: Path) -> pd.DataFrame:
    with path.open(encoding="utf-8") as fh:
        return pd.json_normalize([json.loads(line) for line in fh if line.strip()])


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--students", type=int, default=200)
    p.add_argument("--statements", type=int, default=50_000, help="statements in the xAPI file")
    p.add_argument("--repeats", type=int, default=3)
    args = p.parse_args()
    import polars as pl
    import pyarrow as pa

    events = tutor_logs(n_students=args.students, seed=0).events
    warnings.simplefilter("ignore", rulefeat.LogRepairWarning)
    table, frame = pa.Table.from_pandas(events, preserve_index=False), pl.from_pandas(events)
    t_pd, ref = best_of(args.repeats, lambda: rulefeat.EventLog(events))
    t_pa, from_pa = best_of(args.repeats, lambda: rulefeat.EventLog(table))
    t_pl, from_pl = best_of(args.repeats, lambda: rulefeat.EventLog(frame))
    for log in (from_pa, from_pl):
        assert log.summary() == ref.summary()
        assert all(np.array_equal(log.values(f), ref.values(f), equal_nan=True) for f in ref.fields)
    print(f"EventLog of {len(events):,} events (best of {args.repeats}; machine may be shared)")
    print(f"  pandas {t_pd:7.3f} s   pyarrow {t_pa:7.3f} s ({t_pa / t_pd:4.2f}x)   polars {t_pl:7.3f} s "
          f"({t_pl / t_pd:4.2f}x)")

    sts = statements(events.head(args.statements))
    mapping = f'[actions]\n"{HINT}" = "hint"\n'
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "statements.jsonl"
        path.write_text("\n".join(json.dumps(s) for s in sts) + "\n", encoding="utf-8")
        t_base, flat = best_of(args.repeats, lambda: baseline(path))
        t_x, log = best_of(args.repeats, lambda: rulefeat.read_xapi(path, mapping=mapping))
    assert len(log) == len(flat) == len(sts)
    print(f"xAPI: {len(sts):,} statements as JSON lines")
    print(f"  json.loads + json_normalize (baseline) {t_base:7.3f} s   read_xapi -> EventLog {t_x:7.3f} s "
          f"({t_x / t_base:4.2f}x, {len(sts) / t_x:,.0f} statements/s)")


if __name__ == "__main__":
    main()
