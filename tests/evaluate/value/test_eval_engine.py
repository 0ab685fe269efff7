"""End-to-end checks of incremental_value on simulated logs (fast settings: a logistic regression model)."""

import json
import warnings

import joblib
import numpy as np
import pandas as pd
import pytest
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.metrics import roc_auc_score
from sklearn.model_selection import GroupKFold, KFold, cross_validate
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from threadpoolctl import threadpool_limits

from rulefeat import EventLog
from rulefeat.errors import EvaluationError, LogRepairWarning
from rulefeat.evaluate import GuardWarning, default_model, incremental_value, make_detector
from rulefeat.evaluate.value.engine import (
    compute_incremental_value,
    compute_incremental_value_precomputed,
    demo_rules_path,
)
from rulefeat.mined.transformer import LogFeatures
from rulefeat.rules import RuleSet
from rulefeat.rules.transformer import RuleFeatures
from rulefeat.simulate import tutor_logs

FAST = {"families": ["volume", "correctness"]}
LIGHT = {"ablation": False, "transfer": False, "learning_curve": None, "n_boot": 100, "repeats": 1}
STATELESS_RULES = """
[rules.skimmed_hint]
when = "action == 'hint' and prev(action, within='step') == 'hint' and gap < 3s"
report = ["count", "rate", "any"]

[rules.guess_after_error]
when = "action == 'attempt' and prev(action, within='step') == 'attempt' and not prev(correct, within='step') and gap < 3s"
report = ["count", "any"]
"""
TOP_KEYS = ["task", "primary_metric", "settings", "data", "rules", "rules_hash", "feature_counts", "variants",
            "comparisons", "per_rule", "folds", "transfer", "learning_curve", "guards", "notes", "timing",
            "reproducibility"]


@pytest.fixture(autouse=True, scope="module")
def _one_blas_thread():
    # Tiny logistic regressions run faster on one BLAS thread; the evaluation leaves such settings to the caller.
    with threadpool_limits(1):
        yield


def lr():
    return make_pipeline(SimpleImputer(), StandardScaler(), LogisticRegression(max_iter=500))


@pytest.fixture(scope="module")
def sim():
    data = tutor_logs(n_students=48, seed=3, n_skills=4)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        log = EventLog(data.events)
    X = data.windows[["student", "start", "end"]]
    return data, log, X, data.windows["label"].to_numpy()


@pytest.fixture(scope="module")
def full(sim):
    data, log, X, y = sim
    return compute_incremental_value(log, X, y, demo_rules_path(), model=lr(), mined=FAST, repeats=2,
                                     random_state=0, n_boot=100)


def _plain_types(value):
    if isinstance(value, dict):
        return all(isinstance(k, str) and _plain_types(v) for k, v in value.items())
    if isinstance(value, list):
        return all(_plain_types(v) for v in value)
    return value is None or type(value) in (str, int, float, bool)


def test_results_follow_the_schema(full, sim):
    res, oof, oof_transfer = full
    rules = RuleSet.from_toml(demo_rules_path())
    assert list(res) == TOP_KEYS and _plain_types(res)
    json.dumps(res)  # serialisable (NaN as the JSON extension; the report writes null)
    assert res["task"] == "classification" and res["primary_metric"] == "auc"
    assert set(res["settings"]) == {"n_splits", "repeats", "random_state", "model", "unit", "alpha", "alternative",
                                    "n_boot", "learning_curve_fractions", "population_column"}
    assert (res["settings"]["n_splits"], res["settings"]["repeats"], res["settings"]["unit"]) == (5, 2, "window")
    assert res["data"]["n_units"] == len(sim[2]) and res["data"]["n_students"] == 48
    assert res["data"]["n_events"] == len(sim[1]) and res["data"]["log"] == sim[1].summary()
    assert sum(p["n_units"] for p in res["data"]["populations"].values()) == len(sim[2])
    assert [r["name"] for r in res["rules"]] == list(rules.names) and res["rules_hash"] == rules.text_hash()
    assert set(res["variants"]) == {"mined", "rules", "combined"}
    metrics = ["auc", "kappa", "average_precision", "log_loss", "brier"]
    assert list(res["variants"]["combined"]["folds"]) == metrics
    assert [(c["metric"], c["variant"]) for c in res["comparisons"]] == [(m, v) for m in metrics
                                                                        for v in ("combined", "rules")]
    assert [r["rule"] for r in res["per_rule"]] == list(rules.names)
    assert len(res["folds"]) == 2 * 5 * (3 + 2 * len(rules))
    assert [r["fraction"] for r in res["learning_curve"]] == [0.25, 0.5, 1.0]
    assert res["feature_counts"]["rules"] == sum(len(r.report) for r in rules)
    assert set(res["reproducibility"]) == {"rulefeat", "python", "numpy", "pandas", "scikit-learn", "lightgbm",
                                           "random_state", "rules_hash", "command"}
    assert any("DeLong" in n for n in res["notes"])


