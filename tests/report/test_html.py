"""Tests of the self-contained HTML report (rulefeat.report.html) on a real evaluation of simulated logs."""

from __future__ import annotations

import base64
import copy
import io
import re
import shutil
import subprocess
import warnings
from html.parser import HTMLParser
from pathlib import Path

import matplotlib
import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure
from PIL import Image
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

import rulefeat
from rulefeat.errors import EvaluationError, LogRepairWarning
from rulefeat.evaluate import incremental_value_precomputed
from rulefeat.evaluate.value.engine import demo_rules_path
from rulefeat.report.html import format_value, html_view, p_value_text, save_html
from rulefeat.report.value import IncrementalValueReport
from rulefeat.simulate import tutor_logs

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402  (only to check that diagnostics figures drawn with pyplot are closed)

NASTY = "<b>&\"'"  # markup, an ampersand and both quotes: must reach the reader as text
ODD_SKILL = f"ratio-tables {NASTY}"
ODD_WHEN = "action == 'hint' and skill != \"ratio-tables <b>&\\\"'\""  # the rule language's escaped quote
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
SECTIONS = {"data": "Data", "rules": "Rules as written", "value": "Incremental value",
            "per-rule": "Per-rule effects", "transfer": "Transfer to unseen populations",
            "learning-curve": "Learning curve", "guards": "Guards and notes",
            "reproducibility": "Reproducibility", "cautions": "Cautions"}
