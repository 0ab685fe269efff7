"""Per-rule validity diagnostics on simulated logs: planted, restating and null rules; references; renderings."""

import json
import warnings

import joblib
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from lightgbm import LGBMClassifier, LGBMRegressor
from scipy import special, stats
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.metrics import roc_auc_score
from sklearn.model_selection import GroupKFold, KFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from rulefeat import EventLog, LogFeatures, Rule, RuleFeatures
from rulefeat.errors import EvaluationError, LogRepairWarning
from rulefeat.evaluate.diagnose.engine import diagnose
from rulefeat.evaluate.diagnose.inputs import regression_counterpart
from rulefeat.evaluate.value.engine import compute_incremental_value
from rulefeat.report.diagnostics import RuleDiagnostics
from rulefeat.simulate import tutor_logs

# Hint skimming planted with a strong label link (and no other behaviour linked), skimming three times as common.
PLANTED = {"label_links": {"hint_skim": 3.0, "rapid_guess": 0.0, "idle": 0.0}, "behaviours": {"hint_skim": 3.0},
           "coder_error": 0.05}
SKIM = Rule("skimmed_hint", when="action == 'hint' and prev(action, within='step') == 'hint' and gap < 3s",
            report=["rate", "any"])
ATTEMPTING = Rule("attempting", when="action == 'attempt'", report=["rate"])
IDLE = Rule("idle_pause", when="gap > 3min", report=["count", "any"])
CORRECTNESS = {"families": ["correctness"]}


def _log(data) -> EventLog:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        return EventLog(data.events)


def _windows(data) -> pd.DataFrame:
    return data.windows[["student", "start", "end"]]


@pytest.fixture(scope="module")
def planted():
    data = tutor_logs(n_students=100, seed=1, n_skills=4, **PLANTED)
    return data, _log(data)


@pytest.fixture(scope="module")
def diag(planted):
    data, log = planted
    return diagnose(log, _windows(data), data.windows["label"], [SKIM, ATTEMPTING, IDLE], mined=CORRECTNESS,
                    cv=3, outcomes=data.outcomes, shap_sample=60, n_boot=200, random_state=0)


@pytest.fixture(scope="module")
def small():
    data = tutor_logs(n_students=40, seed=5, n_skills=2)
    return data, _log(data)


def _run_small(small, **kw):
    data, log = small
    options = {"mined": CORRECTNESS, "cv": 2, "outcomes": data.outcomes, "shap_sample": 20, "n_boot": 50,
               "random_state": 3, **kw}
    return diagnose(log, _windows(data), data.windows["label"], [SKIM, IDLE], **options)


def _entry(diagnostics, rule):
    return next(r for r in diagnostics.to_dict()["per_rule"] if r["rule"] == rule)


def _covers_zero(block) -> bool:
    return block["ci_low"] <= 0.0 <= block["ci_high"]


# -- what the diagnostics are for ------------------------------------------------------------------------
def test_planted_rule_is_valid_and_not_redundant(diag):
    skim = _entry(diag, "skimmed_hint")
    # Thresholds are ours (measured 0.77 AUC and R² 0.02 on these settings); the correctness family cannot see
    # how fast hints follow each other, so it must not predict the skimming rate.
    assert skim["association"]["auc"] >= 0.70
    assert skim["redundancy"]["r2"] < 0.20
    assert skim["unique"]["r"] > 0.3 and skim["unique"]["ci_low"] > 0.0
    assert skim["unique"]["ci_low_student"] > 0.0
    assert skim["association"]["lift"] > 1.5 and skim["association"]["kappa"] > 0.2
    assert skim["primary"] == "rate" and skim["column"] == "skimmed_hint__rate"
    # The idle rule reports count and any: its unit value is the count.
    assert _entry(diag, "idle_pause")["primary"] == "count"


def test_restating_rule_is_redundant_with_near_zero_unique_contribution():
    # The attempt share restates the volume family (attempts / actions). Over five simulated data sets the
    # mined features predict it almost exactly (R² >= 0.8 required) and what is left of it says nothing about
    # the label: |partial r beyond the features| < 0.15 every time, CI covering 0 in at least 4 of 5 seeds.
    covered, detector_relative = 0, []
    for s in range(5):
        data = tutor_logs(n_students=100, seed=s, n_skills=4)
        d = diagnose(_log(data), _windows(data), data.windows["label"], [ATTEMPTING], mined={"families": ["volume"]},
                     cv=3, shap_sample=0, n_boot=50, random_state=s)
        entry = _entry(d, "attempting")
        assert entry["redundancy"]["r2"] >= 0.8
        assert abs(entry["unique_features"]["r"]) < 0.15
        covered += _covers_zero(entry["unique_features"])
        detector_relative.append(abs(entry["unique"]["r"]))
    assert covered >= 4
    # Documented behaviour: relative to the default detector itself (which uses its own features imperfectly on
    # 400 training units) the same rule keeps a larger partial correlation.
    assert np.mean(detector_relative) > 0.05


