"""Paired comparisons: one-sided fold t-tests, student-bootstrap intervals, DeLong, Holm, effect sentences."""

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy import stats as sps
from sklearn import metrics as skm
from statsmodels.stats.multitest import multipletests

from rulefeat.evaluate.value.compare import (
    ALPHA,
    Pooled,
    bootstrap_delta,
    comparison,
    paired_test,
    per_rule_rows,
)
from rulefeat.stats import inference as stats

# Example of the corrected resampled t-test hand-computed from the published equations of Nadeau & Bengio (2003)
# and Bouckaert & Frank (2004): 2 x 5-fold CV, n_train 80, n_test 20, t = mean(d) / sqrt((1/J + 20/80) var(d)),
# df = J - 1 = 9, giving t 2.9277 and two-sided p 0.01682 (naive t-test p 0.00039).
D = np.array([.02, .01, .03, 0, .04, .02, .01, .03, .02, .02])


def test_paired_test_matches_hand_computed_example_one_sided():
    two = paired_test(D, 80, 20, True, "two-sided")
    assert two["t"] == pytest.approx(2.9277, abs=1e-4) and two["df"] == 9
    assert two["p_value"] == pytest.approx(0.01682, abs=1e-5)       # hand-computed two-sided p
    assert two["p_naive"] == pytest.approx(0.00039, abs=1e-5)
    one = paired_test(D, 80, 20, True, "greater")
    assert one["p_value"] == pytest.approx(0.01682 / 2, abs=1e-5)    # H1: variant better, t > 0
    # For a loss (lower is better) the same positive differences are evidence *against* the variant.
    loss = paired_test(D, 80, 20, False, "greater")
    assert loss["p_value"] == pytest.approx(1 - 0.01682 / 2, abs=1e-5)
    assert paired_test(-D, 80, 20, False, "greater")["p_value"] == pytest.approx(0.01682 / 2, abs=1e-5)


@settings(max_examples=150, deadline=None)
@given(d=arrays(np.float64, st.integers(2, 30), elements=st.floats(-0.2, 0.2, allow_subnormal=False)),
       n_test=st.integers(10, 400), higher=st.booleans(), alternative=st.sampled_from(["greater", "two-sided"]))
def test_interval_excludes_zero_exactly_when_p_is_below_alpha(d, n_test, higher, alternative):
    # One procedure: the interval lies wholly on the side of H1 iff p < alpha (one-sided: the 90% interval's bound
    # on the side of an improvement; two-sided: the 95% interval excludes 0).
    r = paired_test(d, 4 * n_test, n_test, higher, alternative)
    assume(np.isfinite(r["t"]) and abs(abs(r["t"]) - abs(sps.t.ppf(0.05 if alternative == "greater" else 0.025,
                                                               r["df"]))) > 1e-9)
    if alternative == "two-sided":
        excludes = r["ci_low"] > 0 or r["ci_high"] < 0
    else:
        excludes = r["ci_low"] > 0 if higher else r["ci_high"] < 0
    assert excludes == (r["p_value"] < ALPHA)
    assert r["ci_low"] <= r["mean"] <= r["ci_high"]


def test_paired_test_edge_cases():
    assert paired_test(np.zeros(5), 80, 20, True, "greater")["p_value"] == 1.0
    with_gaps = paired_test(np.r_[D, np.nan], 80, 20, True, "two-sided")
    assert with_gaps["df"] == 9 and with_gaps["p_value"] == pytest.approx(0.01682, abs=1e-5)
    assert np.isnan(paired_test(np.array([0.1, np.nan]), 80, 20, True, "greater")["p_value"])


def _pooled(seed=0, n_students=25):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(3, 9, n_students)
    groups = np.repeat(np.arange(n_students), sizes)
    n = len(groups)
    y = (rng.random(n) < 0.3).astype(float)
    a = np.clip(0.25 + 0.35 * y + rng.normal(0, 0.2, n), 0.02, 0.98)
    b = np.clip(0.3 + 0.2 * y + rng.normal(0, 0.2, n), 0.02, 0.98)
    preds = {"combined": a, "mined": b}
    thresholds = {"combined": np.full(n, 0.45), "mined": np.full(n, 0.4)}
    return Pooled(y, groups, preds, thresholds)


@pytest.mark.parametrize(("metric", "function", "labels"), [
    ("kappa", skm.cohen_kappa_score, True),
    ("brier", skm.brier_score_loss, False),
    ("log_loss", skm.log_loss, False),
    ("average_precision", skm.average_precision_score, False),
])
def test_vectorised_bootstraps_equal_the_generic_bootstrap(metric, function, labels):
    # Same seed, same student draws: our vectorised replicates must equal stats.grouped_bootstrap_metric_difference
    # calling the scikit-learn metric (reference library) once per replicate.
    pooled = _pooled()
    a = pooled.labels("combined").astype(float) if labels else pooled.preds["combined"]
    b = pooled.labels("mined").astype(float) if labels else pooled.preds["mined"]
    ref = stats.grouped_bootstrap_metric_difference(pooled.y, a, b, pooled.groups, function, n_boot=300,
                                                    random_state=9)
    ours = bootstrap_delta(pooled, "combined", "mined", metric, 300, 9)
    assert ours == pytest.approx((ref.estimate, ref.ci_low, ref.ci_high), abs=1e-12)


