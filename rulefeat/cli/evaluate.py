"""``rulefeat evaluate``: do the expert rules add value over mined log features?  The main job, from a shell.

Without ``--events`` it runs on simulated logs of the fictional "Zorbleth" platform with the demo rules;
with ``--events`` and ``--units`` on your own files.  It prints the summary and per-rule tables and the time of
each stage, and writes the report folder (report.md, report.json, oof.csv, figures, report.html, diagnostics/).
``benchmarks/incremental_value.py`` is a thin wrapper around this command.
"""

from __future__ import annotations

import shlex
import sys
import time
import warnings
from pathlib import Path

from ..report.writing import new_folder
from .base import EXIT_OK, EXIT_PROBLEMS, Command, Progress, UsageError, print_json
from .files import add_log_options, demo_rules_file, existing_file, file_record, read_log, read_table

EXAMPLES = """\
examples:
  rulefeat evaluate                                        # simulated demo data, about 1-2 minutes
  rulefeat evaluate --students 600 --seed 3 --folds 5 --repeats 2 --out my_report
  rulefeat evaluate --full                                 # performance run: 1M events, 20,000 windows
  rulefeat evaluate --events events.csv --units windows.csv --rules rules.toml \\
      --columns '{"student": "learner_id", "time": "timestamp"}' --label coded --population school
  rulefeat evaluate --events demo/events.csv --units demo/windows.csv --rules demo/rules.toml --json

--units (also spelled --labels) is a table of units (for windows: columns student, start, end) with a label
column; --columns maps the event file's column names onto rulefeat's fields (see rulefeat.EventLog).
With --json only the headline (combined − mined on the primary metric) is printed, as JSON."""


def add_arguments(p) -> None:
    sim = p.add_argument_group("simulated demo data (when --events is not given)")
    sim.add_argument("--students", type=int, default=300, help="simulated students (default 300)")
    sim.add_argument("--windows", type=int, default=6, help="coded windows per simulated student (default 6)")
    sim.add_argument("--full", action="store_true", help="performance run: 2,000 students x 10 windows (about "
                                                         "1M events), 5 folds, ablation, no curve or transfer")
    ev = p.add_argument_group("evaluation")
    ev.add_argument("--seed", type=int, default=0, help="seed of the simulation and the evaluation")
    ev.add_argument("--folds", type=int, default=5, help="student-grouped folds (default 5)")
    ev.add_argument("--repeats", type=int, default=3, help="repetitions of the cross-validation (default 3, chosen "
                                                           "by the calibration study in docs/inference.md)")
    ev.add_argument("--n-jobs", type=int, default=-1, help="parallel fold workers (default -1: one per core, one "
                                                           "model thread each; 0: one worker, all cores to the "
                                                           "model)")
    ev.add_argument("--n-boot", type=int, default=1000, help="student-bootstrap replicates (default 1000)")
    ev.add_argument("--no-transfer", action="store_true", help="skip the leave-one-population-out view")
    ev.add_argument("--no-curve", action="store_true", help="skip the learning curve")
    ev.add_argument("--no-ablation", action="store_true", help="skip the per-rule variants")
    ev.add_argument("--no-diagnose", action="store_true", help="skip the per-rule validity diagnostics and SHAP")
    ev.add_argument("--out", default="incremental_value_report", help="report folder (default "
                                                                      "incremental_value_report)")
    ev.add_argument("--overwrite", action="store_true", help="replace --out when it exists and is not empty "
                                                             "(checked before the evaluation starts)")
    own = p.add_argument_group("your own data")
    add_log_options(own, required=False)
    own.add_argument("--units", "--labels", dest="units", metavar="FILE",
                     help="CSV, TSV or Parquet file of units with their labels")
    own.add_argument("--rules", help="TOML rules file (default: the demo rules)")
    own.add_argument("--label", default="label", help="label column of --units (default 'label')")
    own.add_argument("--unit", default="window", help="what a row of --units is (default 'window')")
    own.add_argument("--population", help="column of --units with each unit's population (school)")
    own.add_argument("--outcomes", help="CSV or Parquet of student outcomes (student, posttest) for the "
                                        "diagnostics")
    out = p.add_argument_group("output")
    out.add_argument("--json", action="store_true", help="print only the headline as JSON on stdout")
    out.add_argument("--progress", action="store_true", help="stage messages and the fold bar on stderr even "
                                                             "when it is not a terminal")