def test_out_of_fold_table(full, sim):
    res, oof, _ = full
    _, _, X, y = sim
    variants = ["mined", "rules", "combined"] + [f"{k}:{r}" for r in RuleSet.from_toml(demo_rules_path()).names
                                                 for k in ("without", "plus")]
    assert list(oof.columns) == ["row", "student", "repeat", "fold", "y", *variants]
    for r in (0, 1):
        part = oof[oof["repeat"] == r]
        assert sorted(part["row"]) == list(range(len(X)))               # every unit once per repeat
        assert part.groupby("student")["fold"].nunique().max() == 1     # a student in one test fold only
    np.testing.assert_array_equal(oof["y"], y[oof["row"]])
    np.testing.assert_array_equal(oof["student"], X["student"].to_numpy()[oof["row"]])


def test_pooled_and_fold_metrics_agree_with_the_oof_table(full):
    res, oof, _ = full
    first = oof[oof["repeat"] == 0]
    for v in ("mined", "rules", "combined"):
        # Reference library: sklearn.metrics.roc_auc_score on the pooled predictions of repeat 0.
        assert res["variants"][v]["pooled"]["auc"] == pytest.approx(roc_auc_score(first["y"], first[v]))
        folds = [f["auc"] for f in res["folds"] if f["variant"] == v]
        assert res["variants"][v]["folds"]["auc"]["mean"] == pytest.approx(np.mean(folds))
    headline = res["comparisons"][0]
    assert headline["pooled_delta"] == pytest.approx(roc_auc_score(first["y"], first["combined"])
                                                     - roc_auc_score(first["y"], first["mined"]))
    # The headline Δ is the mean over every fold and repeat of the per-fold difference.
    fold_auc = {v: np.array([f["auc"] for f in res["folds"] if f["variant"] == v]) for v in ("mined", "combined")}
    assert headline["delta"] == pytest.approx(np.mean(fold_auc["combined"] - fold_auc["mined"]))
    assert headline["ci_low"] <= headline["delta"] <= headline["ci_high"] and headline["df"] == 9
    curve = res["learning_curve"][-1]
    assert curve["mined"] == pytest.approx(res["variants"]["mined"]["folds"]["auc"]["mean"])


def test_transfer_view_from_the_log_population(full, sim):
    res, _, oof_transfer = full
    schools = sorted(sim[0].events["population"].unique())
    assert res["transfer"]["available"] and res["transfer"]["reason"] is None
    assert [(r["population"], r["variant"]) for r in res["transfer"]["rows"]] == [
        (s, v) for s in schools for v in ("mined", "rules", "combined")]
    rows = {(r["population"], r["variant"]): r["auc"] for r in res["transfer"]["rows"]}
    for d in res["transfer"]["deltas"]:
        assert d["delta"] == pytest.approx(rows[(d["population"], "combined")] - rows[(d["population"], "mined")])
    assert list(oof_transfer.columns) == ["row", "student", "population", "fold", "y", "mined", "rules", "combined"]
    assert sorted(oof_transfer["row"]) == list(range(len(sim[2])))


def test_the_report_wraps_the_results(full):
    from rulefeat.evaluate import IncrementalValueReport

    report = IncrementalValueReport(*full)
    assert "timing" not in json.loads(report.to_json())
    assert list(report.summary()["variant"]) == ["mined", "rules", "combined"]


