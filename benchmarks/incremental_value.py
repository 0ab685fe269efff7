"""Do the expert rules add value over mined log features?  The main job of rulefeat, from the command line.

By default it runs on simulated logs of the fictional "Zorbleth" platform with the demo rules
(rulefeat/data/demo_rules.toml), prints the summary and per-rule tables and the time of each stage, and writes the
report folder (report.md, report.json, oof.csv, figures)::

    python benchmarks/incremental_value.py                         # simulated demo data, about 1-2 minutes
    python benchmarks/incremental_value.py --students 600 --seed 3 --folds 5 --repeats 2 --out my_report
    python benchmarks/incremental_value.py --full                  # 1M events, 2,000 students, 20,000 windows

On your own data::

    python benchmarks/incremental_value.py --events events.csv --labels windows.csv --rules rules.toml \\
        --columns '{"student": "learner_id", "time": "timestamp"}' --label coded --population school

``--labels`` is a table of units (for windows: columns student, start, end) with a label column; ``--columns`` maps
the event file's column names onto rulefeat's fields (see rulefeat.EventLog).
"""

from __future__ import annotations

import argparse
import json
import sys
import time
import warnings
from pathlib import Path

import pandas as pd

import rulefeat
from rulefeat.errors import LogRepairWarning
from rulefeat.evaluate import diagnose, incremental_value
from rulefeat.evaluate.value.engine import demo_rules_path


def parse_args(argv=None) -> argparse.Namespace:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--students", type=int, default=300, help="simulated students (default 300)")
    p.add_argument("--windows", type=int, default=6, help="coded windows per simulated student (default 6)")
    p.add_argument("--seed", type=int, default=0, help="seed of the simulation and the evaluation")
    p.add_argument("--folds", type=int, default=5, help="student-grouped folds (default 5)")
    p.add_argument("--repeats", type=int, default=1, help="repetitions of the cross-validation (default 1)")
    p.add_argument("--n-jobs", type=int, default=-1, help="parallel fold workers (default -1: one per core, one "
                                                          "model thread each; 0: one worker, all cores to the "
                                                          "model)")
    p.add_argument("--n-boot", type=int, default=1000, help="student-bootstrap replicates (default 1000)")
    p.add_argument("--no-transfer", action="store_true", help="skip the leave-one-population-out view")
    p.add_argument("--no-curve", action="store_true", help="skip the learning curve")
    p.add_argument("--no-ablation", action="store_true", help="skip the per-rule variants")
    p.add_argument("--out", default="incremental_value_report", help="report folder (default "
                                                                     "incremental_value_report)")
    p.add_argument("--full", action="store_true", help="performance run: 2,000 students x 10 windows (about "
                                                       "1M events), 5 folds, ablation, no curve or transfer")
    p.add_argument("--no-diagnose", action="store_true", help="skip the per-rule validity diagnostics and SHAP")
    p.add_argument("--outcomes", help="with your own data: CSV or Parquet of student outcomes (student, posttest)")
    own = p.add_argument_group("your own data")
    own.add_argument("--events", help="CSV or Parquet file of events")
    own.add_argument("--labels", help="CSV or Parquet file of units with their labels")
    own.add_argument("--rules", help="TOML rules file (default: the demo rules)")
    own.add_argument("--columns", help="JSON mapping {field: column} for the events file")
    own.add_argument("--label", default="label", help="label column of --labels (default 'label')")
    own.add_argument("--unit", default="window", help="what a row of --labels is (default 'window')")
    own.add_argument("--population", help="column of --labels with each unit's population (school)")
    args = p.parse_args(argv)
    if args.full:
        args.students, args.windows, args.folds, args.repeats = 2000, 10, 5, 1
        args.no_curve = args.no_transfer = True
    if (args.events is None) != (args.labels is None):
        p.error("--events and --labels go together")
    return args


def _table(path: str) -> pd.DataFrame:
    return pd.read_parquet(path) if Path(path).suffix.lower() in (".parquet", ".pq") else pd.read_csv(path)