def settle(args) -> None:
    """Apply ``--full`` and check the options that go together (usage errors)."""
    if args.full:
        args.students, args.windows, args.folds, args.repeats = 2000, 10, 5, 1
        args.no_curve = args.no_transfer = True
    if (args.events is None) != (args.units is None):
        raise UsageError("--events and --units go together (give both for your own data, neither for the demo)")
    if args.events is None and (args.columns or args.xapi_mapping or args.outcomes):
        raise UsageError("--columns, --xapi-mapping and --outcomes apply to your own data; give --events and "
                         "--units too")
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise UsageError(f"--out: {args.out!r} is a file; give a folder for the report")
    if out.is_dir() and any(out.iterdir()) and not args.overwrite:
        raise UsageError(f"--out: the folder {args.out!r} exists and is not empty; pass --overwrite to replace "
                         "it, or choose another --out")


def inputs(args, rules: Path) -> dict:
    """The input files as names and content hashes for report.json (never the folders they sit in)."""
    files = {"events": args.events, "units": args.units, "rules": rules, "outcomes": args.outcomes,
             "xapi_mapping": args.xapi_mapping}
    if args.columns and not args.columns.lstrip().startswith("{"):
        files["columns"] = args.columns
    out = {role: file_record(path) for role, path in files.items() if path is not None}
    if args.events is None:
        out["events"] = {"name": "simulated", "sha256": None, "students": args.students,
                         "windows_per_student": args.windows, "seed": args.seed}
    return out


def load(args, clock: dict, progress: Progress):
    """The log, the units table with its label column, the rules file and the outcomes (or None)."""
    import rulefeat
    from rulefeat.errors import LogRepairWarning

    t0 = time.perf_counter()
    rules = existing_file(args.rules, "--rules") if args.rules else Path(str(demo_rules_file()))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)  # repairs stay listed in log.issues and the report
        if args.events:
            progress.say(f"reading the events {args.events}")
            log = read_log(args.events, columns=args.columns, xapi_mapping=args.xapi_mapping)
            clock["read and build the log"] = time.perf_counter() - t0
            units = read_table(args.units, "--units")
            outcomes = read_table(args.outcomes, "--outcomes") if args.outcomes else None
        else:
            from rulefeat.simulate import tutor_logs

            progress.say(f"simulating {args.students} students")
            data = tutor_logs(n_students=args.students, seed=args.seed, windows_per_student=args.windows)
            clock["simulate"] = time.perf_counter() - t0
            t1 = time.perf_counter()
            log = rulefeat.EventLog(data.events)
            clock["build the log"] = time.perf_counter() - t1
            units = data.windows[["student", "start", "end", "label"]]
            outcomes = data.outcomes
    return log, units, rules, outcomes


def show(report, clock: dict) -> None:
    import pandas as pd

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


def rules_check(rules: Path, log) -> bool:
    """Every problem of the rules file on stderr before a long run (as ``rulefeat check`` prints them)."""
    from ..rules import find_problems

    problems = find_problems(rules, log)
    for problem in problems:
        print(f"rulefeat evaluate: error: {problem}\n", file=sys.stderr)
    if problems:
        print(f"rulefeat evaluate: {len(problems)} problem{'s' if len(problems) > 1 else ''} in {rules}; nothing "
              "was evaluated.", file=sys.stderr)
    return not problems


def command_line() -> str:
    """How this run was started, for the report's reproducibility block; paths cut to their names."""
    first = Path(sys.argv[0]).name
    if first == "__main__.py":
        head = ["python", "-m", "rulefeat"]
    else:
        head = ["python", first] if first.endswith(".py") else ["rulefeat"]
    return shlex.join([*head, *(_name_only(word) for word in sys.argv[1:])])