def test_same_seed_same_results_also_in_parallel(sim):
    _, log, X, y = sim
    kw = dict(model=lr(), mined=FAST, cv=3, random_state=7, n_boot=100, transfer=False, learning_curve=(0.5, 1.0),
              repeats=1)
    a, oof_a, _ = compute_incremental_value(log, X, y, STATELESS_RULES, **kw)
    b, oof_b, _ = compute_incremental_value(log, X, y, STATELESS_RULES, **kw)
    c, oof_c, _ = compute_incremental_value(log, X, y, STATELESS_RULES, n_jobs=2, **kw)
    for other in (b, c):
        assert {k: v for k, v in a.items() if k != "timing"} == {k: v for k, v in other.items() if k != "timing"}
    pd.testing.assert_frame_equal(oof_a, oof_b)
    pd.testing.assert_frame_equal(oof_a, oof_c)
    d, _, _ = compute_incremental_value(log, X, y, STATELESS_RULES, **{**kw, "random_state": 8})
    assert d["folds"] != a["folds"]


@pytest.mark.parametrize("model", ["logistic", "lightgbm"])
def test_make_detector_cross_validated_equals_the_combined_variant(sim, model):
    _, log, X, y = sim
    estimator = lr() if model == "logistic" else default_model("classification", random_state=1, n_threads=1)
    mined = LogFeatures(log, families=["volume", "correctness", "timing"], random_state=0)
    rules = RuleFeatures(rules=demo_rules_path(), log=log)
    res, oof, _ = compute_incremental_value(log, X, y, rules, model=estimator, mined=mined, cv=GroupKFold(4),
                                            random_state=0, **LIGHT)
    detector = make_detector(log, rules, model=estimator, mined=mined)
    cv = cross_validate(detector, X, y, groups=X["student"], cv=GroupKFold(4), return_estimator=True,
                        return_indices=True, scoring="roc_auc")
    for k, (fitted, test) in enumerate(zip(cv["estimator"], cv["indices"]["test"], strict=True)):
        part = oof[oof["fold"] == k]
        np.testing.assert_array_equal(part["row"], test)
        # LightGBM is bit-for-bit; lbfgs may differ in the last digits (the pipeline hands it a column-major
        # array from pandas, the engine a row-major one, so sums run in another order).
        tol = 0.0 if model == "lightgbm" else 1e-9
        np.testing.assert_allclose(part["combined"], fitted.predict_proba(X.iloc[test])[:, 1], rtol=0, atol=tol)
        combined = [f["auc"] for f in res["folds"] if f["fold"] == k and f["variant"] == "combined"]
        assert combined == [pytest.approx(cv["test_score"][k])]
    names = detector.fit(X, y)[:-1].get_feature_names_out()
    assert names[0].startswith("mined__") and names[-1].startswith("rules__")


def test_splitters_that_ignore_students_are_refused(sim):
    _, log, X, y = sim
    with pytest.raises(EvaluationError, match="KFold.*must never be split across train and test"):
        compute_incremental_value(log, X, y, STATELESS_RULES, cv=KFold(5), model=lr(), mined=FAST, **LIGHT)


class LabelLeak(TransformerMixin, BaseEstimator):
    """Test stand-in: a 'feature' looked up from every unit's label (a planted leak)."""

    def __init__(self, table=None):
        self.table = table

    def fit(self, X, y=None):
        return self

    def transform(self, X):
        keys = zip(X["student"], X["start"], strict=True)
        return pd.DataFrame({"leak": [self.table[k] for k in keys]}, index=X.index)


class StudentLabelRate(TransformerMixin, BaseEstimator):
    """Test stand-in: each student's label rate learned in fit, the overall rate for unseen students."""

    def fit(self, X, y):
        frame = pd.DataFrame({"student": X["student"].to_numpy(), "y": np.asarray(y, dtype=float)})
        self.rates_ = frame.groupby("student", observed=True)["y"].mean()
        self.overall_ = float(frame["y"].mean())
        return self

    def transform(self, X):
        rate = X["student"].map(self.rates_).astype(float).fillna(self.overall_)
        return pd.DataFrame({"student_rate": rate.to_numpy()}, index=X.index)


def test_planted_leak_is_caught(sim):
    _, log, X, y = sim
    table = dict(zip(zip(X["student"], X["start"], strict=True), y.astype(float), strict=True))
    with pytest.warns(GuardWarning, match=r"\[label_leak\] Feature 'mined__leak' alone reaches AUC 1.000"):
        res, _, _ = compute_incremental_value(log, X, y, STATELESS_RULES, model=lr(), mined=LabelLeak(table),
                                              random_state=0, **LIGHT)
    assert [g["kind"] for g in res["guards"]] == ["label_leak"]
    assert res["variants"]["mined"]["pooled"]["auc"] > 0.99