BROWSER = shutil.which("chromium") or shutil.which("chromium-browser") or (
    "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None)


# -- a real evaluation: simulated logs with a few repaired and dropped rows, plus a rule with odd text ---------
def _events() -> pd.DataFrame:
    events = tutor_logs(n_students=60, seed=11).events
    events["action"] = events["action"].astype(str)
    events["skill"] = events["skill"].astype(str).replace("ratio-tables", ODD_SKILL)  # rule text must match it
    odd = events.iloc[[5, 40]].assign(action="glossary")  # an action kind the log keeps and flags
    return pd.concat([events, events.iloc[[10, 11, 12]], odd], ignore_index=True)  # 3 exact duplicates


@pytest.fixture(scope="module")
def report() -> IncrementalValueReport:
    data = tutor_logs(n_students=60, seed=11)
    with pytest.warns(LogRepairWarning, match="exact duplicate events: 3 .dropped"):
        log = rulefeat.EventLog(_events(), duplicates="drop")
    odd = rulefeat.Rule("odd_skill", when=ODD_WHEN, means=f"strange {NASTY} means", why=f"because {NASTY} why",
                        report=["rate"])
    rules = rulefeat.RuleSet([*rulefeat.RuleSet.from_toml(demo_rules_path()), odd])
    model = make_pipeline(SimpleImputer(), StandardScaler(), LogisticRegression(max_iter=300))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # convergence and guard warnings are not what these tests are about
        return rulefeat.incremental_value(log, data.windows[["student", "start", "end", "population"]],
                                          data.windows["label"], rules, model=model, cv=3, n_boot=40,
                                          population="population", random_state=0, repeats=1)


class Diagnostics:
    """Stands in for RuleDiagnostics: the methods the HTML page reads, with odd text and a tiny p."""

    def table(self) -> pd.DataFrame:
        return pd.DataFrame({"rule": ["skimmed_hint", "odd_skill"], "firing rate": [0.0123, 0.2],
                             "standalone AUC": [0.714, np.nan], "AUC p": [2e-6, 0.4], "students": [60, 12]})

    def per_population(self) -> pd.DataFrame:
        return pd.DataFrame({"rule": ["skimmed_hint"] * 2, "population": [f"School {NASTY}", "Quevrondel"],
                             "firing rate": [0.01, 0.02]})

    def shap_summary(self) -> pd.DataFrame:
        return pd.DataFrame({"group": ["rules", "mined"], "share of |SHAP|": [0.31, 0.69]})

    def hierarchical(self) -> dict:
        return {"kind": "continuous", "base": {"r2": 0.2}, "full": {"r2": 0.25}, "F": 3.2, "p": 0.0004}

    def notes(self) -> list[str]:
        return [f"a note with {NASTY}"]

    def figures(self) -> dict:
        fig = plt.figure(figsize=(3, 2))  # through pyplot on purpose: save_html must close it
        fig.subplots().bar(["rules", "mined"], [0.31, 0.69])
        other = Figure(figsize=(3, 2))
        other.subplots().plot([0, 1], [1, 0])
        return {"dependence:skimmed_hint": other, "shap_share": fig}


class Page(HTMLParser):
    """Every start tag with its attributes, the headings, and the text, as a browser would read them."""

    def __init__(self, text: str):
        super().__init__(convert_charrefs=True)
        self.tags, self.headings, self.text, self._heading = [], [], [], None
        self.feed(text)
        self.close()

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if re.fullmatch(r"h[1-6]", tag):
            self._heading = [tag, ""]

    def handle_endtag(self, tag):
        if self._heading and tag == self._heading[0]:
            self.headings.append(tuple(self._heading))
            self._heading = None

    def handle_data(self, data):
        self.text.append(data)
        if self._heading:
            self._heading[1] += data

    def all_text(self) -> str:
        return " ".join(" ".join(self.text).split())

    def attrs(self, tag: str) -> list[dict]:
        return [a for t, a in self.tags if t == tag]


@pytest.fixture(scope="module")
def written(report, tmp_path_factory) -> tuple[Path, str]:
    path = save_html(report, tmp_path_factory.mktemp("html") / "nested" / "report.html",
                     diagnostics=Diagnostics())
    return path, path.read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def page(written) -> Page:
    return Page(written[1])


def _cells(html: str, section: str) -> list[list[tuple[str, str]]]:
    """(class, text) of every data cell of the first table of a section."""
    part = html.split(f'<section id="{section}">', 1)[1].split("</table>", 1)[0]
    body = part.split("<tbody>", 1)[1]
    rows = re.findall(r"<tr>(.*?)</tr>", body, flags=re.S)
    return [[(k, Page(t).all_text()) for k, t in re.findall(r'<td class="(\w+)">(.*?)</td>', r, flags=re.S)]
            for r in rows]


# -- structure -------------------------------------------------------------------------------------------
def test_page_has_title_effect_contents_and_every_section(report, page):
    h1 = [text for tag, text in page.headings if tag == "h1"]
    h2 = {text.strip() for tag, text in page.headings if tag == "h2"}
    assert h1 == ["Incremental value of the expert rules"]
    assert {*SECTIONS.values(), "Rule diagnostics", "Contents"} <= h2
    assert report.effect() in page.all_text()
    ids = {a["id"] for _, a in page.tags if "id" in a}
    links = [a["href"] for a in page.attrs("a")]
    assert {f"#{i}" for i in [*SECTIONS, "diagnostics"]} == set(links)
    assert all(link[1:] in ids for link in links)


def test_every_image_is_an_embedded_valid_png(page):
    sources = [a["src"] for a in page.attrs("img")]
    assert len(sources) == 4 + 2  # roc, rule effects, transfer, learning curve; two diagnostics figures
    for src in sources:
        assert src.startswith("data:image/png;base64,")
        raw = base64.b64decode(src.split(",", 1)[1], validate=True)
        assert raw.startswith(PNG_SIGNATURE)
        with Image.open(io.BytesIO(raw)) as image:
            image.verify()
            assert image.format == "PNG" and min(image.size) > 50
    assert all(a.get("alt") for a in page.attrs("img"))


def test_page_is_self_contained(written, page):
    html = written[1]
    assert not {"script", "link", "iframe", "object", "embed", "base"} & {t for t, _ in page.tags}
    for _, attrs in page.tags:
        for name, value in attrs.items():
            if name in ("src", "href", "action", "srcset", "poster"):
                assert not re.match(r"\s*(https?:)?//", value or ""), (name, value[:80])
    assert "@import" not in html and "url(" not in html
    assert not re.search(r"\son\w+\s*=", html)  # no inline event handlers either


def test_odd_text_is_escaped_and_shown_as_text(written, page, report):
    html = written[1]
    assert NASTY not in html
    assert "&lt;b&gt;&amp;" in html
    assert not any(t == "b" for t, _ in page.tags)
    text = page.all_text()
    rule = next(r for r in report.to_dict()["rules"] if r["name"] == "odd_skill")
    for shown in (rule["when"], rule["means"], rule["why"], f"School {NASTY}", f"a note with {NASTY}"):
        assert shown in text
    code = html.split('<section id="rules">', 1)[1].split("</section>", 1)[0]
    assert ("<code>action == &#39;hint&#39; and skill != &#34;ratio-tables &lt;b&gt;&amp;\\&#34;&#39;&#34;</code>"
            in code)


def test_data_section_reports_repairs_and_dropped_rows(report, page):
    log = report.to_dict()["data"]["log"]
    assert log["dropped_rows"] == 3 and len(log["issues"]) >= 2
    text = page.all_text()
    for issue in log["issues"]:
        assert " ".join(issue.split()) in text
    assert "3 input row(s) are not in the log (dropped)" in text


# -- numbers -------------------------------------------------------------------------------------------
def test_headline_table_numbers_are_formatted_and_right_aligned(report, written):
    summary = report.summary().set_index("variant")
    rows = {row[0][1]: row for row in _cells(written[1], "value")}
    assert list(rows) == ["mined", "rules", "combined"]
    combined = rows["combined"]
    assert [k for k, _ in combined] == ["key"] + ["num"] * 8
    assert combined[3][1] == f"{summary.loc['combined', 'auc_delta']:+.3f}"
    assert combined[2][1] == f"{summary.loc['combined', 'auc_pooled']:.3f}"
    assert combined[5][1] == p_value_text(summary.loc["combined", "auc_p"])
    for _, text in combined[1:]:
        assert re.fullmatch(r"(< 0\.001|n/a|[-+]?\d+\.\d{3}( ± \d+\.\d{3})?|\[[-+]\d\.\d{3}, [-+]\d\.\d{3}\])",
                            text), text
    assert [k for k, _ in rows["mined"]][1:] == ["num"] * 8 and rows["mined"][3][1] == "n/a"


def test_per_rule_table_follows_the_ablation(report, written):
    rows = _cells(written[1], "per-rule")
    per_rule = report.per_rule()
    assert [r[0][1] for r in rows] == per_rule["rule"].tolist()
    assert rows[0][2][1] == f"{per_rule['drop_delta'].iloc[0]:+.3f}"
    assert rows[0][0][0] == "name" and {k for k, _ in rows[0][2:]} == {"num"}


def test_diagnostics_are_shown_with_p_values_and_pyplot_figures_closed(written, page):
    assert plt.get_fignums() == []
    html = written[1]
    section = html.split('<section id="diagnostics">', 1)[1].split("</section>", 1)[0]
    rows = _cells(html, "diagnostics")
    assert rows[0] == [("name", "skimmed_hint"), ("num", "0.012"), ("num", "0.714"), ("num", "< 0.001"),
                       ("num", "60")]
    assert rows[1][2] == ("num", "n/a")
    assert "SHAP dependence of skimmed_hint" in Page(section).all_text()
    assert section.index("Share of total |SHAP|") < section.index("SHAP dependence")  # known figures first
    assert '<td class="text">p</td><td class="num">&lt; 0.001</td>' in section
    assert '<td class="text">base.r2</td><td class="num">0.200</td>' in section


def test_format_helpers():
    assert p_value_text(0.0009999) == "< 0.001" and p_value_text(0.001) == "0.001"
    assert p_value_text(float("nan")) == "n/a" and p_value_text(np.float64(0.5)) == "0.500"
    assert format_value(np.int64(1234567)) == "1,234,567" and format_value(np.float32(0.25)) == "0.250"
    assert format_value(np.bool_(False)) == "no" and format_value(pd.NA) == "n/a"
    assert format_value(float("inf")) == "n/a" and format_value("Quevrondel") == "Quevrondel"


# -- other reports ------------------------------------------------------------------------------------------
def test_without_diagnostics_no_section_and_method_equals_function(report, tmp_path):
    one = report.save_html(tmp_path / "one.html")
    two = save_html(report, str(tmp_path / "two.html"))
    assert isinstance(one, Path) and one.read_bytes() == two.read_bytes()  # same report, same bytes
    page = Page(one.read_text(encoding="utf-8"))
    assert "Rule diagnostics" not in {text for _, text in page.headings}
    assert "#diagnostics" not in [a["href"] for a in page.attrs("a")]
    assert len(page.attrs("img")) == 4


def test_real_rule_diagnostics_are_rendered(report, tmp_path):
    from rulefeat.evaluate.diagnose.engine import diagnose

    data = tutor_logs(n_students=60, seed=11)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        log = rulefeat.EventLog(_events(), duplicates="drop")
        diagnostics = diagnose(log, data.windows[["student", "start", "end", "population"]], data.windows["label"],
                               rulefeat.RuleSet.from_toml(demo_rules_path()), cv=3, population="population",
                               outcomes=data.outcomes, shap_sample=40, n_boot=30, random_state=0)
    html = save_html(report, tmp_path / "diagnosed.html", diagnostics=diagnostics).read_text(encoding="utf-8")
    page = Page(html)
    h3 = {text for tag, text in page.headings if tag == "h3"}
    assert {"Firing and standalone association with the label", "By population", "SHAP attributions",
            "Hierarchical regression of the student outcome"} <= h3
    table = diagnostics.table().set_index("rule")
    first = _cells(html, "diagnostics")
    assert [row[0][1] for row in first] == table.index.tolist()
    rule = first[0][0][1]
    assert first[0][1][1] == table.loc[rule, "primary"]
    assert first[0][2][1] == f"{table.loc[rule, 'firing_rate']:.3f}"
    assert len(page.attrs("img")) == 4 + len(diagnostics.figures())
    hierarchical = diagnostics.hierarchical()
    if hierarchical.get("available"):
        assert f'<td class="num">{p_value_text(hierarchical["p_value"])}</td>' in html.replace("&lt;", "<")
    assert "shap_mean_abs" not in html  # every known column has a readable header


def test_missing_parts_say_why(report):
    results = copy.deepcopy(report.to_dict())
    results.update(per_rule=[], learning_curve=[], guards=[{"kind": "leak", "message": f"odd {NASTY}"}],
                   transfer={"available": False, "reason": "the log has fewer than 2 populations.",
                             "rows": [], "deltas": []})
    empty_oof = pd.DataFrame({c: pd.Series(dtype="float64") for c in ("row", "student", "repeat", "fold", "y")})
    view = html_view(IncrementalValueReport(results, empty_oof))
    assert view["figures"] == {} and view["per_rule"] is None and view["learning_curve"] is None
    assert view["transfer"] == {"table": None, "reason": "the log has fewer than 2 populations."}
    from rulefeat.report.html import render_html

    text = Page(render_html(view)).all_text()
    for sentence in ("The per-rule ablation was not run.", "The learning curve was not computed.",
                     "Not available: the log has fewer than 2 populations.", f"odd {NASTY}"):
        assert sentence in text


def test_regression_report_renders_without_roc(tmp_path):
    rng = np.random.default_rng(0)
    students = np.repeat(np.arange(40), 6)
    mined = pd.DataFrame(rng.normal(size=(240, 3)), columns=["m0", "m1", "m2"])
    rules = pd.DataFrame({"quick__rate": rng.normal(size=240), "slow__count": rng.poisson(2, 240).astype(float)})
    y = mined["m0"].to_numpy() + 0.5 * rules["quick__rate"].to_numpy() + rng.normal(size=240)
    report = incremental_value_precomputed(mined, rules, y, students, model=Ridge(), cv=4, n_boot=30,
                                           random_state=0, task="regression")
    html = report.save_html(tmp_path / "regression.html").read_text(encoding="utf-8")
    page = Page(html)
    assert len(page.attrs("img")) == 2  # rule effects and learning curve; no ROC, no transfer
    rows = {row[0][1]: row for row in _cells(html, "value")}
    assert [k for k, _ in rows["combined"]] == ["key"] + ["num"] * 7  # no DeLong column for R²
    assert rows["combined"][3][1] == f"{report.summary().set_index('variant').loc['combined', 'r2_delta']:+.3f}"
    assert "R² (folds, mean ± sd)" in page.all_text() and "RMSE (lower is better)" in page.all_text()


# -- bad inputs ----------------------------------------------------------------------------------------------
def test_bad_inputs_are_refused_with_library_errors(report, tmp_path):
    with pytest.raises(EvaluationError, match=r"must be the IncrementalValueReport .* got dict"):
        save_html({"task": "classification"}, tmp_path / "x.html")
    with pytest.raises(EvaluationError, match=r"'diagnostics' must be the RuleDiagnostics .* got list"):
        save_html(report, tmp_path / "x.html", diagnostics=[1, 2])
    with pytest.raises(EvaluationError, match=r"is a folder; pass a file path inside it"):
        save_html(report, tmp_path)
    with pytest.raises(EvaluationError, match=r"'path' must be a file path .* got int"):
        save_html(report, 3)

    class BadTable:
        def table(self):
            return [{"rule": "a"}]

    class BadFigure:
        def figures(self):
            return {"shap_share": "not a figure"}

    with pytest.raises(EvaluationError, match=r"diagnostics.table\(\) must return a pandas DataFrame; got list"):
        save_html(report, tmp_path / "x.html", diagnostics=BadTable())
    with pytest.raises(EvaluationError, match=r"diagnostics figure 'shap_share' must be a matplotlib Figure"):
        save_html(report, tmp_path / "x.html", diagnostics=BadFigure())
    assert not (tmp_path / "x.html").exists()


# -- a real browser ------------------------------------------------------------------------------------------
@pytest.mark.skipif(BROWSER is None, reason="no chromium on this machine (Debian package 'chromium')")
def test_page_renders_in_a_headless_browser(written, tmp_path):
    shot = tmp_path / "shot.png"
    command = [BROWSER, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
               "--disable-background-networking", "--disable-component-update", "--disable-sync",
               f"--user-data-dir={tmp_path / 'profile'}", f"--screenshot={shot}", "--window-size=1200,2000",
               written[0].resolve().as_uri()]
    subprocess.run(command, capture_output=True, timeout=90, check=False)
    assert shot.exists(), "the browser wrote no screenshot"
    with Image.open(shot) as image:
        pixels = np.asarray(image.convert("RGB"))
    assert pixels.shape[:2] == (2000, 1200)
    packed = pixels.astype(np.int32) @ np.array([1 << 16, 1 << 8, 1], dtype=np.int32)  # one int per colour
    colours = np.unique(packed)
    assert len(colours) > 50  # text, tables and plots, not a blank or single-colour page
    dark = (pixels.sum(axis=2) < 200).mean()
    assert 0.001 < dark < 0.5  # some dark ink (headings, text), on a mostly light page
