"""``rulefeat score DETECTOR --events FILE --units FILE``: score new units with a saved detector."""

from __future__ import annotations

from .base import EXIT_OK, Command, Progress, print_json
from .files import add_log_options, existing_file, read_log, read_table, write_table

EXAMPLES = """\
examples:
  rulefeat score detector.zip --events tomorrow.csv --units tomorrow_windows.csv --out scores.csv
  rulefeat score detector.zip --events day.parquet --units windows.parquet --sha256 <hash from the manifest>
  rulefeat score detector.zip --events day.csv --units windows.csv --empty-units empty --json

The detector is a file written by rulefeat.save_detector. Its content hash is checked before anything in it
is loaded; loading still runs code, so score only detectors you trust (pin the hash with --sha256). The log
must have the fields the detector was fitted on (the manifest's schema); units with no events in the log are
refused unless --empty-units empty. The output is the units' own columns plus a 'score' column: P(class 1)
for a classifier, the prediction for a regressor. Scores support people's decisions about students; they
should not make high-stakes decisions on their own."""


def add_arguments(parser) -> None:
    parser.add_argument("detector", metavar="DETECTOR", help="a saved detector (.zip from rulefeat.save_detector)")
    add_log_options(parser)
    parser.add_argument("--units", required=True, metavar="FILE",
                        help="CSV, TSV or Parquet table of the units to score (keys as in training)")
    parser.add_argument("--out", metavar="FILE", help="write the scored units here (.csv / .tsv / .parquet); "
                                                      "default: print them as CSV on stdout")
    parser.add_argument("--sha256", help="refuse the detector unless its payload has this content hash")
    parser.add_argument("--empty-units", choices=("error", "empty"), default="error",
                        help="units with no events in the log: refuse them (default) or score them as empty")
    parser.add_argument("--json", action="store_true", help="print a JSON summary instead of a table")
    parser.add_argument("--progress", action="store_true", help="stage messages on stderr even when it is not "
                                                                "a terminal")


def run(args) -> int:
    import rulefeat

    progress = Progress.for_args("score", args)
    saved = rulefeat.load_detector(existing_file(args.detector, "DETECTOR"), sha256=args.sha256)
    progress.say(f"loaded {saved!r}")
    log = read_log(args.events, columns=args.columns, xapi_mapping=args.xapi_mapping)
    units = read_table(args.units, "--units")
    scores = saved.score(log, units, empty_units=args.empty_units)
    out = units.assign(score=scores)
    if args.out is not None:
        path = write_table(out, args.out)
        progress.say(f"wrote {path}")
    if args.json:
        print_json({"detector": saved.sha256, "units": len(out), "out": None if args.out is None else str(path),
                    "score_mean": float(out["score"].mean()) if len(out) else None})
    elif args.out is None:
        print(out.to_csv(index=False), end="")
    else:
        print(f"wrote {path}: {len(out)} units scored")
    return EXIT_OK


COMMAND = Command(help="score the units of a new log with a saved detector", examples=EXAMPLES,
                  add_arguments=add_arguments, run=run,
                  description="Load a detector saved by rulefeat.save_detector (its content hash checked first), "
                              "bind it to the events of --events and write one score per unit of --units.")
