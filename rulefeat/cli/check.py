"""``rulefeat check RULES --events FILE``: every problem of a rules file against a log's schema; no evaluation."""

from __future__ import annotations

from .base import EXIT_OK, EXIT_PROBLEMS, Command, Progress, print_json
from .files import add_log_options, existing_file, read_log

EXAMPLES = """\
examples:
  rulefeat check rules.toml --events events.csv
  rulefeat check rules.toml --events events.parquet --columns '{"student": "learner_id"}'
  rulefeat check rules.toml --events statements.jsonl --json      # problems as JSON, for scripts

Every rule is read, parsed and checked on its own, so one broken rule does not hide the next; each problem
is printed with the rule's text and a caret under the offending part, and a suggestion where one is near."""


def add_arguments(parser) -> None:
    parser.add_argument("rules", metavar="RULES", help="TOML rules file ([rules.<name>] tables; docs/rules.md)")
    add_log_options(parser)
    parser.add_argument("--json", action="store_true", help="print the result as one JSON document on stdout")
    parser.add_argument("--progress", action="store_true", help="stage messages on stderr even when it is not "
                                                                "a terminal")


def run(args) -> int:
    from ..rules import find_problems
    from ..rules.problems import rule_line, rule_names

    progress = Progress.for_args("check", args)
    rules_file = existing_file(args.rules, "RULES")
    text = rules_file.read_text(encoding="utf-8", errors="replace")
    progress.say(f"reading the events {args.events}")
    log = read_log(args.events, columns=args.columns, xapi_mapping=args.xapi_mapping)
    progress.say(f"checking the rules of {args.rules} against {log!r}")
    problems = find_problems(text, log)
    names = rule_names(text)
    found = [{"rule": p.rule, "line": rule_line(text, p.rule), "error": type(p).__name__, "message": str(p)}
             for p in problems]
    if args.json:
        print_json({"rules_file": args.rules, "events": args.events, "ok": not problems, "rules": names,
                    "problems": found, "log": {k: v for k, v in log.summary().items() if k != "fields"}})
    else:
        _print(args.rules, found, names, log)
    return EXIT_PROBLEMS if problems else EXIT_OK


def _print(path: str, found: list, names: list, log) -> None:
    for item in found:
        where = f"{path}:{item['line']}" if item["line"] else path
        print(f"{where}: {item['error']}: {item['message']}\n")
    if found:
        print(f"{len(found)} problem{'s' if len(found) != 1 else ''} in {path}.")
    else:
        print(f"{path}: {len(names)} rules check cleanly against {log!r}.")


COMMAND = Command(help="check a rules file against an event log's schema (no evaluation)", examples=EXAMPLES,
                  add_arguments=add_arguments, run=run,
                  description="Parse and check every rule of RULES against the fields and categories of the "
                              "events file; print every problem, exit 1 if there is any.")
