"""Reports are safe to open and to share: hostile user text through every output format, and all-or-nothing saving.

One small real evaluation is built once; hostile strings are then put where user text enters a report (rule
``means``/``why``, population names, action labels, log issues, notes and guards, the model's repr, the command
line, student ids) and every rendering is checked: Markdown has no live tag, link or hidden character and keeps
its table and fence structure; the HTML page has no script, no link out and no hidden character; CSV cells cannot
run as formulas; JSON reads back to the same strings; figures draw without the math-text parser.
"""

import csv
import io
import json
import re
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import rulefeat
from rulefeat import EvaluationError, ParameterError
from rulefeat._text import HIDDEN
from rulefeat.report import safe
from rulefeat.report.diagnostics import RuleDiagnostics
from rulefeat.report.html import html_view, render_html
from rulefeat.report.value import IncrementalValueReport
from rulefeat.simulate import tutor_logs

PIECES = ["<script>alert(1)</script>", "<img src=x onerror=alert(1)>", "[x](javascript:alert(1))",
          "![i](data:text/html,x)", "<javascript:alert(1)>", "<a href='vbscript:x'>a</a>", "=HYPERLINK(\"x\")",
          "+1", "-2", "@SUM(A1)", "\t=1", "\r=1", "\x00", "\x1b[31m", "\x7f", "\u202e", "\u2066", "\u200f", "\u2028",
          "$\\foo$", "$x", "```", "`", "|", "\\", "**b**", "_i_", "\n# head\n", "&amp;", "~~s~~", "x" * 5000]
HOSTILE = st.lists(st.one_of(st.sampled_from(PIECES), st.text(max_size=12)), min_size=1, max_size=4).map("".join)
EVERY = "".join(PIECES[:-1]) + "z" * 5000  # every piece at once


def small_log():
    """A small simulated day and its EventLog (repair warnings silenced), shared by both report fixtures."""
    data = tutor_logs(n_students=30, seed=1, windows_per_student=3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return data, rulefeat.EventLog(data.events)


@pytest.fixture(scope="module")
def base() -> IncrementalValueReport:
    data, log = small_log()
    rules = [rulefeat.Rule("skim", when="action == 'hint' and gap < 3s", means="hint skimming"),
             rulefeat.Rule("hasty", when="action == 'attempt' and not correct and gap < 5s")]
    units = data.windows[["student", "start", "end", "label", "population"]]
    return rulefeat.incremental_value(log, units, "label", rules, cv=3, n_boot=20, learning_curve=None,
                                      population="population", n_jobs=1, random_state=0,
                                      mined={"families": ["correctness"]})


def hostile(base: IncrementalValueReport, text: str) -> IncrementalValueReport:
    """``base`` with ``text`` wherever user text enters a report (populations kept distinct)."""
    results = base.to_dict()
    names = {p: f"{text}{i}" for i, p in enumerate(results["data"]["populations"])}
    results["data"]["populations"] = {names[p]: v for p, v in results["data"]["populations"].items()}
    for row in results["transfer"]["rows"]:
        row["population"] = names[row["population"]]
    log = results["data"]["log"]
    log["actions"] = {**log["actions"], text: 3}
    log["issues"] = [*log["issues"], text]
    results["rules"][0]["means"], results["rules"][1]["why"] = text, text
    results["notes"].append(text)
    results["guards"].append({"kind": text, "message": text})
    results["settings"].update(model=text, population_column=text)
    results["reproducibility"]["command"] = text
    oof = base.oof_predictions().assign(student=text)
    transfer = base.transfer_predictions()
    transfer = transfer.assign(population=transfer["population"].map(names), student=text)
    return IncrementalValueReport(results, oof, transfer)


# -- Markdown ----------------------------------------------------------------------------------------------
LIVE_TAG = re.compile(r"<[A-Za-z/!?]")
LIVE_LINK = re.compile(r"(?<!\\)\]\(|<[A-Za-z][A-Za-z0-9+.-]*:")
PIPE = re.compile(r"(?<!\\)\|")
CODE_SPAN = re.compile(r"(?<![\\`])(`+)(?!`)(.+?)(?<!`)\1(?!`)")


def outside_code(lines: list[str]) -> str:
    """The Markdown without its code (fenced blocks, code spans), where tags and links are not live anyway."""
    start = lines.index("## Reproducibility") + 2
    fence = lines[start].removesuffix("text")
    end = lines.index(fence, start + 1)
    return CODE_SPAN.sub("", "\n".join(lines[:start] + lines[end + 1:]))


def check_markdown(text: str) -> None:
    lines = text.split("\n")
    prose = outside_code(lines)
    assert not LIVE_TAG.search(prose), LIVE_TAG.search(prose)
    assert not LIVE_LINK.search(prose), LIVE_LINK.search(prose)
    assert not HIDDEN.search(text)
    for i, line in enumerate(lines):  # every table row has as many cell borders as its header
        if line.startswith("| --- "):
            width = len(PIPE.findall(line))
            head = i - 1
            for row in lines[head:]:
                if not row.startswith("|"):
                    break
                assert len(PIPE.findall(row)) == width, row[:200]
    start = lines.index("## Reproducibility") + 2
    fence = lines[start].removesuffix("text")
    assert set(fence) == {"`"} and lines.index(fence, start + 1) > start + 1  # the block closes after its lines
    assert all(fence not in line for line in lines[start + 1:lines.index(fence, start + 1)])


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=HOSTILE)
def test_hostile_text_in_markdown_is_inert_and_visible(base, text):
    report = hostile(base, text)
    check_markdown(report.to_markdown())
    assert f"- {safe.markdown_text(text)}\n" in report.to_markdown()  # the note still shows, escaped, not dropped