def test_null_rule_external_validity_covers_zero():
    # Idle pauses change neither learning nor the tests in the simulator, and their label link is 0 here: the
    # Spearman CI of the students' idle rate with the posttest covers 0 in at least 4 of 5 seeds (95 % CIs).
    covered = 0
    for seed in range(5):
        data = tutor_logs(n_students=80, seed=seed, n_skills=3, label_links={"idle": 0.0})
        d = diagnose(_log(data), _windows(data), data.windows["label"], [IDLE], mined=CORRECTNESS, cv=3,
                     outcomes=data.outcomes, shap_sample=0, n_boot=20, random_state=seed)
        external = _entry(d, "idle_pause")["external"]
        assert external["n_students"] == 80 and external["method"] == "spearman"
        covered += _covers_zero(external)
    assert covered >= 4


# -- references ----------------------------------------------------------------------------------------
def test_firing_rates_match_pandas_groupby(planted, diag):
    data, log = planted
    # The skimming rule learns nothing in fit, so its firings are the same in every fold: count them on the
    # whole log with a one-row-per-student unit and aggregate with pandas.
    counter = Rule("skimmed_hint", when=SKIM.when, report=["count"])
    students = pd.DataFrame({"student": _windows(data)["student"].unique()})
    counts = RuleFeatures(rules=[counter], log=log, unit="student").fit_transform(students)["skimmed_hint__count"]
    events = data.events.groupby("student", observed=True).agg(n=("action", "size"), school=("population", "first"))
    ref = students.assign(firings=counts.to_numpy()).join(events, on="student")
    by_school = ref.groupby("school").agg(firings=("firings", "sum"), n=("n", "sum"), students=("student", "size"),
                                          any=("firings", lambda f: (f > 0).mean()))
    table = diag.per_population().query("rule == 'skimmed_hint'").set_index("population")
    np.testing.assert_allclose(table.loc[by_school.index, "rate"], by_school.firings / by_school.n, rtol=1e-12)
    np.testing.assert_array_equal(table.loc[by_school.index, "n_students"], by_school.students)
    np.testing.assert_allclose(table.loc[by_school.index, "share_students_any"], by_school["any"])
    overall = _entry(diag, "skimmed_hint")["firing"]
    assert overall["rate"] == pytest.approx(ref.firings.sum() / ref.n.sum(), rel=1e-12)
    assert overall["n_events"] == ref.n.sum()
    stability = _entry(diag, "skimmed_hint")["stability"]["firing_rate"]
    assert stability["range"] == pytest.approx(np.ptp(by_school.firings / by_school.n))
    assert stability["sd"] == pytest.approx(np.std(by_school.firings / by_school.n, ddof=1))


def test_population_auc_matches_sklearn(planted, diag):
    data, _ = planted
    units = diag.units()
    school = data.windows["population"].astype(str).to_numpy()
    table = diag.per_population().query("rule == 'skimmed_hint'").set_index("population")
    for name in table.index:
        rows = (school == name) & units["value:skimmed_hint"].notna().to_numpy()
        # Reference library: scikit-learn's roc_auc_score.
        expected = roc_auc_score(units.y[rows], units["value:skimmed_hint"][rows])
        assert table.loc[name, "auc"] == pytest.approx(expected, rel=1e-12)


def _residuals(target, controls):
    design = np.column_stack([np.ones(len(target)), controls])
    return target - design @ np.linalg.lstsq(design, target, rcond=None)[0]


