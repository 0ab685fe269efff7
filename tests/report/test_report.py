"""Tests of IncrementalValueReport and rulefeat.report.figures on hand-built results following the engine's schema."""

from __future__ import annotations

import copy
import doctest
import json
import math

import matplotlib
import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure
from sklearn.metrics import roc_auc_score, roc_curve

import rulefeat.report.figures as plots
import rulefeat.report.markdown as report_markdown
import rulefeat.report.tables as report_text
from rulefeat.errors import EvaluationError
from rulefeat.report.value import IncrementalValueReport

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402  (only to check that the report leaves pyplot alone)

RULES = ("skimmed_hint", "hasty_error", "idle_pause")
SCHOOLS = ("Hovquennel", "Cazvirro", "Murtelvax")  # fictional schools of a fictional practice platform
CLASS_METRICS = ("auc", "kappa", "average_precision", "log_loss", "brier")
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


# -- fixtures: a small, realistic results dict and its out-of-fold predictions ---------------------
BASE = {"auc": 0.70, "kappa": 0.25, "average_precision": 0.62, "log_loss": 0.61, "brier": 0.21,
        "r2": 0.31, "rmse": 8.4}
LIFT = {"mined": 0.0, "rules": -0.02, "combined": 0.03}


def _oof(classify: bool, seed: int = 7) -> pd.DataFrame:
    """2 repeats × 5 student-grouped folds over 30 students × 4 windows, with tied scores."""
    rng = np.random.default_rng(seed)
    students = np.repeat([f"s{i:02d}" for i in range(30)], 4)
    n = len(students)
    y = rng.integers(0, 2, n) if classify else rng.normal(50, 10, n)
    signal = (y - y.mean()) / y.std()
    frames = []
    for repeat in range(2):
        fold_of = dict(zip(np.unique(students), rng.permutation(np.arange(30) % 5), strict=True))
        frame = pd.DataFrame({"row": np.arange(n), "student": students, "repeat": repeat,
                              "fold": [fold_of[s] for s in students], "y": y})
        for name, strength in [("mined", 0.6), ("rules", 0.5), ("combined", 0.9)]:
            score = strength * signal + rng.normal(size=n)
            frame[name] = np.round(1 / (1 + np.exp(-score)), 2) if classify else 50 + 10 * score
        for rule in RULES:
            frame[f"without:{rule}"] = frame["combined"] - rng.normal(0, 0.02, n)
            frame[f"plus:{rule}"] = frame["mined"] + rng.normal(0, 0.02, n)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def _comparison(variant: str, metric: str, delta: float, p: float) -> dict:
    auc = metric == "auc"
    return {"variant": variant, "baseline": "mined", "metric": metric, "delta": delta,
            "ci_low": delta - 0.03, "ci_high": delta + 0.03, "ci_method": "student bootstrap (n_boot=200)",
            "t": 2.1, "df": 9, "p_value": p, "p_naive": p / 4,
            "delong_z": 1.7 if auc else None, "delong_p": 0.045 if auc else None,
            "effect": f"Adding the rules changed {metric} by {delta:+.3f}: a small improvement."}


def _per_rule() -> list[dict]:
    rows = []
    for i, (rule, d) in enumerate(zip(RULES, (0.004, 0.021, -0.003), strict=True)):
        rows.append({"rule": rule, "drop_delta": d, "drop_ci_low": d - 0.02, "drop_ci_high": d + 0.02,
                     "drop_p": 0.01 + i / 10, "drop_p_holm": min(1.0, 0.03 + i / 5), "add_delta": d / 2,
                     "add_ci_low": d / 2 - 0.02, "add_ci_high": d / 2 + 0.02, "add_p": 0.04 + i / 10,
                     "add_p_holm": min(1.0, 0.12 + i / 5)})
    rows[2]["add_p"] = np.float64("nan")  # a NaN held in a numpy scalar, as an engine might leave it
    return rows


def _transfer(classify: bool, metrics: tuple[str, ...]) -> dict:
    if not classify:
        return {"available": False, "reason": "the log has fewer than 2 populations.", "rows": [],
                "deltas": []}
    rows = [{"population": s, "variant": v, "n_test": 40, "n_test_students": 10,
             **{m: BASE[m] + LIFT[v] - 0.01 * j for m in metrics}}
            for j, s in enumerate(SCHOOLS) for v in LIFT]
    deltas = [{"population": s, "metric": "auc", "delta": LIFT["combined"]} for s in SCHOOLS]
    return {"available": True, "reason": None, "rows": rows, "deltas": deltas}