def test_every_hostile_piece_at_once_in_markdown(base):
    text = hostile(base, EVERY).to_markdown()
    check_markdown(text)
    assert "\\u202e" in text and "\\x00" in text and "&lt;script&gt;" in text and "\\[x\\](javascript" in text


# -- JSON ------------------------------------------------------------------------------------------------------
@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=HOSTILE)
def test_hostile_text_survives_json_exactly_and_hidden_characters_are_escaped(base, text):
    report = hostile(base, text)
    dumped = report.to_json()
    assert not HIDDEN.search(dumped)
    back = IncrementalValueReport.from_json(dumped)
    assert back.to_dict() == report.to_dict() and back.to_dict()["rules"][0]["means"] == text


# -- CSV -------------------------------------------------------------------------------------------------------
def cells(text: str) -> list[str]:
    return [cell for row in csv.reader(io.StringIO(text, newline="")) for cell in row]


@settings(max_examples=30, deadline=None)
@given(values=st.lists(HOSTILE, min_size=1, max_size=5))
def test_csv_cells_never_start_as_formulas(values):
    frame = pd.DataFrame({"student": values, "score": np.linspace(-1, 1, len(values)), values[0][:50]: values})
    out = cells(safe.csv_frame(frame).to_csv(index=False))
    for cell in out:
        assert not cell.startswith(safe.FORMULA_PREFIXES) or re.fullmatch(r"-?[0-9.e+-]+", cell), cell[:80]
        assert not HIDDEN.search(cell)
    assert "-1.0" in out  # numbers stay numbers


def test_report_csv_files_are_neutralised(base, tmp_path):
    folder = hostile(base, "=cmd|' /C calc'!A0").save(tmp_path / "out")
    for name in ("oof.csv", "oof_transfer.csv"):
        text = (folder / name).read_text(encoding="utf-8")
        assert "'=cmd|" in text and not any(c.startswith("=") for c in cells(text))
    back = pd.read_csv(folder / "oof.csv")
    assert (back["student"] == "'=cmd|' /C calc'!A0").all() and back["combined"].dtype == np.float64


# -- HTML and figures ------------------------------------------------------------------------------------------
def check_html(page: str) -> None:
    lowered = page.lower()
    assert "<script" not in lowered and "javascript:" not in re.sub(r"&[a-z#0-9]+;", "", lowered).replace(
        "javascript:alert", "") or "<script" not in lowered
    assert not re.search(r"<[a-z]+[^>]*\son[a-z]+\s*=", lowered)  # no event-handler attribute on a real tag
    assert all(href.startswith("#") for href in re.findall(r'href="([^"]*)"', page))
    assert all(src.startswith("data:image/png;base64,") for src in re.findall(r'src="([^"]*)"', page))
    assert not HIDDEN.search(page)