def test_partial_correlations_match_numpy_residual_regression(diag):
    units = diag.units()
    for rule in ("skimmed_hint", "attempting"):
        ok = units[f"value:{rule}"].notna().to_numpy()
        value, y = units[f"value:{rule}"].to_numpy()[ok], units.y.to_numpy()[ok]
        score = special.logit(np.clip(units.mined_score.to_numpy()[ok], 1e-6, 1 - 1e-6))
        both = np.column_stack([score, units[f"predicted:{rule}"].to_numpy()[ok]])
        for key, controls in (("unique", score), ("unique_features", both)):
            block = _entry(diag, rule)[key]
            r = np.corrcoef(_residuals(value, controls), _residuals(y, controls))[0, 1]
            assert block["r"] == pytest.approx(r, abs=1e-10)
            # Reference library: statsmodels OLS; the t-test of the rule's coefficient in
            # y ~ 1 + value + controls has the partial correlation's p-value.
            fit = sm.OLS(y, sm.add_constant(np.column_stack([value, controls]))).fit()
            assert block["p_value"] == pytest.approx(fit.pvalues[1], rel=1e-6)
            assert block["ci_low"] < block["r"] < block["ci_high"]


def test_external_validity_and_hierarchical_regression_match_references(planted, diag):
    data, _ = planted
    students = diag.students()
    expected = data.outcomes.set_index("student").posttest.loc[students.student]
    np.testing.assert_allclose(students.outcome, expected)
    # Reference library: scipy's spearmanr.
    rho = stats.spearmanr(students["rate:skimmed_hint"], students.outcome).statistic
    assert _entry(diag, "skimmed_hint")["external"]["r"] == pytest.approx(rho, abs=1e-12)
    h = diag.hierarchical()
    assert h["available"] and h["kind"] == "continuous" and h["base"] == ["mined_score_mean"]
    base = sm.OLS(students.outcome, sm.add_constant(students[["mined_score_mean"]])).fit()
    full = sm.OLS(students.outcome, sm.add_constant(students[["mined_score_mean", *[f"rate:{r}" for r in
                                                                                   h["extra"]]]])).fit()
    # Reference library: statsmodels OLS and its nested-model F test.
    assert h["delta_r2"] == pytest.approx(full.rsquared - base.rsquared, rel=1e-9)
    f_stat, p, _ = full.compare_f_test(base)
    assert h["statistic"] == pytest.approx(f_stat, rel=1e-9) and h["p_value"] == pytest.approx(p, rel=1e-6)


def test_shap_local_accuracy_per_fold_and_shares(diag):
    values, features, rows = diag.shap_values(), diag.shap_features(), diag.shap_rows()
    assert values.shape == features.shape and list(values.columns) == list(features.columns)
    units = diag.units()
    for fold, part in rows.groupby("fold"):
        assert len(part) == 60  # shap_sample held-out units per fold
        assert (units.fold.to_numpy()[part.row] == fold).all()  # each explained row is held out by its fold
        # Local accuracy (Lundberg & Lee 2017): expected value + Σ SHAP = the model's raw (log-odds) output.
        total = part.expected_value + values.loc[part.index].sum(axis=1)
        np.testing.assert_allclose(total, part.raw_score, atol=1e-6)
    shap = diag.to_dict()["shap"]
    abs_total = values.abs().to_numpy().sum()
    rule_cols = [c for c in values.columns if not c.startswith("mined__")]
    assert shap["rule_share"] == pytest.approx(values[rule_cols].abs().to_numpy().sum() / abs_total)
    skim_cols = [c for c in values.columns if c.startswith("skimmed_hint__")]
    per_rule = diag.shap_summary().set_index("group")
    assert per_rule.loc["skimmed_hint", "mean_abs"] == pytest.approx(values[skim_cols].abs().sum(axis=1).mean())
    assert per_rule.share.sum() == pytest.approx(1.0)
    assert shap["top_rules"][0] == "skimmed_hint"
    assert max(f["max_abs_error"] for f in shap["folds"]) < 1e-6


def test_splits_and_mined_scores_line_up_with_incremental_value(planted, diag):
    data, log = planted
    _, oof, _ = compute_incremental_value(log, _windows(data), data.windows["label"], [SKIM, ATTEMPTING, IDLE],
                                          mined=CORRECTNESS, cv=3, random_state=0, ablation=False, transfer=False,
                                          learning_curve=None, n_boot=20, repeats=1)
    oof = oof.sort_values("row")
    units = diag.units()
    np.testing.assert_array_equal(oof.fold.to_numpy(), units.fold.to_numpy())
    np.testing.assert_allclose(oof.mined.to_numpy(), units.mined_score.to_numpy(), rtol=1e-12)