def _data(classify: bool, first: pd.DataFrame) -> dict:
    rate = float(first["y"].mean()) if classify else None
    log = {"events": 5400, "input_rows": 5410, "dropped_rows": 10, "students": 30, "sessions": 61,
           "actions": {"attempt": 4100, "hint": 1300}, "fields": ["student", "time", "action"],
           "issues": ["10 rows without a time were dropped (rows 3, 17, ...)."]}
    populations = {s: {"n_units": 40, "n_students": 10, "positive_rate": 0.4 if classify else None}
                   for s in SCHOOLS}
    return {"n_units": 120, "n_students": 30, "positive_rate": rate, "n_events": 5400, "log": log,
            "populations": populations}


RULE_ROWS = [
    {"name": "skimmed_hint", "means": "hint skimming", "why": "Too fast to have been read.",
     "when": "action == 'hint' and prev(action, within='step') == 'hint' and gap < 3s",
     "report": ["rate", "any"]},
    {"name": "hasty_error", "means": "rapid guess", "why": "Faster than a third of typical.",
     "when": "action == 'attempt' and not correct and duration < 0.33 * typical(duration, per='step')",
     "report": ["count"]},
    {"name": "idle_pause", "means": "idle pause", "why": "A pause of | over 2 min.", "when": "gap > 2min",
     "report": ["any"]},
]


def make_results(task: str = "classification") -> tuple[dict, pd.DataFrame]:
    classify = task == "classification"
    oof = _oof(classify)
    first = oof[oof["repeat"] == 0]
    metrics = CLASS_METRICS if classify else ("r2", "rmse")
    primary = metrics[0]
    variants = {v: {"folds": {m: {"mean": BASE[m] + LIFT[v], "sd": 0.04} for m in metrics},
                    "pooled": {m: BASE[m] + LIFT[v] - 0.005 for m in metrics}} for v in LIFT}
    if classify:  # pooled AUCs as the engine computes them, from repeat 0
        for v in LIFT:
            variants[v]["pooled"]["auc"] = float(roc_auc_score(first["y"], first[v]))
    comparisons = [_comparison(v, m, LIFT[v] + 0.001 * i, 0.02 if v == "combined" else 0.7)
                   for i, m in enumerate(metrics) for v in ("rules", "combined")]
    folds = [{"repeat": r, "fold": f, "variant": v, "n_train": 96, "n_test": 24, "n_train_students": 24,
              "n_test_students": 6, "threshold": 0.41 if classify else None,
              **{m: BASE[m] + LIFT[v] + 0.01 * f for m in metrics}}
             for r in range(2) for f in range(5) for v in LIFT]
    folds[-1][primary] = float("nan")  # a test fold with one class: metric NaN, reported in the notes
    curve = [{"fraction": f, "mined": BASE[primary] - 0.1 + 0.1 * f,
              "combined": BASE[primary] - 0.05 + 0.1 * f, "delta": 0.05 - 0.02 * f, "ci_low": 0.01 - 0.02 * f, "ci_high": 0.09 - 0.02 * f}
             for f in (1.0, 0.25, 0.5)]
    settings = {"n_splits": 5, "repeats": 2, "random_state": 0,
                "model": "LGBMClassifier(n_estimators=200,\n    learning_rate=0.05)", "unit": "window",
                "alpha": 0.05, "alternative": "greater", "n_boot": 200,
                "learning_curve_fractions": [0.25, 0.5, 1.0],
                "population_column": "population" if classify else None}
    notes = ["Fold 4 of repeat 1 has only one class in its test part; its AUC is NaN and left out of the "
             "paired test.", "DeLong's test ignores the clustering of windows within students."]
    repro = {"rulefeat": "0.1.0", "python": "3.11.9", "numpy": "2.4.0", "pandas": "3.1.1",
             "scikit-learn": "1.9.0", "lightgbm": "4.6.0", "random_state": 0, "rules_hash": "3f9a0c1d",
             "command": None}
    results = {
        "task": task, "primary_metric": primary, "settings": settings, "data": _data(classify, first),
        "rules": copy.deepcopy(RULE_ROWS), "rules_hash": "3f9a0c1d",
        "feature_counts": {"mined": 42, "rules": 4},
        "variants": variants, "comparisons": comparisons, "per_rule": _per_rule(), "folds": folds,
        "transfer": _transfer(classify, metrics), "learning_curve": curve,
        "guards": [{"kind": "label_within_student",
                    "message": "Labels are constant within 85% of students."}],
        "notes": notes, "timing": {"features": 1.25, "models": 3.5}, "reproducibility": repro,
    }
    return results, oof


