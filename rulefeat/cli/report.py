"""``rulefeat report REPORT.json --html FILE``: re-render a saved evaluation (and its diagnostics) as HTML/Markdown."""

from __future__ import annotations

from pathlib import Path

from ..report.writing import write_file
from .base import EXIT_OK, Command, Progress, UsageError, print_json
from .files import existing_file, read_table

EXAMPLES = """\
examples:
  rulefeat report incremental_value_report/report.json --html report.html
  rulefeat report saved/report.json --html saved.html --markdown saved.md --no-diagnostics
  rulefeat report saved/report.json --html saved.html --diagnostics other/diagnostics.json

Beside REPORT.json the command looks for oof.csv and oof_transfer.csv (the out-of-fold predictions, which
redraw the ROC curves) and for diagnostics/diagnostics.json (the per-rule diagnostics), as written by the
evaluate command. A file that is not a saved report is refused with the library's own error (exit 1)."""


def add_arguments(parser) -> None:
    parser.add_argument("report", metavar="REPORT.json", help="report.json written by the evaluate command "
                                                              "(IncrementalValueReport.save)")
    parser.add_argument("--html", metavar="FILE", help="write one self-contained HTML page here")
    parser.add_argument("--markdown", metavar="FILE", help="write the Markdown report here")
    parser.add_argument("--diagnostics", metavar="FILE", help="diagnostics.json to include (default: "
                                                              "diagnostics/diagnostics.json beside REPORT.json)")
    parser.add_argument("--no-diagnostics", action="store_true", help="leave the diagnostics out")
    parser.add_argument("--json", action="store_true", help="print the headline (and written files) as JSON")
    parser.add_argument("--progress", action="store_true", help="stage messages on stderr even when it is not "
                                                                "a terminal")


def run(args) -> int:
    from ..evaluate import IncrementalValueReport

    if not (args.html or args.markdown or args.json):
        raise UsageError("nothing to write: give --html FILE, --markdown FILE or --json")
    progress = Progress.for_args("report", args)
    source = existing_file(args.report, "REPORT.json")
    oof, oof_transfer = _beside(source, "oof.csv"), _beside(source, "oof_transfer.csv")
    report = _named(source, lambda: IncrementalValueReport.from_json(_text(source, "REPORT.json"), oof=oof,
                                                                     oof_transfer=oof_transfer))
    diagnostics = _diagnostics(args, source)
    written = {}
    if args.html:
        progress.say(f"rendering {args.html}")
        written["html"] = str(report.save_html(args.html, diagnostics=diagnostics))
    if args.markdown:
        write_file(args.markdown, report.to_markdown(), where="rulefeat report --markdown")
        written["markdown"] = args.markdown
    if args.json:
        print_json({"report": str(source), "headline": headline(report), "written": written,
                    "diagnostics": diagnostics is not None})
    else:
        print(f"{report!r}\n{report.effect()}")
        for kind, path in written.items():
            print(f"{kind}: {path}")
    return EXIT_OK


def headline(report) -> dict:
    """The primary metric's combined − mined comparison as plain values (shared with ``evaluate --json``)."""
    metric = report.primary_metric
    comps = report.comparisons()
    row = comps[(comps["variant"] == "combined") & (comps["baseline"] == "mined") & (comps["metric"] == metric)]
    found = row.iloc[0].to_dict() if len(row) else {}
    keep = ("delta", "ci_low", "ci_high", "p_value", "p_naive", "delong_p")
    return {"metric": metric, "task": report.task, "effect": report.effect() if len(row) else None,
            **{k: found.get(k) for k in keep if k in found}}


def _text(path: Path, option: str) -> str:
    try:
        return path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise UsageError(f"{option}: cannot read {str(path)!r}: {exc}") from None


def _beside(source: Path, name: str):
    file = source.parent / name
    return read_table(str(file), name) if file.is_file() else None


def _diagnostics(args, source: Path):
    if args.no_diagnostics:
        return None
    from ..evaluate import RuleDiagnostics

    if args.diagnostics:
        file = existing_file(args.diagnostics, "--diagnostics")
    else:
        file = source.parent / "diagnostics" / "diagnostics.json"
        if not file.is_file():
            return None
    return _named(file, lambda: RuleDiagnostics.from_json(_text(file, "--diagnostics")))


def _named(path: Path, load):
    """``load()``, with the file named in the library's error (from_json sees only the text)."""
    from ..errors import RulefeatError

    try:
        return load()
    except RulefeatError as exc:
        raise type(exc)(f"{str(path)!r}: {exc}") from None


COMMAND = Command(help="re-render a saved evaluation report as HTML or Markdown", examples=EXAMPLES,
                  add_arguments=add_arguments, run=run,
                  description="Read report.json written by 'rulefeat evaluate' (with the predictions and "
                              "diagnostics saved beside it) and write the HTML page or Markdown again.")