def test_auc_bootstrap_is_the_fast_path():
    pooled = _pooled(1)
    ref = stats.grouped_bootstrap_auc_difference(pooled.y, pooled.preds["combined"], pooled.preds["mined"],
                                                 pooled.groups, n_boot=400, random_state=3)
    assert bootstrap_delta(pooled, "combined", "mined", "auc", 400, 3) == (ref.estimate, ref.ci_low, ref.ci_high)


@pytest.mark.parametrize(("metric", "function"), [("r2", skm.r2_score),
                                                  ("rmse", lambda y, p, sample_weight: np.sqrt(
                                                      skm.mean_squared_error(y, p, sample_weight=sample_weight)))])
def test_regression_bootstrap_against_a_plain_loop(metric, function):
    rng = np.random.default_rng(4)
    groups = np.repeat(np.arange(20), 4)
    y = rng.normal(size=80)
    a, b = y + rng.normal(0, 0.5, 80), y + rng.normal(0, 0.8, 80)
    pooled = Pooled(y, groups, {"a": a, "b": b}, {"a": np.zeros(80), "b": np.zeros(80)})
    est, low, high = bootstrap_delta(pooled, "a", "b", metric, 200, 5)
    draws = np.random.default_rng(5).integers(0, 20, size=(200, 20))
    reps = []
    for row in draws:
        w = np.bincount(row, minlength=20)[groups].astype(float)
        keep = w > 0
        reps.append(function(y[keep], a[keep], sample_weight=w[keep]) - function(y[keep], b[keep],
                                                                                 sample_weight=w[keep]))
    assert est == pytest.approx(function(y, a, sample_weight=None) - function(y, b, sample_weight=None))
    assert (low, high) == pytest.approx(tuple(np.quantile(reps, [0.025, 0.975])), abs=1e-10)


def test_comparison_entry_follows_the_schema():
    pooled = _pooled(2)
    notes = []
    entry = comparison("combined", "mined", "auc", D, (80, 20), pooled, 200, 1, "greater",
                       "Adding the rules to the mined features", 0.7, notes)
    assert list(entry) == ["variant", "baseline", "metric", "delta", "ci_low", "ci_high", "ci_level", "ci_method",
                           "se", "t", "df", "p_value", "p_naive", "pooled_delta", "boot_ci_low", "boot_ci_high",
                           "boot_method", "delong_z", "delong_p", "effect"]
    assert entry["ci_method"].startswith("corrected repeated cross-validation t")
    assert entry["boot_method"].endswith("(n_boot=200)")
    # The headline Δ is the mean fold difference; its interval is the 90% corrected-t one of the one-sided test.
    ref = stats.corrected_resampled_ttest(D, 80, 20, alpha=0.10)
    assert (entry["delta"], entry["ci_low"], entry["ci_high"]) == pytest.approx((ref.mean, ref.ci_low, ref.ci_high))
    assert entry["ci_level"] == pytest.approx(0.90)
    boot = bootstrap_delta(pooled, "combined", "mined", "auc", 200, 1)
    assert (entry["pooled_delta"], entry["boot_ci_low"], entry["boot_ci_high"]) == boot
    assert "90% CI" in entry["effect"] and "one-sided p = " in entry["effect"]
    ref = stats.delong_test(pooled.y, pooled.preds["combined"], pooled.preds["mined"])
    assert entry["delong_z"] == pytest.approx(ref.z)
    assert entry["delong_p"] == pytest.approx(ref.p_value / 2 if ref.z > 0 else 1 - ref.p_value / 2)
    assert entry["effect"].startswith("Adding the rules to the mined features changed AUC by")
    loss = comparison("combined", "mined", "brier", D, (80, 20), pooled, 200, 1, "greater", "Adding", 0.2, notes)
    assert loss["delong_z"] is None and loss["delong_p"] is None
    assert not notes


def test_per_rule_rows_holm_matches_statsmodels():
    pooled = _pooled(3)
    n = len(pooled.y)
    rng = np.random.default_rng(0)
    preds = dict(pooled.preds)
    for r in ("a", "b", "c"):
        preds[f"without:{r}"] = np.clip(pooled.preds["combined"] + rng.normal(0, 0.05, n), 0, 1)
        preds[f"plus:{r}"] = np.clip(pooled.preds["mined"] + rng.normal(0, 0.05, n), 0, 1)
    pooled = Pooled(pooled.y, pooled.groups, preds, {k: np.full(n, 0.5) for k in preds})
    scores = {k: {"auc": rng.normal(0.7, 0.02, 10)} for k in preds}
    rows = per_rule_rows(["a", "b", "c"], "auc", scores, (80, 20), "greater")
    assert [r["rule"] for r in rows] == ["a", "b", "c"]
    for family in ("drop", "add"):
        raw = [r[f"{family}_p"] for r in rows]
        # Reference library: statsmodels' Holm step-down adjustment.
        np.testing.assert_allclose([r[f"{family}_p_holm"] for r in rows], multipletests(raw, method="holm")[1])
    d = scores["combined"]["auc"] - scores["without:a"]["auc"]
    test = paired_test(d, 80, 20, True, "greater")
    assert rows[0]["drop_p"] == test["p_value"]
    assert (rows[0]["drop_delta"], rows[0]["drop_ci_low"], rows[0]["drop_ci_high"]) == (
        test["mean"], test["ci_low"], test["ci_high"])