@pytest.fixture
def report() -> IncrementalValueReport:
    results, oof = make_results("classification")
    transfer_oof = oof[oof["repeat"] == 0].drop(columns="repeat").assign(population=np.repeat(SCHOOLS, 40))
    return IncrementalValueReport(results, oof, transfer_oof)


@pytest.fixture
def regression() -> IncrementalValueReport:
    return IncrementalValueReport(*make_results("regression"))


# -- tables --------------------------------------------------------------------------------------
def test_summary_has_one_row_per_variant_with_deltas_vs_mined(report):
    results = report.to_dict()
    summary = report.summary()
    assert summary["variant"].tolist() == ["mined", "rules", "combined"]
    for m in CLASS_METRICS:
        for column in (m, f"{m}_sd", f"{m}_pooled", f"{m}_delta", f"{m}_ci_low", f"{m}_ci_high", f"{m}_p",
                       f"{m}_p_naive"):
            assert summary[column].dtype == np.float64, column
    rows = summary.set_index("variant")
    assert rows.loc["combined", "auc"] == results["variants"]["combined"]["folds"]["auc"]["mean"]
    assert rows.loc["rules", "kappa_sd"] == 0.04
    combined_auc = next(c for c in results["comparisons"]
                        if c["variant"] == "combined" and c["metric"] == "auc")
    assert rows.loc["combined", "auc_delta"] == combined_auc["delta"]
    assert rows.loc["combined", "auc_p"] == combined_auc["p_value"]
    assert rows.loc["combined", "auc_p_naive"] == combined_auc["p_naive"]
    assert rows.loc["combined", "auc_delong_p"] == 0.045
    assert rows.loc["mined", ["auc_delta", "auc_p", "auc_ci_low"]].isna().all()


def test_per_rule_is_sorted_by_drop_delta(report):
    table = report.per_rule()
    assert table["rule"].tolist() == ["hasty_error", "skimmed_hint", "idle_pause"]
    assert list(table.columns[:11]) == ["rule", "drop_delta", "drop_ci_low", "drop_ci_high", "drop_p",
                                        "drop_p_holm", "add_delta", "add_ci_low", "add_ci_high", "add_p",
                                        "add_p_holm"]
    assert np.isnan(table.loc[table["rule"] == "idle_pause", "add_p"]).all()


def test_folds_learning_curve_guards_and_notes(report):
    folds = report.folds()
    assert len(folds) == 2 * 5 * 3
    assert list(folds.columns[:8]) == ["repeat", "fold", "variant", "n_train", "n_test", "n_train_students",
                                       "n_test_students", "threshold"]
    assert folds["auc"].isna().sum() == 1
    curve = report.learning_curve()
    assert curve["fraction"].tolist() == [0.25, 0.5, 1.0]
    assert list(curve.columns) == ["fraction", "mined", "combined", "delta", "ci_low", "ci_high"]
    guards = report.guards()
    guards[0]["kind"] = "changed"
    assert report.guards()[0]["kind"] == "label_within_student"  # a copy, not the report's own list
    assert "only one class" in report.notes()[0]
    assert report.timing() == {"features": 1.25, "models": 3.5}


def test_transfer_delta_matches_engine_deltas(report):
    table = report.transfer()
    assert len(table) == 9 and "delta" in table.columns
    combined = table[table["variant"] == "combined"].set_index("population")["delta"]
    for row in report.to_dict()["transfer"]["deltas"]:
        assert combined[row["population"]] == pytest.approx(row["delta"], abs=1e-12)
    assert table.loc[table["variant"] == "mined", "delta"].isna().all()
    assert table.loc[table["variant"] == "rules", "delta"].to_numpy() == pytest.approx([-0.02] * 3)


def test_transfer_unavailable_is_empty_with_reason(regression):
    table = regression.transfer()
    assert table.empty and "delta" in table.columns
    assert table.attrs["reason"] == "the log has fewer than 2 populations."


