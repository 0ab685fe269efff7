"""``rulefeat simulate --out DIR``: demo events, windows, outcomes and rules as files, to try every command on."""

from __future__ import annotations

from pathlib import Path

from .base import EXIT_OK, Command, Progress, UsageError, print_json
from .files import demo_rules_file, write_table

FORMATS = {"csv": ".csv", "parquet": ".parquet"}
# The simulator's ground truth (true_label) stays out of the windows file: it is what a coder could not see.
WINDOW_COLUMNS = ["window_id", "student", "start", "end", "label", "population"]

EXAMPLES = """\
examples:
  rulefeat simulate --out demo                           # 200 students, CSV
  rulefeat simulate --out demo --students 600 --seed 3 --format parquet
  rulefeat check demo/rules.toml --events demo/events.csv
  rulefeat evaluate --events demo/events.csv --units demo/windows.csv --rules demo/rules.toml \\
      --outcomes demo/outcomes.csv --population population

Writes DIR/events.<ext> (one row per action), DIR/windows.<ext> (coded windows: student, start, end, label,
population), DIR/outcomes.<ext> (pretest and posttest per student) and DIR/rules.toml (the demo rules).
The platform, schools and students are invented ("Zorbleth"); results on them say nothing about real
students."""


def add_arguments(parser) -> None:
    parser.add_argument("--out", required=True, metavar="DIR", help="folder to write the files into (created)")
    parser.add_argument("--students", type=int, default=200, help="simulated students (default 200)")
    parser.add_argument("--windows", type=int, default=6, help="coded windows per student (default 6)")
    parser.add_argument("--seed", type=int, default=0, help="seed of the simulation (default 0)")
    parser.add_argument("--format", choices=FORMATS, default="csv", help="file format of the tables "
                                                                         "(default csv)")
    parser.add_argument("--json", action="store_true", help="print the written files and counts as JSON")
    parser.add_argument("--progress", action="store_true", help="stage messages on stderr even when it is not "
                                                                "a terminal")


def run(args) -> int:
    from ..simulate import tutor_logs

    folder = Path(args.out)
    if folder.exists() and not folder.is_dir():
        raise UsageError(f"--out: {args.out!r} is a file, not a folder")
    progress = Progress.for_args("simulate", args)
    progress.say(f"simulating {args.students} students")
    data = tutor_logs(n_students=args.students, seed=args.seed, windows_per_student=args.windows)
    ext = FORMATS[args.format]
    written = {
        "events": write_table(data.events, str(folder / f"events{ext}")),
        "windows": write_table(data.windows[WINDOW_COLUMNS], str(folder / f"windows{ext}")),
        "outcomes": write_table(data.outcomes, str(folder / f"outcomes{ext}")),
    }
    rules = folder / "rules.toml"
    rules.write_text(demo_rules_file().read_text(encoding="utf-8"), encoding="utf-8")
    written["rules"] = rules
    counts = {"events": len(data.events), "windows": len(data.windows), "students": len(data.outcomes)}
    if args.json:
        print_json({"files": {k: str(v) for k, v in written.items()}, **counts, "seed": args.seed})
    else:
        print(f"wrote {counts['events']} events, {counts['windows']} windows and {counts['students']} students' "
              f"outcomes to {folder}/ ({', '.join(p.name for p in written.values())})")
    return EXIT_OK


COMMAND = Command(help="write simulated demo events, windows, outcomes and rules as files", examples=EXAMPLES,
                  add_arguments=add_arguments, run=run,
                  description="Simulate the fictional 'Zorbleth' platform and write its logs, coded "
                              "windows, test scores and the demo rules, so every other command can be tried "
                              "on files.")