@pytest.mark.filterwarnings("ignore:Glyph .* missing from font")  # random code points lack a glyph in the font
@settings(max_examples=3, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=HOSTILE)
def test_hostile_text_in_the_html_page_and_its_figures(base, text):
    check_html(render_html(html_view(hostile(base, text))))


def test_every_hostile_piece_at_once_in_html_and_figures(base):
    report = hostile(base, EVERY)
    page = render_html(html_view(report))
    check_html(page)
    assert "&lt;script&gt;" in page and "\\u202e" in page
    figure = report.plot_transfer()
    figure.savefig(io.BytesIO(), format="png")  # "$\foo$" would stop matplotlib's math-text parser
    labels = [t.get_text() for t in figure.axes[0].get_xticklabels()]
    assert labels and all(label.count("$") == label.count("\\$") and len(label.replace("\\$", "$")) <= 41 for label in labels)


def test_math_text_in_a_population_name_draws(base):
    figure = hostile(base, "$\\foo$").plot_transfer()
    figure.savefig(io.BytesIO(), format="png")
    assert figure.axes[0].get_xticklabels()[0].get_text().startswith("\\$\\foo\\$")


# -- safe.py on its own ------------------------------------------------------------------------------------
@pytest.mark.parametrize("text, shown", [
    ("<b>x</b>", "&lt;b&gt;x&lt;/b&gt;"), ("[a](javascript:x)", "\\[a\\](javascript:x)"),
    ("a|b", "a\\|b"), ("`code`", "\\`code\\`"), ("hasty_error", "hasty_error"), ("_x_", "\\_x\\_"),
    ("line\nbreak", "line break"), ("r\u202el", "r\\\\u202el"), ("\\", "\\\\"), ("*x*", "\\*x\\*"),
])
def test_markdown_text(text, shown):
    assert safe.markdown_text(text) == shown


@pytest.mark.parametrize("value, shown", [
    ("=1+1", "'=1+1"), ("+1", "'+1"), ("-1", "'-1"), ("@x", "'@x"), ("\t=1", "'\t=1"), ("\r=1", "\\x0d=1"),
    ("a=1", "a=1"), ("x\x00", "x\\x00"), (-1.5, -1.5), (None, None),
])  # prefixes from the OWASP "CSV Injection" page (common guidance, no standard)
def test_csv_cell(value, shown):
    assert safe.csv_cell(value) == shown


def test_code_spans_and_fences_survive_backticks():
    assert safe.code_span("a ``b`` c") == "``` a ``b`` c ```"
    assert safe.fenced(["x ```` y"])[0] == "`````text" and safe.fenced(["x"])[-1] == "```"


# -- saving: all or nothing, no silent overwrite -------------------------------------------------------------
def test_save_refuses_a_non_empty_folder_unless_overwrite(base, tmp_path):
    target = tmp_path / "report"
    target.mkdir()
    (target / "mine.txt").write_text("keep me")
    with pytest.raises(ParameterError, match=r"exists and is not empty; pass overwrite=True"):
        base.save(target)
    assert [p.name for p in target.iterdir()] == ["mine.txt"]
    base.save(target, overwrite=True)
    assert (target / "report.json").is_file() and not (target / "mine.txt").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report"]  # no temporary folder left beside it


def test_a_failure_half_way_leaves_no_half_written_folder(base, tmp_path, monkeypatch):
    def broken(self, *args, **kwargs):
        raise EvaluationError("the figure cannot be drawn")

    target = tmp_path / "report"
    base.save(target)
    before = {p.name: p.read_bytes() for p in target.iterdir()}
    monkeypatch.setattr(IncrementalValueReport, "to_markdown", broken)
    for folder, overwrite in ((tmp_path / "fresh", False), (target, True)):
        with pytest.raises(EvaluationError, match="cannot be drawn"):
            base.save(folder, overwrite=overwrite)
    assert not (tmp_path / "fresh").exists()
    assert {p.name: p.read_bytes() for p in target.iterdir()} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report"]


def test_save_html_replaces_a_page_whole(base, tmp_path):
    page = tmp_path / "report.html"
    page.write_text("old")
    base.save_html(page)
    assert page.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.html"]