def test_leaky_out_of_fold_norms_are_optimistic_where_in_fold_ones_are_not(sim):
    _, log, X, y = sim
    # In-fold: the student's label rate is learned from training students only; test students are unseen, so
    # every test unit gets the overall rate and the mined detector cannot rank them (AUC exactly 0.5 per fold).
    res, _, _ = compute_incremental_value(log, X, y, STATELESS_RULES, model=lr(), mined=StudentLabelRate(),
                                          random_state=0, **LIGHT)
    in_fold = [f["auc"] for f in res["folds"] if f["variant"] == "mined"]
    assert in_fold == [0.5] * 5
    # Leaky: the same norm fitted once on all students (test students' own labels included) before the split.
    leaky = StudentLabelRate().fit(X, y).transform(X)
    rules = RuleFeatures(log, STATELESS_RULES).fit_transform(X)
    out, _, _ = compute_incremental_value_precomputed(leaky, rules, y, X["student"], model=lr(), random_state=0,
                                                      **LIGHT)
    optimistic = [f["auc"] for f in out["folds"] if f["variant"] == "mined"]
    assert np.mean(optimistic) > 0.65 and min(optimistic) > 0.55
    assert any("learned from every student" in n for n in out["notes"])


def test_precomputed_path_equals_the_in_fold_path_for_stateless_features(sim):
    _, log, X, y = sim
    kw = dict(model=lr(), random_state=4, n_boot=100, transfer=False, learning_curve=(0.5, 1.0), repeats=1)
    live, oof_live, _ = compute_incremental_value(log, X, y, STATELESS_RULES, mined={**FAST, "prune": False}, **kw)
    mined = LogFeatures(log, prune=False, **FAST).fit_transform(X)
    rules = RuleFeatures(log, STATELESS_RULES).fit_transform(X)
    pre, oof_pre, _ = compute_incremental_value_precomputed(mined, rules, y, X["student"], **kw)
    for key in ("variants", "comparisons", "per_rule", "folds", "learning_curve", "feature_counts"):
        assert pre[key] == live[key], key
    pd.testing.assert_frame_equal(oof_pre, oof_live)


def test_regression_target(sim):
    data, log, X, _ = sim
    posttest = data.windows[["student"]].merge(data.outcomes[["student", "posttest"]], on="student")["posttest"]
    with pytest.warns(GuardWarning, match="constant_labels"):
        res, oof, _ = compute_incremental_value(log, X, posttest.to_numpy(), STATELESS_RULES,
                                                model=make_pipeline(SimpleImputer(), StandardScaler(), Ridge()),
                                                mined=FAST, random_state=0, n_boot=100, ablation=True,
                                                transfer=False, learning_curve=None, repeats=1)
    assert res["task"] == "regression" and res["primary_metric"] == "r2"
    assert [(c["metric"], c["variant"]) for c in res["comparisons"]] == [
        ("r2", "combined"), ("r2", "rules"), ("rmse", "combined"), ("rmse", "rules")]
    assert res["data"]["positive_rate"] is None and all(f["threshold"] is None for f in res["folds"])
    assert len(res["per_rule"]) == 2 and np.isfinite(res["per_rule"][0]["drop_delta"])
    first = oof[oof["repeat"] == 0]
    resid = ((first["y"] - first["combined"]) ** 2).sum() / ((first["y"] - first["y"].mean()) ** 2).sum()
    assert res["variants"]["combined"]["pooled"]["r2"] == pytest.approx(1 - resid)


def test_transfer_unavailable_reasons(sim):
    data, log, X, y = sim
    units = X.assign(school="Only School", label=y)
    res, _, oof_t = compute_incremental_value(log, units, "label", STATELESS_RULES, population="school",
                                              model=lr(), mined=FAST, **{**LIGHT, "transfer": True})
    assert not res["transfer"]["available"] and "only one population ('Only School')" in res["transfer"]["reason"]
    assert oof_t is None and res["settings"]["population_column"] == "school"
    assert res["data"]["populations"] == {"Only School": {"n_units": len(X), "n_students": 48,
                                                          "positive_rate": pytest.approx(y.mean())}}
    res, _, _ = compute_incremental_value(log, X, y, STATELESS_RULES, model=lr(), mined=FAST, **LIGHT)
    assert res["transfer"]["reason"] == "Not requested (transfer=False)."
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        no_pop = EventLog(data.events.drop(columns=["population"]))
    res, _, _ = compute_incremental_value(no_pop, X, y, STATELESS_RULES, model=lr(), mined=FAST,
                                          **{**LIGHT, "transfer": True})
    assert res["transfer"]["reason"].startswith("No population information")