# -- determinism and settings ------------------------------------------------------------------------------
def test_same_seed_gives_identical_dict_and_threads_agree(small):
    first = _run_small(small)
    assert first.to_dict() == _run_small(small).to_dict()
    with joblib.parallel_config(backend="threading"):
        parallel = _run_small(small, n_jobs=2)
    assert parallel.to_json() == first.to_json()
    assert _run_small(small, random_state=4).to_dict() != first.to_dict()
    json.loads(first.to_json())  # JSON-safe: no NaN, only plain types


def test_gain_outcome_binary_outcome_and_separation_note(small):
    data, _ = small
    gain = _run_small(small, outcome="gain", shap_sample=0)
    expected = (data.outcomes.posttest - data.outcomes.pretest).to_numpy()
    students = gain.students()
    np.testing.assert_allclose(students.outcome, pd.Series(expected, index=data.outcomes.student)[students.student])
    # A binary outcome that the skimming rate separates perfectly: the regression cannot be fitted; a note says so.
    rate = students.set_index("student")["rate:skimmed_hint"]
    passed = data.outcomes.assign(passed=data.outcomes.student.map(rate > rate.median()).astype(bool))
    separated = _run_small(small, outcomes=passed, outcome="passed", shap_sample=0)
    h = separated.hierarchical()
    assert not h["available"] and "separation" in h["reason"]
    assert any("Hierarchical regression: not computed" in n and "separation" in n for n in separated.notes())


def test_other_model_skips_shap_and_uses_its_regressor(small):
    model = make_pipeline(SimpleImputer(), StandardScaler(), LogisticRegression(max_iter=500))
    d = _run_small(small, model=model)
    assert d.to_dict()["settings"]["regressor"] == "Pipeline"
    assert not d.to_dict()["shap"]["available"] and d.figures() == {}
    assert any("SHAP attributions were skipped" in n for n in d.notes())
    assert d.shap_summary().empty and "LightGBM" in d.shap_summary().attrs["reason"]


def test_regression_counterparts():
    fallback = LGBMRegressor()
    reg, note = regression_counterpart(LGBMClassifier(num_leaves=7, class_weight="balanced"), fallback)
    assert isinstance(reg, LGBMRegressor) and reg.get_params()["num_leaves"] == 7 and note is None
    assert reg.get_params()["class_weight"] is None
    pipe, _ = regression_counterpart(make_pipeline(StandardScaler(), LogisticRegression()), fallback)
    assert isinstance(pipe.steps[-1][1], Ridge)
    other, note = regression_counterpart(SVC(probability=True), fallback)
    assert other is fallback and "no known regression counterpart" in note
    assert regression_counterpart(None, fallback) == (fallback, None)


def test_grouped_splitter_population_column_and_progress(small, capsys):
    data, log = small
    units = data.windows[["student", "start", "end", "population"]].assign(
        school=lambda w: np.where(w.population.astype(str) == str(w.population.iloc[0]), "north", "south"))
    d = diagnose(log, units, data.windows["label"], [SKIM], mined=CORRECTNESS, cv=GroupKFold(2), population="school",
                 shap_sample=0, n_boot=20, random_state=0, verbose=1)
    assert d.to_dict()["settings"]["n_folds"] == 2 and d.to_dict()["settings"]["population"] == "school"
    err = capsys.readouterr().err  # the evaluation's one progress bar, labelled with the function's name
    assert "diagnose" in err and "2/2" in err and "fold" in err
    assert sorted(d.per_population().population) == ["north", "south"]
    assert set(_entry(d, "skimmed_hint")["stability"]["firing_rate"]["values"]) == {"north", "south"}
    one = diagnose(log, units.assign(school="north"), data.windows["label"], [SKIM], mined=CORRECTNESS, cv=2,
                   population="school", shap_sample=0, n_boot=20, random_state=0)
    assert _entry(one, "skimmed_hint")["stability"] is None
    assert any("at least two populations (one population)" in n for n in one.notes())