def _name_only(word: str) -> str:
    """A command-line word naming a path, as the path's last part (``--out=/x/y`` -> ``--out=y``)."""
    option, eq, value = word.partition("=") if word.startswith("--") else ("", "", word)
    if value.lstrip().startswith("{") or not ("/" in value or "\\" in value):
        return word
    return f"{option}{eq}{Path(value).name}"


def run(args, *, command: str | None = None) -> int:
    import pandas as pd

    import rulefeat

    from .report import headline

    settle(args)
    progress = Progress.for_args("evaluate", args)
    clock: dict = {}
    start = time.perf_counter()
    log, units, rules, outcomes = load(args, clock, progress)
    if not rules_check(rules, log):
        return EXIT_PROBLEMS
    if not args.json:
        print(f"{log!r}\n{len(units)} units, {units['student'].nunique() if 'student' in units else '?'} students")
    t0 = time.perf_counter()
    progress.say(f"evaluating on {len(units)} units ({args.folds} folds x {args.repeats} repeats)")
    report = rulefeat.incremental_value(
        log, units, args.label, rules, cv=args.folds, repeats=args.repeats, population=args.population,
        unit=args.unit, n_jobs=args.n_jobs or None, random_state=args.seed, verbose=int(progress.enabled),
        n_boot=args.n_boot, learning_curve=None if args.no_curve else (0.25, 0.5, 1.0),
        ablation=not args.no_ablation, transfer=not args.no_transfer,
        command=command or command_line())
    clock["evaluate"] = time.perf_counter() - t0
    inner = report.timing()
    for stage in ("featurize", "fit"):
        clock[f"  of which {stage} (sum)"] = inner.get(stage, float("nan"))
    clock["  of which statistics"] = inner.get("statistics", float("nan"))
    diagnostics = None
    if not args.no_diagnose and not args.full:
        progress.say("per-rule diagnostics and SHAP")
        t1 = time.perf_counter()
        diagnostics = rulefeat.diagnose(log, units, args.label, rules, cv=args.folds, population=args.population,
                                        outcomes=outcomes, unit=args.unit, shap_sample=300, n_boot=args.n_boot,
                                        random_state=args.seed, n_jobs=args.n_jobs or None,
                                        verbose=int(progress.enabled))
        clock["diagnose (incl. SHAP)"] = time.perf_counter() - t1
    t1 = time.perf_counter()
    progress.say(f"writing the reports to {args.out}/")
    report = report.with_inputs(inputs(args, rules))
    with new_folder(args.out, overwrite=args.overwrite, where="rulefeat evaluate") as work:
        report.save(work)  # the empty work folder: everything lands in --out at once, or nothing does
        report.save_html(work / "report.html", diagnostics=diagnostics)
        if diagnostics is not None:
            diagnostics.save(work / "diagnostics")
    folder, html = Path(args.out), Path(args.out) / "report.html"
    clock["write the reports"] = time.perf_counter() - t1
    clock["total"] = time.perf_counter() - start
    if args.json:
        print_json({"headline": headline(report), "report": str(folder), "html": str(html),
                    "units": len(units), "students": log.n_students, "events": len(log),
                    "seconds": round(clock["total"], 3)})
        return EXIT_OK
    show(report, clock)
    if diagnostics is not None:
        with pd.option_context("display.width", 160, "display.max_columns", 12, "display.precision", 3):
            print("\nDiagnostics per rule (see the HTML report for all columns):")
            print(diagnostics.table().iloc[:, :8].to_string(index=False))
    print(f"\nReport written to {folder}/ (Markdown, JSON, figures)")
    print(f"HTML report: {html}")
    return EXIT_OK


COMMAND = Command(help="evaluate whether the rules add value over mined features (the main job)",
                  examples=EXAMPLES, add_arguments=add_arguments, run=run,
                  description="Do the expert rules add value over mined log features? Student-grouped "
                              "cross-validation of mined-only, rules-only and combined models, per-rule "
                              "ablation, transfer to unseen populations, diagnostics; reports in --out. "
                              "Without --events it runs on simulated demo data.")