# -- JSON of the wrong shape: refused at load, naming the field ------------------------------------------------
@pytest.mark.parametrize("change, match", [
    (lambda r: r["rules"][0].update(means=5), r"results\['rules'\]\[0\]\['means'\] must be a string or null; got int"),
    (lambda r: r.update(notes="abc"), r"results\['notes'\] must be a list; got str 'abc'"),
    (lambda r: r["variants"]["mined"].update(folds=[]), r"results\['variants'\]\['mined'\]\['folds'\] must be an"),
    (lambda r: r["data"]["log"]["actions"].update(hint="many"), r"\['actions'\]\['hint'\] must be an integer"),
    (lambda r: r["per_rule"][0].pop("rule"), r"results\['per_rule'\]\[0\] lacks the field 'rule'"),
    (lambda r: r["comparisons"][0].update(delta="big"), r"\['comparisons'\]\[0\]\['delta'\] must be a number"),
    (lambda r: r["transfer"]["rows"][0].update(population=7), r"\['rows'\]\[0\]\['population'\] must be a string"),
])
def test_report_json_of_the_wrong_shape_is_refused_at_load(base, change, match):
    results = json.loads(base.to_json())
    change(results)
    with pytest.raises(EvaluationError, match=r"IncrementalValueReport\.from_json: .*" + match):
        IncrementalValueReport.from_json(json.dumps(results))


def test_diagnostics_json_of_the_wrong_shape_is_refused_at_load():
    results = {"kind": "rule_diagnostics", "per_rule": [{"rule": "skim", "association": {"auc": "high"}}]}
    with pytest.raises(EvaluationError, match=r"RuleDiagnostics\.from_json: results\['per_rule'\]\[0\]"
                                              r"\['association'\]\['auc'\] must be a number or null; got str"):
        RuleDiagnostics.from_json(json.dumps(results))


def test_inputs_are_file_names_and_hashes_only(base):
    record = {"name": "events.csv", "sha256": "0" * 64, "bytes": 10}
    report = base.with_inputs({"events": record})
    assert json.loads(report.to_json())["reproducibility"]["inputs"] == {"events": record}
    with pytest.raises(EvaluationError, match=r"inputs\['events'\] must be a dict with a file 'name' \(no folders"):
        base.with_inputs({"events": {"name": "/srv/data/events.csv", "sha256": "0" * 64}})


# -- diagnostics: the same rules for their Markdown, HTML and JSON ----------------------------------------------
@pytest.fixture(scope="module")
def diagnostics() -> RuleDiagnostics:
    data, log = small_log()
    rules = [rulefeat.Rule("skim", when="action == 'hint' and gap < 3s")]
    units = data.windows[["student", "start", "end", "label", "population"]]
    return rulefeat.diagnose(log, units, "label", rules, cv=3, population="population", outcomes=data.outcomes,
                             shap_sample=0, n_boot=20, n_jobs=1, random_state=0, mined={"families": ["correctness"]})


def hostile_diagnostics(diagnostics: RuleDiagnostics, text: str) -> RuleDiagnostics:
    results = diagnostics.to_dict()
    for i, row in enumerate(results["per_population"]):
        row["population"] = f"{text}{i}"
    results["rules"][0].update(means=text, why=text)
    results["notes"].append(text)
    results["settings"]["model"] = text
    return RuleDiagnostics.from_json(json.dumps(results))


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=HOSTILE)
def test_hostile_text_in_diagnostics_markdown_and_json(diagnostics, text):
    diag = hostile_diagnostics(diagnostics, text)
    markdown = diag.to_markdown()
    prose = CODE_SPAN.sub("", markdown)
    assert not LIVE_TAG.search(prose) and not LIVE_LINK.search(prose) and not HIDDEN.search(markdown)
    for line in markdown.split("\n"):
        if line.startswith("|"):
            header = next(h for h in markdown.split("\n") if h.startswith("| rule |"))
            assert len(PIPE.findall(line)) in {len(PIPE.findall(h)) for h in markdown.split("\n")
                                               if h.startswith("| rule |")}, (line[:120], header[:120])
    assert not HIDDEN.search(diag.to_json()) and RuleDiagnostics.from_json(diag.to_json()).to_dict() == diag.to_dict()


def test_every_hostile_piece_at_once_in_the_diagnostics_section_of_the_page(base, diagnostics):
    page = render_html(html_view(base, hostile_diagnostics(diagnostics, EVERY)))
    check_html(page)
    assert "&lt;script&gt;" in page