def test_folds_that_cannot_be_scored_are_noted():
    rng = np.random.default_rng(0)
    students = np.repeat([f"s{i}" for i in range(8)], 5)
    y = (rng.random(40) < 0.4).astype(float)
    y[:5] = 0.0  # s0 has a single class
    mined = pd.DataFrame({"m": rng.normal(size=40)})
    rules = pd.DataFrame({"r__count": rng.normal(size=40)})
    from sklearn.model_selection import LeaveOneGroupOut

    res, _, _ = compute_incremental_value_precomputed(mined, rules, y, students, model=lr(), cv=LeaveOneGroupOut(),
                                                      **LIGHT)
    text = "\n".join(res["notes"])
    assert "8 of 8 cross-validation folds could not be scored" in text
    assert "has only one class" in text and "has only 1 students (fewer than 3)" in text
    assert all(np.isnan(f["auc"]) for f in res["folds"])
    head = res["comparisons"][0]
    assert np.isnan(head["p_value"]) and np.isnan(head["delta"]) and np.isfinite(head["pooled_delta"])


def test_fold_warnings_are_raised_once_and_noted(sim):
    _, log, X, y = sim

    class Noisy(StudentLabelRate):
        def transform(self, X):
            warnings.warn("stand-in transformer warns in every fold", UserWarning, stacklevel=2)
            return super().transform(X)

    with pytest.warns(UserWarning, match="stand-in transformer warns") as caught:
        res, _, _ = compute_incremental_value(log, X, y, STATELESS_RULES, model=lr(), mined=Noisy(), **LIGHT)
    assert sum("stand-in" in str(w.message) for w in caught) == 1
    assert "Warning raised in 5 fold(s): stand-in transformer warns in every fold" in res["notes"]


def test_joblib_parallel_config_applies(sim):
    _, log, X, y = sim
    kw = dict(model=lr(), mined=FAST, cv=3, random_state=2, **LIGHT)
    plain, oof_plain, _ = compute_incremental_value(log, X, y, STATELESS_RULES, **kw)
    with joblib.parallel_config(backend="threading"):
        threaded, oof_threaded, _ = compute_incremental_value(log, X, y, STATELESS_RULES, n_jobs=2, **kw)
    assert plain["comparisons"] == threaded["comparisons"]
    pd.testing.assert_frame_equal(oof_plain, oof_threaded)


def test_precomputed_transfer_with_given_populations():
    rng = np.random.default_rng(5)
    students = np.repeat([f"s{i:02d}" for i in range(30)], 6)
    school = np.repeat(np.array(["A", "B", "C"])[np.arange(30) % 3], 6)
    y = (rng.random(180) < 0.35).astype(float)
    mined = pd.DataFrame({"m": y + rng.normal(0, 1.0, 180)})
    rules = pd.DataFrame({"r__rate": y + rng.normal(0, 0.5, 180), "r__any": rng.random(180)})
    res, _, oof_t = compute_incremental_value_precomputed(mined, rules, y, students, population=school, repeats=1,
                                                          model=lr(), random_state=0, n_boot=50, ablation=True,
                                                          learning_curve=None)
    assert res["transfer"]["available"] and [d["population"] for d in res["transfer"]["deltas"]] == ["A", "B", "C"]
    assert set(oof_t["population"]) == {"A", "B", "C"} and len(oof_t) == 180
    assert [r["rule"] for r in res["per_rule"]] == ["r"] and res["rules"][0]["report"] == ["rate", "any"]
    assert res["variants"]["combined"]["pooled"]["auc"] > res["variants"]["mined"]["pooled"]["auc"]


def test_progress_bar_on_stderr(sim, capsys):
    _, log, X, y = sim
    compute_incremental_value(log, X, y, STATELESS_RULES, model=lr(), mined=FAST, verbose=1, **LIGHT)
    err = capsys.readouterr().err
    assert "incremental_value" in err and "5/5" in err and "fold" in err