def load(args, clock: dict):
    """The log, the units table with its label column, and the rules."""
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)  # repairs stay listed in log.issues and the report
        if args.events:
            log = rulefeat.read_events(args.events, columns=json.loads(args.columns) if args.columns else None)
            clock["read and build the log"] = time.perf_counter() - t0
            units = _table(args.labels)
            outcomes = _table(args.outcomes) if args.outcomes else None
        else:
            from rulefeat.simulate import tutor_logs

            data = tutor_logs(n_students=args.students, seed=args.seed, windows_per_student=args.windows)
            clock["simulate"] = time.perf_counter() - t0
            t1 = time.perf_counter()
            log = rulefeat.EventLog(data.events)
            clock["build the log"] = time.perf_counter() - t1
            units = data.windows[["student", "start", "end", "label"]]
            outcomes = data.outcomes
    rules = Path(args.rules) if args.rules else demo_rules_path()
    return log, units, rules, outcomes


def show(report, clock: dict) -> None:
    primary = report.primary_metric
    summary = report.summary()
    cols = ["variant"] + [c for c in summary.columns if c == primary or c.startswith(f"{primary}_")]
    with pd.option_context("display.width", 160, "display.max_columns", 30, "display.precision", 4):
        print(f"\n{report!r}\n\n{report.effect()}\n")
        print(summary[cols].to_string(index=False))
        per_rule = report.per_rule()
        if len(per_rule):
            print("\nPer rule (Δ when dropped from combined / added to mined):")
            print(per_rule.to_string(index=False))
    guards = report.guards()
    if guards:
        print("\nGuards:")
        for g in guards:
            print(f"- [{g['kind']}] {g['message']}")
    print("\nTime per stage (s):")
    for stage, seconds in clock.items():
        print(f"  {stage:<28} {seconds:8.2f}")


def main(argv=None) -> int:
    args = parse_args(argv)
    clock: dict = {}
    start = time.perf_counter()
    log, units, rules, outcomes = load(args, clock)
    print(f"{log!r}\n{len(units)} units, {units['student'].nunique()} students")
    t0 = time.perf_counter()
    report = incremental_value(
        log, units, args.label, rules, cv=args.folds, repeats=args.repeats, population=args.population,
        unit=args.unit, n_jobs=args.n_jobs or None, random_state=args.seed, verbose=1, n_boot=args.n_boot,
        learning_curve=None if args.no_curve else (0.25, 0.5, 1.0), ablation=not args.no_ablation,
        transfer=not args.no_transfer, command=" ".join(["python", *sys.argv]))
    clock["evaluate"] = time.perf_counter() - t0
    inner = report.timing()
    for stage in ("featurize", "fit"):
        clock[f"  of which {stage} (sum)"] = inner.get(stage, float("nan"))
    clock["  of which statistics"] = inner.get("statistics", float("nan"))
    diagnostics = None
    if not args.no_diagnose and not args.full:
        t1 = time.perf_counter()
        diagnostics = diagnose(log, units, args.label, rules, cv=args.folds, population=args.population,
                               outcomes=outcomes, unit=args.unit, shap_sample=300, n_boot=args.n_boot,
                               random_state=args.seed, n_jobs=args.n_jobs or None)
        clock["diagnose (incl. SHAP)"] = time.perf_counter() - t1
    t1 = time.perf_counter()
    folder = report.save(args.out)
    html = report.save_html(Path(folder) / "report.html", diagnostics=diagnostics)
    if diagnostics is not None:
        diagnostics.save(Path(folder) / "diagnostics")
    clock["write the reports"] = time.perf_counter() - t1
    clock["total"] = time.perf_counter() - start
    show(report, clock)
    if diagnostics is not None:
        with pd.option_context("display.width", 160, "display.max_columns", 12, "display.precision", 3):
            print("\nDiagnostics per rule (see the HTML report for all columns):")
            print(diagnostics.table().iloc[:, :8].to_string(index=False))
    print(f"\nReport written to {folder}/ (Markdown, JSON, figures)")
    print(f"HTML report: {html}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
