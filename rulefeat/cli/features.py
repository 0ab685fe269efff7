"""``rulefeat features RULES --events FILE --units FILE --out FILE``: write the rule and/or mined feature table."""

from __future__ import annotations

from .base import EXIT_OK, Command, Progress, UsageError, print_json
from .files import add_log_options, existing_file, read_log, read_table, write_table

KINDS = ("both", "rules", "mined")

EXAMPLES = """\
examples:
  rulefeat features rules.toml --events events.csv --units windows.csv --out features.parquet
  rulefeat features rules.toml --events events.csv --units windows.csv --out rules.csv --kind rules
  rulefeat features --kind mined --events events.parquet --units steps.csv --unit step --out mined.parquet

The table has the units' own columns first (keys, labels, anything else), then one column per feature
(rule features <rule>__<summary>, mined features <family>__<feature>). Norms (typical, zscore) and mined
state are learned from all the units given: right for describing these units, not a held-out test (the
evaluate command refits everything inside each fold)."""


def add_arguments(parser) -> None:
    parser.add_argument("rules", metavar="RULES", nargs="?", help="TOML rules file (not needed with --kind mined)")
    add_log_options(parser)
    parser.add_argument("--units", required=True, metavar="FILE",
                        help="CSV, TSV or Parquet table of units (for windows: student, start, end)")
    parser.add_argument("--out", required=True, metavar="FILE",
                        help="where to write the table: .parquet / .pq or .csv / .tsv")
    parser.add_argument("--kind", choices=KINDS, default="both",
                        help="rule features, mined features or both (default both)")
    parser.add_argument("--unit", default="window",
                        help="what a row of --units is: window, last, step, problem, session, student "
                             "(default window)")
    parser.add_argument("--seed", type=int, default=0, help="random_state of the mined features (default 0)")
    parser.add_argument("--json", action="store_true", help="print a JSON summary of the table on stdout")
    parser.add_argument("--progress", action="store_true", help="stage messages on stderr even when it is not "
                                                                "a terminal")


def run(args) -> int:
    import pandas as pd

    import rulefeat

    if args.kind != "mined" and args.rules is None:
        raise UsageError(f"--kind {args.kind} needs a RULES file; give one, or use --kind mined")
    progress = Progress.for_args("features", args)
    rules = None if args.kind == "mined" else rulefeat.RuleSet.from_toml(existing_file(args.rules, "RULES"))
    progress.say(f"reading the events {args.events}")
    log = read_log(args.events, columns=args.columns, xapi_mapping=args.xapi_mapping)
    units = read_table(args.units, "--units")
    parts, names = [], {}
    if rules is not None:
        progress.say(f"rule features of {len(rules)} rules on {len(units)} units")
        table = rulefeat.RuleFeatures(rules=rules, log=log, unit=args.unit).fit_transform(units)
        parts.append(table)
        names["rule_features"] = list(table.columns)
    if args.kind != "rules":
        progress.say(f"mined features on {len(units)} units")
        table = rulefeat.LogFeatures(log, unit=args.unit, random_state=args.seed).fit_transform(units)
        parts.append(table)
        names["mined_features"] = list(table.columns)
    out = pd.concat([units, *parts], axis=1)
    path = write_table(out, args.out)
    progress.say(f"wrote {path}")
    if args.json:
        print_json({"out": str(path), "unit": args.unit, "kind": args.kind, "rows": len(out),
                    "unit_columns": [str(c) for c in units.columns], **names})
    else:
        counts = ", ".join(f"{len(v)} {k.replace('_', ' ')}" for k, v in names.items())
        print(f"wrote {path}: {len(out)} units, {counts}")
    return EXIT_OK


COMMAND = Command(help="write the rule and/or mined feature table of a units file", examples=EXAMPLES,
                  add_arguments=add_arguments, run=run,
                  description="Compute rule features (from RULES) and/or mined log features for every unit "
                              "of --units and write them with the units' columns as CSV or Parquet.")
