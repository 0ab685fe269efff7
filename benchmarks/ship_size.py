"""Size of a pickled fitted detector against the events it was fitted on (fitted state only, contract 8 in DEVELOPERS.md).

Before contract 8 every fitted transformer pickled its EventLog, so a detector file was at least as large as the
log.  This prints, for simulated logs of several sizes, the pickled log and the pickled fitted RuleFeatures,
LogFeatures and make_detector pipeline, and the ratio log / detector.  Sizes do not depend on the machine's load.

    python benchmarks/ship_size.py [--students 50 120 500]
"""

from __future__ import annotations

import argparse
import io
import pickle
import warnings

import joblib

import rulefeat
from rulefeat.evaluate.value.engine import demo_rules_path
from rulefeat.simulate import tutor_logs


def sizes(n_students: int, seed: int = 0) -> dict:
    data = tutor_logs(n_students, seed=seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rulefeat.RulefeatWarning)
        log = rulefeat.EventLog(data.events)
    detector = rulefeat.make_detector(log, demo_rules_path(), random_state=0)
    detector.fit(data.windows[["student", "start", "end"]], data.windows["label"])
    parts = dict(detector.named_steps["features"].transformer_list)
    buffer = io.BytesIO()
    joblib.dump(detector, buffer)
    return {"students": n_students, "events": len(log), "log": len(pickle.dumps(log)),
            "rules": len(pickle.dumps(parts["rules"])), "mined": len(pickle.dumps(parts["mined"])),
            "detector": len(pickle.dumps(detector)), "detector_joblib": len(buffer.getvalue())}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--students", type=int, nargs="+", default=[50, 120, 500])
    args = parser.parse_args()
    print(f"{'students':>8} {'events':>8} {'log B':>11} {'rules B':>9} {'mined B':>9} {'detector B':>11} "
          f"{'joblib B':>10} {'log/detector':>12}")
    for n in args.students:
        s = sizes(n)
        print(f"{s['students']:>8} {s['events']:>8} {s['log']:>11,} {s['rules']:>9,} {s['mined']:>9,} "
              f"{s['detector']:>11,} {s['detector_joblib']:>10,} {s['log'] / s['detector']:>12.1f}")


if __name__ == "__main__":
    main()