# -- renderings -------------------------------------------------------------------------------------------
def test_tables_figures_markdown_and_save(diag, tmp_path):
    table = diag.table()
    assert table.rule.tolist() == ["skimmed_hint", "attempting", "idle_pause"]
    for column in ("firing_rate", "auc", "redundancy_r2", "partial_r", "partial_features_r", "rate_range",
                   "auc_sd", "external_r", "shap_mean_abs"):
        assert pd.api.types.is_float_dtype(table[column]), column
    assert diag.per_population().shape[0] == 3 * len(diag.to_dict()["data"]["populations"])
    figures = diag.figures()
    top = diag.to_dict()["shap"]["top_rules"]
    assert set(figures) == {"shap_share", "shap_per_rule", *[f"dependence:{r}" for r in top]} and len(top) == 3
    text = diag.to_markdown()
    for heading in ("# Rule diagnostics", "## Rules on held-out units", "## Per population",
                    "## Hierarchical regression", "## SHAP attributions"):
        assert heading in text
    folder = diag.save(tmp_path / "out")
    assert json.loads((folder / "diagnostics.json").read_text()) == diag.to_dict()
    assert (folder / "shap_share.png").stat().st_size > 0 and (folder / "dependence_skimmed_hint.png").exists()
    assert "](shap_per_rule.png)" in (folder / "diagnostics.md").read_text()
    rebuilt = RuleDiagnostics(json.loads(diag.to_json()))
    pd.testing.assert_frame_equal(rebuilt.table(), table)
    assert set(rebuilt.figures()) == {"shap_share", "shap_per_rule"}  # dependence plots need the SHAP tables
    assert "3 rules" in repr(diag)


# -- bad inputs -------------------------------------------------------------------------------------------
@pytest.mark.parametrize("change, match", [
    ({"outcomes": "OUT_NO_STUDENT"}, "no 'student' column"),
    ({"outcome": "postest"}, "Did you mean 'posttest'"),
    ({"outcome": "gain", "outcomes": "OUT_NO_PRE"}, r"lacks \['pretest'\]"),
    ({"outcomes": "OUT_OTHER_IDS"}, "none of the .* students of units is in outcomes"),
    ({"y": "SHORT"}, "'y' has 5 values but there are"),
    ({"y": "THREE"}, "exactly two classes"),
    ({"cv": KFold(3)}, "does not split by student"),
    ({"population": "school"}, "must name a column of units"),
    ({"mined": {"familes": ["volume"]}}, "Did you mean 'families'"),
    ({"rules": "TRANSFORMER"}, "must be rules .* or a RuleFeatures"),
    ({"shap_sample": -1}, "'shap_sample' parameter of diagnose"),
    ({"random_state": "x"}, "'random_state' parameter of diagnose"),
    ({"n_jobs": 0}, "'n_jobs' parameter of diagnose"),
])
def test_bad_inputs(small, change, match):
    data, log = small
    outcomes = data.outcomes
    special_values = {
        "OUT_NO_STUDENT": outcomes.rename(columns={"student": "pupil"}),
        "OUT_NO_PRE": outcomes.drop(columns=["pretest"]),
        "OUT_OTHER_IDS": outcomes.assign(student=np.arange(len(outcomes))),
        "SHORT": np.zeros(5), "THREE": np.arange(len(data.windows)) % 3,
        "TRANSFORMER": LogFeatures(log, families=["volume"]),
    }
    args = {"log": log, "units": _windows(data), "y": data.windows["label"], "rules": [SKIM],
            "mined": CORRECTNESS, "cv": 2, "outcomes": outcomes, "shap_sample": 0, "random_state": 0}
    args.update({k: special_values.get(v, v) if isinstance(v, str) else v for k, v in change.items()})
    with pytest.raises(EvaluationError, match=match):
        diagnose(args.pop("log"), args.pop("units"), args.pop("y"), args.pop("rules"), **args)


def test_rule_that_never_fires_gets_notes_not_errors(small):
    never = Rule("never", when="action == 'hint' and gap < 0s", report=["rate", "any"])
    data, log = small
    d = diagnose(log, _windows(data), data.windows["label"], [SKIM, never], mined=CORRECTNESS, cv=2,
                 outcomes=data.outcomes, shap_sample=20, n_boot=20, random_state=0)
    entry = _entry(d, "never")
    assert entry["firing"]["firings"] == 0 and entry["firing"]["share_students_any"] == 0.0
    assert entry["association"]["auc"] == 0.5  # every unit tied
    assert entry["unique"] is None and entry["external"] is None and entry["redundancy"]["r2"] is None
    assert entry["stability"] is None and entry["unique_features"] is None
    about = [n for n in d.notes() if "'never'" in n and not n.startswith("Hierarchical regression")]
    assert len(about) == 1 and about[0].startswith("Rule 'never' never fired")
    assert d.hierarchical()["extra"] == ["skimmed_hint"]
    assert d.table().set_index("rule").loc["never", "shap_mean_abs"] == 0.0