def test_predictions_and_effect(report):
    assert report.oof_predictions() is report._oof
    assert report.transfer_predictions()["population"].nunique() == 3
    assert report.effect() == "Adding the rules changed auc by +0.030: a small improvement."
    assert report.metrics == list(CLASS_METRICS) and report.primary_metric == "auc"


def test_regression_summary_uses_r2_and_rmse(regression):
    summary = regression.summary()
    assert "r2_delta" in summary.columns and "rmse_p" in summary.columns and "auc" not in summary.columns
    assert regression.metrics == ["r2", "rmse"]
    assert regression.folds()["threshold"].isna().all()


def test_repr_is_short_with_delta_and_p(report):
    text = repr(report)
    assert text == "IncrementalValueReport(AUC combined − mined = +0.030, p = 0.020; 3 rules, 30 students)"


# -- serialisation -------------------------------------------------------------------------------
def test_to_dict_is_a_deep_copy_without_timing(report):
    out = report.to_dict()
    assert "timing" not in out
    out["variants"]["mined"]["folds"]["auc"]["mean"] = -1.0
    assert report.to_dict()["variants"]["mined"]["folds"]["auc"]["mean"] == 0.70


def test_json_is_deterministic_sorted_and_nan_is_null(report):
    results, oof = make_results("classification")
    shuffled = dict(reversed(list(copy.deepcopy(results).items())))
    shuffled["timing"] = {"features": 99.0}  # timing differs between runs; JSON must not
    text = report.to_json()
    assert IncrementalValueReport(shuffled, oof).to_json() == text
    assert '"timing"' not in text

    def refuse(constant):
        raise AssertionError(f"JSON holds {constant}")

    loaded = json.loads(text, parse_constant=refuse)  # NaN / Infinity literals would reach `refuse`
    assert list(loaded) == sorted(loaded)
    assert loaded["folds"][-1]["auc"] is None
    assert next(r for r in loaded["per_rule"] if r["rule"] == "idle_pause")["add_p"] is None
    assert report.to_json(indent=None).count("\n") == 0


def test_json_refuses_values_json_cannot_hold():
    results, oof = make_results("classification")
    results["notes"].append({1, 2})
    with pytest.raises(EvaluationError, match=r"results\['notes'\]\[2\] holds a set"):
        IncrementalValueReport(results, oof).to_json()


def test_from_json_round_trip(report, tmp_path):
    text = report.to_json()
    back = IncrementalValueReport.from_json(text)
    assert back.to_json() == text
    pd.testing.assert_frame_equal(back.summary(), report.summary())
    pd.testing.assert_frame_equal(back.per_rule(), report.per_rule())
    pd.testing.assert_frame_equal(back.folds(), report.folds())
    pd.testing.assert_frame_equal(back.transfer(), report.transfer())
    pd.testing.assert_frame_equal(back.learning_curve(), report.learning_curve())
    assert back.effect() == report.effect() and back.guards() == report.guards()
    assert back.oof_predictions().empty
    with pytest.raises(EvaluationError, match="no out-of-fold predictions"):
        back.plot_roc()
    folder = back.save(tmp_path / "again")
    assert not (folder / "roc.png").exists() and (folder / "rule_effects.png").exists()


def test_from_json_refuses_bad_text():
    with pytest.raises(EvaluationError, match="not valid JSON"):
        IncrementalValueReport.from_json("{not json")
    with pytest.raises(EvaluationError, match="must be the dict"):
        IncrementalValueReport.from_json("[1, 2]")


@pytest.mark.parametrize("change, match", [
    (lambda r: r.pop("per_rule"), r"lacks the keys \['per_rule'\]"),
    (lambda r: r.update(task="ranking"), "must be 'classification' or 'regression'; got 'ranking'"),
    (lambda r: r["variants"].pop("rules"), r"results\['variants'\] lacks \['rules'\]"),
    (lambda r: r.update(primary_metric="acu"), "Did you mean 'auc'"),
])
def test_bad_results_are_refused(change, match):
    results, oof = make_results("classification")
    change(results)
    with pytest.raises(EvaluationError, match=match):
        IncrementalValueReport(results, oof)