def test_incremental_value_returns_the_report(sim):
    _, log, X, y = sim
    report = incremental_value(log, X, y, STATELESS_RULES, model=lr(), mined=FAST, random_state=0, **LIGHT)
    assert type(report).__name__ == "IncrementalValueReport" and report.primary_metric == "auc"


@pytest.mark.parametrize(("kwargs", "match"), [
    ({"y": "labl"}, "names the column 'labl'.*Did you mean 'label'"),
    ({"y": np.zeros(3)}, "'y' has 3 values but there are"),
    ({"y": np.r_[np.nan, np.ones(287)]}, "'y' is missing at row 0"),
    ({"y": np.arange(288) % 4}, "cannot tell whether 'y'"),
    ({"y": np.zeros(288)}, "single value"),
    ({"task": "classify"}, "'task' parameter of incremental_value must be one of"),
    ({"cv": 1}, "between 2 and 1000 folds"),
    ({"repeats": 0}, r"'repeats' parameter of incremental_value must be an integer in \[1, 100\]"),
    ({"n_boot": 0}, "'n_boot' parameter"),
    ({"alternative": "greter"}, "'alternative' parameter.*Did you mean 'greater'"),
    ({"learning_curve": (0, 1.0)}, "'learning_curve' parameter of incremental_value must hold fractions"),
    ({"ablation": "yes"}, "'ablation' parameter of incremental_value must be True or False"),
    ({"random_state": -1}, "'random_state' parameter of incremental_value must be None or a non-negative int"),
    ({"mined": {"familes": ["volume"]}}, "unknown LogFeatures parameter 'familes'.*Did you mean 'families'"),
    ({"mined": "volume"}, "'mined' parameter of incremental_value must be None, a dict"),
    ({"model": StandardScaler()}, "needs predict_proba"),
    ({"model": "lgbm"}, "'model' parameter of incremental_value must be a scikit-learn estimator"),
    ({"population": "schol"}, "'population' parameter of incremental_value must name a column"),
    ({"log": "events"}, "'log' must be a rulefeat.EventLog"),
    ({"units": pd.DataFrame({"student": ["s0001"]})}, "lacks the key columns \\['start', 'end'\\]"),
])
def test_bad_inputs(sim, kwargs, match):
    _, log, X, y = sim
    args = {"log": log, "units": X.assign(label=y), "y": y, "rules": STATELESS_RULES, "model": lr(),
            "mined": FAST, **LIGHT}
    args.update(kwargs)
    with pytest.raises(EvaluationError, match=match):
        compute_incremental_value(**args)


def test_rules_without_features_get_no_ablation_rows(sim):
    _, log, X, y = sim
    rules = RuleFeatures(log, STATELESS_RULES, select=["guess_after_error"])
    res, oof, _ = compute_incremental_value(log, X, y, rules, model=lr(), mined=FAST,
                                            **{**LIGHT, "ablation": True})
    assert [r["rule"] for r in res["per_rule"]] == ["guess_after_error"]
    assert [r["name"] for r in res["rules"]] == ["skimmed_hint", "guess_after_error"]
    assert "plus:guess_after_error" in oof.columns and "plus:skimmed_hint" not in oof.columns


def test_ready_made_transformers_must_read_the_same_log(sim):
    data, log, X, y = sim
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        other = EventLog(data.events)
    with pytest.raises(EvaluationError, match="the mined transformer reads a different EventLog"):
        compute_incremental_value(log, X, y, STATELESS_RULES, model=lr(), mined=LogFeatures(other), **LIGHT)
    with pytest.raises(EvaluationError, match="the rules transformer reads a different EventLog"):
        compute_incremental_value(log, X, y, RuleFeatures(other, STATELESS_RULES), model=lr(), mined=FAST, **LIGHT)


def test_students_missing_from_the_log_are_named(sim):
    _, log, X, y = sim
    units = X.assign(student=X["student"].astype(str))
    units.loc[units.index[0], "student"] = "nobody"
    with pytest.raises(Exception, match="not in the event log.*'nobody'"):
        compute_incremental_value(log, units, y, STATELESS_RULES, model=lr(), mined=FAST, **LIGHT)