def test_bad_predictions_are_refused():
    results, oof = make_results("classification")
    with pytest.raises(EvaluationError, match="'oof' must be a pandas DataFrame"):
        IncrementalValueReport(results, oof.to_numpy())
    with pytest.raises(EvaluationError, match=r"'oof' lacks the columns \['fold'\]"):
        IncrementalValueReport(results, oof.drop(columns="fold"))
    with pytest.raises(EvaluationError, match=r"'oof_transfer' lacks the columns \['population'\]"):
        IncrementalValueReport(results, oof, oof)


# -- Markdown ------------------------------------------------------------------------------------
def _table_after(text: str, heading: str) -> list[str]:
    lines = text.split(heading, 1)[1].splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("|"))
    end = next((i for i in range(start, len(lines)) if not lines[i].startswith("|")), len(lines))
    return lines[start:end]


def _cells(line: str) -> int:
    return len(line.replace("\\|", "").strip().strip("|").split("|"))


def test_markdown_has_every_section_table_and_caution(report):
    text = report.to_markdown()
    headings = ["# Incremental value of the expert rules", "## Data", "## Rules", "## Incremental value",
                "## Per-rule effects", "## Transfer to unseen populations", "## Learning curve",
                "## Guards and notes", "## Reproducibility", "## Cautions"]
    positions = [text.index(h + "\n") for h in headings]
    assert positions == sorted(positions)
    value = _table_after(text, "## Incremental value")
    assert len(value) == 2 + 3 and value[2].startswith("| mined |") and value[4].startswith("| combined |")
    assert "+0.030" in value[4] and "[+0.000, +0.060]" in value[4] and "0.020" in value[4]
    per_rule = _table_after(text, "## Per-rule effects")
    assert len(per_rule) == 2 + 3 and per_rule[2].startswith("| hasty_error | rapid guess | +0.021 |")
    for heading in ("## Rules", "## Incremental value", "### All metrics", "## Per-rule effects",
                    "## Transfer to unseen populations", "## Learning curve"):
        table = _table_after(text, heading)
        assert {_cells(line) for line in table} == {_cells(table[0])}, heading  # escaped pipes keep the shape
    assert "A pause of \\| over 2 min." in text
    assert report.effect() in text
    assert "- **label_within_student**: Labels are constant" in text
    assert "```text\ncommand: null\nlightgbm: 4.6.0" in text
    assert "`LGBMClassifier(n_estimators=200, learning_rate=0.05)`" in text  # a multi-line repr on one line
    cautions = text.split("## Cautions", 1)[1].lower()
    for words in ("consent", "subgroup", "high-stakes", "institutional review board"):
        assert words in cautions


def test_markdown_of_regression_and_empty_parts(regression):
    results, oof = make_results("regression")
    results["per_rule"], results["learning_curve"], results["guards"], results["notes"] = [], [], [], []
    text = IncrementalValueReport(results, oof).to_markdown()
    assert "The per-rule ablation was not run." in text
    assert "Not available: the log has fewer than 2 populations." in text
    assert "The learning curve was not computed." in text
    assert "No guard fired." in text and "No notes." in text
    assert "R² (folds, mean ± sd)" in text and "p (DeLong)" not in text
    assert "events: 5,400." in text  # no positive rate for a regression target


def test_display_tables_are_strings(report):
    t = report.tables()
    assert set(t) == {"primary", "metrics", "comparisons", "per_rule", "transfer", "learning_curve", "rules",
                      "populations"}
    for name, table in t.items():
        assert all(isinstance(v, str) for v in table.to_numpy().ravel()), name
    assert t["primary"].loc[0, "Δ vs mined"] == "n/a"
    assert t["comparisons"]["metric"].str.contains("lower is better").sum() == 4  # log loss and Brier, twice


# -- figures -------------------------------------------------------------------------------------
def test_roc_points_agree_with_sklearn(report):
    first = report.oof_predictions().query("repeat == 0")
    assert first["combined"].duplicated().any()  # rounded scores: ties are exercised
    curves = plots.roc_curves(report.oof_predictions(), ("mined", "combined"))
    for name, curve in curves.items():
        # Reference library: scikit-learn's roc_curve without dropping collinear points.
        fpr, tpr, thresholds = roc_curve(first["y"], first[name], drop_intermediate=False)
        np.testing.assert_allclose(curve["fpr"], fpr)
        np.testing.assert_allclose(curve["tpr"], tpr)
        np.testing.assert_allclose(curve["thresholds"][1:], thresholds[1:])
        assert math.isinf(curve["thresholds"][0])
        # Reference library: scikit-learn's roc_auc_score.
        assert curve["auc"] == pytest.approx(roc_auc_score(first["y"], first[name]), abs=1e-12)


def test_plot_roc_puts_aucs_in_the_legend(report):
    fig = report.plot_roc()
    assert isinstance(fig, Figure)
    legend = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    pooled = report.to_dict()["variants"]["combined"]["pooled"]["auc"]
    assert f"combined (AUC {pooled:.3f})" in legend and len(legend) == 4
    fig = report.plot_roc(variants=("combined", "without:hasty_error"), repeat=1)
    assert len(fig.axes[0].get_lines()) == 3


def test_plot_roc_bad_requests(report, regression):
    with pytest.raises(EvaluationError, match="ROC curves are for classification; this report is a regr"):
        regression.plot_roc()
    with pytest.raises(EvaluationError, match="no column 'combind'. Did you mean 'combined'"):
        report.plot_roc(variants=("combind",))
    with pytest.raises(EvaluationError, match=r"no out-of-fold rows for repeat 5; repeats present: \[0, 1\]"):
        report.plot_roc(repeat=5)
    with pytest.raises(EvaluationError, match="exactly two classes"):
        plots.roc_points([1, 1, 1], [0.2, 0.4, 0.1])
    with pytest.raises(EvaluationError, match="missing values"):
        plots.roc_points([0, 1], [0.2, np.nan])


def test_rule_effects_forest_plot(report):
    fig = report.plot_rule_effects()
    ax = fig.axes[0]
    assert len(ax.containers) == 2  # one errorbar series for "dropped", one for "added"
    assert [t.get_text() for t in ax.get_yticklabels()] == ["hasty_error", "skimmed_hint", "idle_pause"]
    assert any(np.allclose(line.get_xdata(), 0.0) for line in ax.get_lines())  # the vertical line at 0
    empty = plots.plot_rule_effects(report.per_rule().iloc[:0])
    assert "ablation was not run" in empty.axes[0].texts[0].get_text()


def test_learning_curve_and_transfer_plots(report, regression):
    assert len(report.plot_learning_curve().axes) == 2
    ax = report.plot_transfer().axes[0]
    assert len(ax.patches) == 9
    assert [t.get_text() for t in ax.texts] == ["Δ +0.030"] * 3  # combined − mined above each population
    assert [t.get_text() for t in ax.get_xticklabels()] == list(SCHOOLS)  # the engine's order, not sorted
    empty = regression.plot_transfer()
    assert "fewer than 2 populations" in empty.axes[0].texts[0].get_text()
    with pytest.raises(EvaluationError, match="no 'acu' column. Did you mean 'auc'"):
        plots.plot_transfer(report.transfer(), metric="acu")


def test_save_writes_report_files_and_valid_pngs(report, tmp_path):
    before = plt.get_fignums()
    folder = report.save(tmp_path / "out" / "run1")
    assert folder == tmp_path / "out" / "run1"
    names = {"report.md", "report.json", "oof.csv", "oof_transfer.csv", "roc.png", "rule_effects.png",
             "learning_curve.png", "transfer.png"}
    assert {p.name for p in folder.iterdir()} == names
    for png in folder.glob("*.png"):
        data = png.read_bytes()
        assert data.startswith(PNG_SIGNATURE) and len(data) > 1000
        assert b"Matplotlib" in data[:400]  # the tEXt "Software" chunk matplotlib writes
    assert (folder / "report.json").read_text(encoding="utf-8") == report.to_json() + "\n"
    markdown = (folder / "report.md").read_text(encoding="utf-8")
    assert "![ROC curves](roc.png)" in markdown and "![Transfer by population](transfer.png)" in markdown
    assert pd.read_csv(folder / "oof.csv").shape == report.oof_predictions().shape
    assert plt.get_fignums() == before  # no figure leaked into pyplot's global state


def test_save_regression_skips_roc_and_transfer(regression, tmp_path):
    folder = regression.save(tmp_path)
    names = {p.name for p in folder.iterdir()}
    assert names == {"report.md", "report.json", "oof.csv", "rule_effects.png", "learning_curve.png"}


def test_save_refuses_an_unwritable_folder(report, tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(EvaluationError, match="cannot create the folder"):
        report.save(blocker / "sub")


def test_docstring_examples_run():
    for module in (plots, report_text, report_markdown):
        failed, attempted = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
        assert attempted > 0 and failed == 0, module.__name__
