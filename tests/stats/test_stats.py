"""Tests of rulefeat.stats.inference against published values, reference libraries and brute force."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy import stats as sps
from sklearn.datasets import load_breast_cancer
from sklearn.metrics import accuracy_score, cohen_kappa_score, roc_auc_score
from statsmodels.stats.inter_rater import cohens_kappa as sm_cohens_kappa
from statsmodels.stats.multitest import multipletests

import rulefeat.stats.inference as stats_module
from rulefeat.errors import EvaluationError, RulefeatWarning
from rulefeat.stats.inference import (
    AUC_SIZE_LIMITS,
    BootstrapResult,
    DeLongResult,
    auc,
    best_kappa_threshold,
    cohen_kappa,
    corrected_resampled_ttest,
    delong_covariance,
    delong_test,
    describe_effect,
    grouped_bootstrap_auc_difference,
    grouped_bootstrap_metric_difference,
    hanley_mcneil_se,
    holm,
    kappa_from_table,
    naive_ttest,
)

FAST = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


# World Federation of Neurosurgical Societies grade (1-5) by six-month outcome of 113 patients with aneurysmal
# subarachnoid haemorrhage (Turck et al. 2010, the aSAH example data distributed with the R package pROC, whose
# licence is not ours): 72 "Good", 41 "Poor" (the positive class). Only this 2 x 5 summary table is written here;
# the rows are not bundled (tests/stats/data/README.md). AUC and DeLong variance depend on an ordinal score only through
# this table, so pROC's own expected values for the grade apply to it.
WFNS_GOOD = [37, 20, 3, 8, 4]
WFNS_POOR = [2, 12, 1, 8, 18]
# Expected values for the grade in pROC's test suite (tests/testthat/test-roc.test.R and test-var.R).
WFNS_AUC, WFNS_DELONG_VAR = 0.823678861788618, 0.00146991470882363


def wfns_table() -> tuple[np.ndarray, np.ndarray]:
    y = np.r_[np.zeros(sum(WFNS_GOOD), bool), np.ones(sum(WFNS_POOR), bool)]
    grade = np.r_[np.repeat(np.arange(1, 6), WFNS_GOOD), np.repeat(np.arange(1, 6), WFNS_POOR)].astype(float)
    return y, grade


@pytest.fixture(scope="module")
def cancer() -> tuple[np.ndarray, np.ndarray]:
    """scikit-learn's bundled Wisconsin diagnostic breast cancer data (569 cases; load_breast_cancer)."""
    data = load_breast_cancer()
    malignant = data.target == 0
    names = list(data.feature_names)
    columns = [names.index(n) for n in ("mean radius", "mean texture", "worst concave points", "mean symmetry")]
    return malignant, data.data[:, columns].T.copy()


def brute_delong(y: np.ndarray, scores: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """DeLong et al. (1988) structural components with explicit placement values psi(x, y)."""
    pos, neg = scores[:, y], scores[:, ~y]
    psi = (pos[:, :, None] > neg[:, None, :]) + 0.5 * (pos[:, :, None] == neg[:, None, :])
    v10, v01 = psi.mean(axis=2), psi.mean(axis=1)
    return v10.mean(axis=1), np.atleast_2d(np.cov(v10)) / pos.shape[1] + np.atleast_2d(np.cov(v01)) / neg.shape[1]


# ------------------------------------------------------------------ AUC
def test_auc_matches_proc_wfns():
    # Source: pROC's test suite (tests/testthat/test-roc.test.R), AUC of the WFNS grade in the aSAH data.
    y, grade = wfns_table()
    assert auc(y, grade) == pytest.approx(WFNS_AUC, abs=1e-12)
    # Reference library: scikit-learn.
    assert auc(y, grade) == pytest.approx(roc_auc_score(y, grade), abs=1e-14)


def test_auc_matches_sklearn_on_breast_cancer(cancer):
    # Reference library: scikit-learn's roc_auc_score on its own bundled data set, continuous scores.
    y, scores = cancer
    for score in scores:
        assert auc(y, score) == pytest.approx(roc_auc_score(y, score), abs=1e-14)


def test_auc_label_conventions():
    # Positive class is the greater label, as in scikit-learn's roc_auc_score.
    score = [0.1, 0.4, 0.35, 0.8]
    assert auc(["a", "a", "b", "b"], score) == auc([0, 0, 1, 1], score) == 0.75
    assert auc([False, False, True, True], score) == roc_auc_score([0, 0, 1, 1], score)
    assert auc([0, 0, 1, 1], [1, 1, 1, 1]) == 0.5  # all tied: every pair counts 1/2


@FAST
@given(data=st.data())
def test_weighted_auc_equals_repeated_rows(data):
    n = data.draw(st.integers(2, 30))
    y = np.array(data.draw(st.lists(st.booleans(), min_size=n, max_size=n)))
    score = np.array(data.draw(st.lists(st.integers(0, 5), min_size=n, max_size=n)), dtype=float)
    w = np.array(data.draw(st.lists(st.integers(0, 3), min_size=n, max_size=n)))
    assume(w[y].sum() > 0 and w[~y].sum() > 0)
    repeated = np.repeat(np.arange(n), w)
    weighted = auc(y, score, sample_weight=w)
    assert weighted == pytest.approx(auc(y[repeated], score[repeated]), abs=1e-12)
    # Reference library: scikit-learn with sample_weight.
    assert weighted == pytest.approx(roc_auc_score(y, score, sample_weight=w), abs=1e-12)


@pytest.mark.parametrize("y, score, weight, match", [
    ([1, 1, 1], [0.1, 0.2, 0.3], None, "exactly two classes; found 1"),
    ([0, 1, 2], [0.1, 0.2, 0.3], None, "exactly two classes; found 3"),
    ([0, 1, 1], [0.1, 0.2], None, "same length"),
    ([0, 1, 1], [0.1, np.nan, 0.3], None, r"'score' has missing values at positions \[1\]"),
    ([0, 1, 1], [0.1, np.inf, 0.3], None, "infinite"),
    ([0.0, np.nan, 1.0], [0.1, 0.2, 0.3], None, "'y_true' has missing values"),
    (np.array([0, None, 1], dtype=object), [0.1, 0.2, 0.3], None, "'y_true' has missing values"),
    ([0, 1, 1], ["x", "y", "z"], None, "'score' must be numeric"),
    ([0, 1, 1], [0.1, 0.2, 0.3], [1, -1, 1], "non-negative"),
    ([0, 1, 1], [0.1, 0.2, 0.3], [1, 1], "'sample_weight' has length 2"),
    ([0, 1, 1], [0.1, 0.2, 0.3], [0, 1, 1], "zero total 'sample_weight'"),
    ([[0, 1]], [[0.1, 0.2]], None, "one-dimensional"),
    ([], [], None, "exactly two classes; found 0"),
])
def test_auc_bad_input(y, score, weight, match):
    with pytest.raises(EvaluationError, match=match):
        auc(y, score, sample_weight=weight)


# ------------------------------------------------------------------ DeLong
def test_delong_variance_matches_proc_wfns():
    # Source: pROC's test suite (tests/testthat/test-var.R), DeLong variance of the WFNS grade's AUC.
    y, grade = wfns_table()
    aucs, cov = delong_covariance(y, grade[None, :])
    assert aucs[0] == pytest.approx(WFNS_AUC, abs=1e-12)
    assert cov[0, 0] == pytest.approx(WFNS_DELONG_VAR, rel=1e-9)
    # Our brute-force structural components (DeLong et al. 1988) agree to rounding.
    brute = brute_delong(y, grade[None, :])
    np.testing.assert_allclose(cov, brute[1], atol=1e-15)


def test_delong_test_against_a_constant_score_follows_from_proc_wfns():
    # A constant score has AUC 1/2 and no structural-component variance, so the paired test of the grade against
    # it is z = (AUC - 1/2) / sqrt(var): derived here from pROC's single-score values above (test-var.R).
    y, grade = wfns_table()
    r = delong_test(y, grade, np.zeros_like(grade))
    assert isinstance(r, DeLongResult)
    se = np.sqrt(WFNS_DELONG_VAR)
    assert (r.auc_a, r.auc_b, r.difference) == pytest.approx((WFNS_AUC, 0.5, WFNS_AUC - 0.5), abs=1e-12)
    assert r.se == pytest.approx(se, rel=1e-9)
    assert r.z == pytest.approx((WFNS_AUC - 0.5) / se, rel=1e-9)
    # Reference library: scipy's normal distribution for the two-sided p and the 95 % interval.
    assert r.p_value == pytest.approx(2 * sps.norm.sf((WFNS_AUC - 0.5) / se), rel=1e-6)
    assert (r.ci_low, r.ci_high) == pytest.approx(
        (WFNS_AUC - 0.5 - sps.norm.ppf(0.975) * se, WFNS_AUC - 0.5 + sps.norm.ppf(0.975) * se), abs=1e-9)


def test_delong_breast_cancer_against_brute_force(cancer):
    # Our own fast DeLong (midrank form) cross-checked by the brute-force placement values, continuous scores
    # with ties, and the paired test rebuilt from the brute-force covariance.
    y, scores = cancer
    fast, brute = delong_covariance(y, scores), brute_delong(y, scores)
    np.testing.assert_allclose(fast[0], brute[0], atol=1e-13)
    np.testing.assert_allclose(fast[1], brute[1], atol=1e-13)
    aucs, cov = brute
    for a, b in [(0, 1), (2, 0), (3, 1)]:
        r = delong_test(y, scores[a], scores[b])
        se = np.sqrt(cov[a, a] + cov[b, b] - 2 * cov[a, b])
        assert r.difference == pytest.approx(aucs[a] - aucs[b], abs=1e-13)
        assert r.se == pytest.approx(se, rel=1e-9)
        assert r.z == pytest.approx((aucs[a] - aucs[b]) / se, rel=1e-9)
        assert r.p_value == pytest.approx(2 * sps.norm.sf(abs(r.z)), rel=1e-9, abs=1e-300)


@FAST
@given(data=st.data())
def test_fast_delong_equals_brute_force_with_ties(data):
    n = data.draw(st.integers(4, 25))
    y = np.array(data.draw(st.lists(st.booleans(), min_size=n, max_size=n)))
    assume(2 <= y.sum() <= n - 2)
    k = data.draw(st.integers(1, 3))
    scores = np.array(data.draw(st.lists(st.lists(st.integers(0, 4), min_size=n, max_size=n),
                                         min_size=k, max_size=k)), dtype=float)
    fast_aucs, fast_cov = delong_covariance(y, scores)
    brute_aucs, brute_cov = brute_delong(y, scores)
    np.testing.assert_allclose(fast_aucs, brute_aucs, atol=1e-12)
    np.testing.assert_allclose(fast_cov, brute_cov, atol=1e-12)


def test_delong_identical_scores_and_alpha():
    y = np.array([0, 0, 0, 1, 1, 1])
    s = np.array([1.0, 3, 2, 4, 2, 6])
    same = delong_test(y, s, s)
    assert (same.difference, same.se, same.z, same.p_value) == (0.0, 0.0, 0.0, 1.0)
    wide, narrow = delong_test(y, s, s[::-1], alpha=0.01), delong_test(y, s, s[::-1], alpha=0.2)
    assert wide.ci_low < narrow.ci_low < narrow.ci_high < wide.ci_high
    # Reference library: scipy's normal quantile gives the CI half-width.
    assert wide.ci_high - wide.difference == pytest.approx(sps.norm.ppf(0.995) * wide.se)


@pytest.mark.parametrize("call, match", [
    (lambda: delong_covariance([0, 1, 1, 1], [[1, 2, 3, 4]]), "at least 2 positives and 2 negatives; got 3 and 1"),
    (lambda: delong_covariance([0, 0, 1, 1], [[1, 2, 3]]), r"shape \(k, 4\)"),
    (lambda: delong_covariance([0, 0, 1, 1], np.zeros((2, 2, 4))), r"shape \(k, 4\)"),
    (lambda: delong_test([0, 0, 1, 1], [1, 2, 3, 4], [1, 2, 3]), "same length"),
    (lambda: delong_test([0, 0, 1, 1], [1, 2, 3, 4], [1, 2, np.nan, 4]), "'score_b' has missing"),
    (lambda: delong_test([0, 0, 1, 1], [1, 2, 3, 4], [1, 2, 3, 4], alpha=1.5), "'alpha' must be a number in"),
])
def test_delong_bad_input(call, match):
    with pytest.raises(EvaluationError, match=match):
        call()


def test_hanley_mcneil_table_one():
    # Source: Hanley & McNeil (1982), Radiology 143:29-36, Table I (5-point CT ratings).
    y = np.r_[np.zeros(58, bool), np.ones(51, bool)]
    ratings = np.r_[np.repeat(np.arange(1, 6), [33, 6, 6, 11, 2]), np.repeat(np.arange(1, 6), [3, 2, 2, 11, 33])]
    area = auc(y, ratings)
    assert area == pytest.approx(0.893171, abs=1e-6)  # published in their Table I as 0.893
    # SE hand-computed from the published formula of Hanley & McNeil (1982), Q1 = A/(2-A), Q2 = 2A^2/(1+A):
    # 0.0325 (their printed 0.032 is from memory of the paper).
    assert hanley_mcneil_se(area, 51, 58) == pytest.approx(0.0325, abs=5e-5)
    # DeLong SE on the same table: 0.0307, from memory of a statistics-package manual's example on this table
    # (the manual is not identified); also checked against our brute-force structural components.
    se = np.sqrt(delong_covariance(y, ratings)[1][0, 0])
    assert se == pytest.approx(0.0307, abs=5e-5)
    assert se == pytest.approx(np.sqrt(brute_delong(y, ratings[None, :])[1][0, 0]), rel=1e-12)


@pytest.mark.parametrize("args, match", [
    ((1.2, 10, 10), "'auc' must be a number in"), ((True, 10, 10), "'auc' must be a number in"),
    ((0.8, 0, 10), "'n_pos' must be a positive integer"), ((0.8, 10, 2.5), "'n_neg' must be a positive integer"),
])
def test_hanley_mcneil_bad_input(args, match):
    with pytest.raises(EvaluationError, match=match):
        hanley_mcneil_se(*args)


# ------------------------------------------------------------------ kappa
def test_kappa_hand_computed_two_by_two():
    # Hand-computed from Cohen's (1960) definition: p_o = 35/50 = 0.70, p_e = (25*30 + 25*20)/50^2 = 0.50,
    # kappa = (0.70 - 0.50) / (1 - 0.50) = 0.40.
    kappa, _ = kappa_from_table([[20, 5], [10, 15]])
    assert kappa == pytest.approx(0.40, abs=1e-12)


def test_kappa_three_by_three_and_fleiss_cohen_everitt_se():
    # Source: a SAS printout transcribed in statsmodels' test suite (statsmodels 0.15, stats/tests/test_inter_rater.py):
    # kappa 0.4842, asymptotic SE 0.1380 (Fleiss, Cohen & Everitt 1969 non-null SE).
    table = np.array([[0, 4, 1], [0, 8, 0], [0, 1, 5]])
    kappa, se = kappa_from_table(table)
    assert kappa == pytest.approx(0.4842, abs=5e-5)
    assert se == pytest.approx(0.1380, abs=5e-5)
    # Reference library: statsmodels' cohens_kappa (std_kappa is the non-null SE).
    reference = sm_cohens_kappa(table)
    assert (kappa, se) == pytest.approx((reference.kappa, reference.std_kappa), abs=1e-12)


@FAST
@pytest.mark.filterwarnings("ignore:invalid value:RuntimeWarning")  # statsmodels on degenerate tables
@given(st.lists(st.lists(st.integers(0, 20), min_size=3, max_size=3), min_size=3, max_size=3))
def test_kappa_se_matches_statsmodels(table):
    table = np.array(table)
    rows, cols = table.sum(axis=1), table.sum(axis=0)
    assume(table.sum() > 0 and (rows @ cols) < table.sum() ** 2)
    reference = sm_cohens_kappa(table)  # reference library: statsmodels
    kappa, se = kappa_from_table(table)
    assert kappa == pytest.approx(reference.kappa, abs=1e-10)
    # statsmodels takes the root of a variance that rounds below 0 when it is exactly 0 (NaN); we clip it.
    assert se == pytest.approx(0.0 if np.isnan(reference.std_kappa) else reference.std_kappa, abs=1e-7)


@pytest.mark.parametrize("labels", [[0, 1], [0, 1, 2], ["hint", "attempt", "idle"]])
def test_cohen_kappa_matches_sklearn(labels):
    rng = np.random.default_rng(7)
    a = rng.choice(labels, size=200)
    b = np.where(rng.random(200) < 0.6, a, rng.choice(labels, size=200))
    # Reference library: scikit-learn cohen_kappa_score.
    assert cohen_kappa(a, b) == pytest.approx(cohen_kappa_score(a, b), abs=1e-12)


def test_kappa_undefined_warns_and_returns_nan():
    with pytest.warns(RulefeatWarning, match="kappa is undefined"):
        assert np.isnan(cohen_kappa([1, 1, 1], [1, 1, 1]))
    with pytest.warns(RulefeatWarning, match="single category"):
        assert all(np.isnan(kappa_from_table([[5, 0], [0, 0]])))


@pytest.mark.parametrize("call, match", [
    (lambda: kappa_from_table([[1, 2, 3], [4, 5, 6]]), "square 2-D array"),
    (lambda: kappa_from_table([[1, -2], [3, 4]]), "non-negative counts"),
    (lambda: kappa_from_table([[0, 0], [0, 0]]), "positive total"),
    (lambda: cohen_kappa([0, 1, 1], [0, 1]), "same length"),
    (lambda: cohen_kappa([0, 1, 1], np.array([0, "a", 1.5], dtype=object)), "cannot be ordered"),
])
def test_kappa_bad_input(call, match):
    with pytest.raises(EvaluationError, match=match):
        call()


def brute_best_threshold(y, score):
    candidates = np.unique(score)
    kappas = [cohen_kappa_score(y, (score >= t).astype(int)) for t in candidates]
    return candidates[int(np.argmax(np.round(kappas, 12)))]


@FAST
@given(data=st.data())
def test_best_kappa_threshold_equals_brute_force(data):
    n = data.draw(st.integers(2, 30))
    y = np.array(data.draw(st.lists(st.integers(0, 1), min_size=n, max_size=n)))
    assume(0 < y.sum() < n)
    score = np.array(data.draw(st.lists(st.integers(0, 6), min_size=n, max_size=n)), dtype=float) / 7
    # Reference library: scikit-learn's kappa at every candidate; lowest best threshold wins.
    assert best_kappa_threshold(y, score) == brute_best_threshold(y, score)


def test_best_kappa_threshold_tie_and_rule():
    y = [0, 0, 1, 0, 1, 1]
    score = [0.1, 0.2, 0.3, 0.4, 0.5, 0.6]
    assert best_kappa_threshold(y, score) == 0.3  # 0.3 and 0.5 both give kappa 2/3: lowest wins
    # ">=" keeps tied scores together: 0.4 (pred 0,1,1,1) and 0.9 (pred 0,0,0,1) both give kappa 0.5.
    assert best_kappa_threshold([0, 0, 1, 1], [0.2, 0.4, 0.4, 0.9]) == 0.4
    assert best_kappa_threshold([0, 0, 1, 1], [0.2, 0.3, 0.4, 0.9]) == 0.4  # perfect split at 0.4
    with pytest.raises(EvaluationError, match="exactly two classes"):
        best_kappa_threshold([1, 1], [0.2, 0.3])


# ------------------------------------------------------------------ t-tests
DIFFS = [0.02, 0.01, 0.03, 0, 0.04, 0.02, 0.01, 0.03, 0.02, 0.02]


def test_ttests_match_example_hand_computed_from_published_equations():
    # Hand-computed from the published equations of Nadeau & Bengio (2003) and Bouckaert & Frank (2004),
    # t = mean(d) / sqrt((1/J + n_test/n_train) var(d)), df = J - 1, for 2 x 5-fold CV on N = 100
    # (n_train 80, n_test 20): naive t 5.4772 (p 0.00039), corrected t 2.9277, df 9, p 0.01682.
    naive = naive_ttest(DIFFS)
    corrected = corrected_resampled_ttest(DIFFS, n_train=80, n_test=20)
    assert (naive.t, naive.p_value) == pytest.approx((5.4772, 0.00039), abs=5e-5)
    assert (corrected.t, corrected.p_value, corrected.df) == pytest.approx((2.9277, 0.01682, 9), abs=5e-5)
    assert corrected.mean == pytest.approx(0.02)
    # Reference library: scipy's one-sample t-test for the naive version.
    reference = sps.ttest_1samp(DIFFS, 0.0)
    assert (naive.t, naive.p_value) == pytest.approx((reference.statistic, reference.pvalue), rel=1e-12)
    low, high = reference.confidence_interval(0.95)
    assert (naive.ci_low, naive.ci_high) == pytest.approx((low, high), rel=1e-12)
    # The corrected SE is sqrt(1/J + n_test/n_train) / sqrt(1/J) times the naive one.
    assert corrected.se / naive.se == pytest.approx(np.sqrt((0.1 + 0.25) / 0.1), rel=1e-12)
    assert corrected.ci_low < naive.ci_low < naive.ci_high < corrected.ci_high


@pytest.mark.parametrize("d, t, p", [([0.0] * 5, 0.0, 1.0), ([0.01] * 5, np.inf, 0.0), ([-0.01] * 4, -np.inf, 0.0)])
def test_ttest_zero_variance(d, t, p):
    for result in (naive_ttest(d), corrected_resampled_ttest(d, 80, 20)):
        assert (result.t, result.p_value, result.se) == (t, p, 0.0)
        assert result.ci_low == result.ci_high == result.mean


@pytest.mark.parametrize("call, match", [
    (lambda: naive_ttest([0.1]), "at least 2 fold differences to estimate a variance; got 1"),
    (lambda: corrected_resampled_ttest([], 80, 20), "at least 2 fold differences to estimate a variance; got 0"),
    (lambda: corrected_resampled_ttest(DIFFS, 0, 20), "'n_train' must be a positive number; got 0"),
    (lambda: corrected_resampled_ttest(DIFFS, 80, np.nan), "'n_test' must be a positive number"),
    (lambda: corrected_resampled_ttest([0.1, np.nan], 80, 20), "'differences' has missing values"),
    (lambda: naive_ttest(DIFFS, alpha=0), "'alpha' must be a number in"),
])
def test_ttest_bad_input(call, match):
    with pytest.raises(EvaluationError, match=match):
        call()


# ------------------------------------------------------------------ grouped bootstrap
def student_data(n_students: int = 40, seed: int = 3):
    """Simulated detector scores: several rows per student, a student-level effect in both scores."""
    rng = np.random.default_rng(seed)
    per = rng.integers(1, 8, size=n_students)
    groups = np.repeat([f"s{i:03d}" for i in range(n_students)], per)
    effect = np.repeat(rng.normal(size=n_students), per)
    y = (effect + rng.normal(size=len(groups)) > 0.3).astype(int)
    a = np.round(y + effect + rng.normal(size=len(groups)), 1)  # rounding makes ties
    b = np.round(0.5 * y + effect + rng.normal(size=len(groups)), 1)
    return y, a, b, groups


def test_one_row_per_group_equals_row_bootstrap():
    y, a, b, _ = student_data()
    n, n_boot = len(y), 120
    result = grouped_bootstrap_auc_difference(y, a, b, np.arange(n), n_boot=n_boot, random_state=11)
    # Ordinary row bootstrap on the same draws (one block of n_boot x n row indices for small data).
    draws = np.random.default_rng(11).integers(0, n, size=(n_boot, n))
    expected = [roc_auc_score(y[i], a[i]) - roc_auc_score(y[i], b[i]) for i in draws if 0 < y[i].sum() < n]
    assert isinstance(result, BootstrapResult)
    assert result.n_valid == len(expected) == len(result.replicates)
    np.testing.assert_allclose(result.replicates, expected, atol=1e-12)
    assert result.estimate == pytest.approx(roc_auc_score(y, a) - roc_auc_score(y, b), abs=1e-14)
    assert (result.ci_low, result.ci_high) == pytest.approx(tuple(np.quantile(expected, [0.025, 0.975])))


def test_fast_auc_path_equals_generic_metric_path():
    y, a, b, groups = student_data()
    fast = grouped_bootstrap_auc_difference(y, a, b, groups, n_boot=80, random_state=5)
    slow = grouped_bootstrap_metric_difference(y, a, b, groups, roc_auc_score, n_boot=80, random_state=5)
    assert fast.n_valid == slow.n_valid
    np.testing.assert_allclose(fast.replicates, slow.replicates, atol=1e-12)
    assert (fast.estimate, fast.ci_low, fast.ci_high) == pytest.approx((slow.estimate, slow.ci_low, slow.ci_high))


def test_grouped_bootstrap_keeps_students_together():
    y, a, b, groups = student_data()
    counts = np.random.default_rng(2).integers(0, 40, size=(1, 40))
    result = grouped_bootstrap_auc_difference(y, a, b, groups, n_boot=1, random_state=2)
    weights = np.bincount(counts[0], minlength=40)[np.unique(groups, return_inverse=True)[1]]
    expected = auc(y, a, sample_weight=weights) - auc(y, b, sample_weight=weights)
    assert result.replicates[0] == pytest.approx(expected, abs=1e-12)


def test_bootstrap_seed_reproducible(monkeypatch):
    y, a, b, groups = student_data()
    first = grouped_bootstrap_auc_difference(y, a, b, groups, n_boot=150, random_state=9)
    again = grouped_bootstrap_auc_difference(y, a, b, groups, n_boot=150, random_state=np.random.default_rng(9))
    other = grouped_bootstrap_auc_difference(y, a, b, groups, n_boot=150, random_state=10)
    np.testing.assert_array_equal(first.replicates, again.replicates)
    assert not np.array_equal(first.replicates, other.replicates)
    # Many small blocks (one replicate each) still agree with the generic path on the same draws.
    monkeypatch.setattr(stats_module, "_BLOCK_ELEMENTS", 1)
    fast = grouped_bootstrap_auc_difference(y, a, b, groups, n_boot=30, random_state=9)
    slow = grouped_bootstrap_metric_difference(y, a, b, groups, roc_auc_score, n_boot=30, random_state=9)
    np.testing.assert_allclose(fast.replicates, slow.replicates, atol=1e-12)


def test_bootstrap_ci_is_sensible():
    y, a, b, groups = student_data(n_students=80)
    result = grouped_bootstrap_auc_difference(y, a, b, groups, n_boot=500, random_state=0)
    assert result.ci_low < result.estimate < result.ci_high
    assert result.n_boot == result.n_valid == 500
    narrow = grouped_bootstrap_auc_difference(y, a, b, groups, n_boot=500, alpha=0.5, random_state=0)
    assert result.ci_low < narrow.ci_low < narrow.ci_high < result.ci_high


def test_bootstrap_drops_replicates_without_both_classes():
    # Positives come from one of three students only: replicates that miss that student are dropped.
    y = np.array([1, 1, 0, 0, 0, 0])
    groups = np.array(["p", "p", "q", "q", "r", "r"])
    a, b = np.array([0.9, 0.8, 0.1, 0.4, 0.3, 0.2]), np.array([0.5, 0.1, 0.2, 0.9, 0.3, 0.4])
    result = grouped_bootstrap_auc_difference(y, a, b, groups, n_boot=400, random_state=1)
    # P(student "p" absent) = (2/3)^3 = 8/27 (exact binomial reasoning).
    assert 0 < result.n_boot - result.n_valid < 400
    assert (result.n_boot - result.n_valid) / 400 == pytest.approx(8 / 27, abs=0.08)
    assert len(result.replicates) == result.n_valid and np.isfinite(result.replicates).all()
    generic = grouped_bootstrap_metric_difference(y, a, b, groups, auc, n_boot=400, random_state=1)
    assert generic.n_valid == result.n_valid


def test_bootstrap_no_valid_replicate():
    def undefined(t, p, sample_weight=None):
        return float("nan")

    y, groups = [1, 0, 0, 1], ["s1", "s1", "s2", "s2"]
    with pytest.raises(EvaluationError, match="no bootstrap replicate contained every class"):
        grouped_bootstrap_metric_difference(y, y, y, groups, undefined, n_boot=5, random_state=0)


def test_metric_difference_with_label_metric():
    y, a, b, groups = student_data()
    pred_a, pred_b = (a > 0.5).astype(int), (b > 0.5).astype(int)
    result = grouped_bootstrap_metric_difference(y, pred_a, pred_b, groups, accuracy_score, n_boot=100,
                                                 random_state=4)
    assert result.estimate == pytest.approx(accuracy_score(y, pred_a) - accuracy_score(y, pred_b))
    assert result.ci_low <= result.ci_high and result.n_valid == 100


@pytest.mark.parametrize("kwargs, match", [
    ({"groups": ["s1"] * 6}, "at least 2 groups"),
    ({"groups": ["s1", "s2"]}, "'groups' has length 2; expected 6"),
    ({"groups": ["s1", None, "s2", "s2", "s3", "s3"]}, "'groups' has missing values at positions"),
    ({"n_boot": 0}, "'n_boot' must be a positive integer; got 0"),
    ({"n_boot": 10.5}, "'n_boot' must be a positive integer"),
    ({"alpha": -0.1}, "'alpha' must be a number in"),
    ({"random_state": "seed"}, "'random_state' must be None, an int or a numpy Generator"),
    ({"score_b": [0.1, 0.2, 0.3]}, "same length"),
])
def test_grouped_bootstrap_bad_input(kwargs, match):
    args = {"y_true": [0, 1, 0, 1, 0, 1], "score_a": [1, 2, 1, 3, 2, 3], "score_b": [2, 1, 1, 3, 3, 2],
            "groups": ["s1", "s1", "s2", "s2", "s3", "s3"]} | kwargs
    with pytest.raises(EvaluationError, match=match):
        grouped_bootstrap_auc_difference(**args)


def test_metric_difference_bad_metric():
    y, groups = [0, 1, 0, 1], ["a", "a", "b", "b"]
    with pytest.raises(EvaluationError, match="'metric' must be callable"):
        grouped_bootstrap_metric_difference(y, y, y, groups, "auc")

    def broken(t, p, sample_weight=None):
        raise RuntimeError("boom")

    with pytest.raises(EvaluationError, match="failed: boom"):
        grouped_bootstrap_metric_difference(y, y, y, groups, broken, n_boot=3, random_state=0)


# ------------------------------------------------------------------ Holm, wording
@pytest.mark.parametrize("p", [
    [0.01, 0.04, 0.03, 0.005], [0.5, 0.5, 0.01], [0.001], [0.2, 0.9, 0.04, 0.04, 0.3, 0.011], [1.0, 0.0],
])
def test_holm_matches_statsmodels(p):
    # Reference library: statsmodels multipletests(method='holm') (Holm 1979).
    np.testing.assert_allclose(holm(p), multipletests(p, method="holm")[1], atol=1e-15)


def test_holm_nan_pass_through_and_shape():
    adjusted = holm([0.01, np.nan, 0.04])
    np.testing.assert_allclose(adjusted, [0.02, np.nan, 0.04])
    assert holm(np.array([[0.01, 0.02], [0.03, 0.5]])).shape == (2, 2)
    assert holm([]).shape == (0,)
    with pytest.raises(EvaluationError, match=r"must lie in \[0, 1\]"):
        holm([0.2, 1.5])


@pytest.mark.parametrize("delta, low, high, p, words", [
    (0.005, 0.001, 0.009, 0.03, "a negligible improvement."),
    (0.021, 0.004, 0.038, 0.012, "a small improvement."),
    (0.031, 0.012, 0.050, 0.004, "a moderate improvement."),
    (0.08, 0.05, 0.11, 0.0001, "a large improvement."),
    (-0.04, -0.07, -0.01, 0.01, "a moderate decline."),
    (0.02, -0.01, 0.05, 0.2, "no clear evidence of a difference."),
])
def test_describe_effect_size_words(delta, low, high, p, words):
    # Size limits 0.01 / 0.03 / 0.06 on the AUC scale: common practice, no source.
    assert AUC_SIZE_LIMITS == (0.01, 0.03, 0.06)
    sentence = describe_effect(delta, low, high, p)
    assert sentence.startswith(f"Adding the rules changed AUC by {delta:+.3f} (95% CI {low:+.3f} to {high:+.3f}; p ")
    assert sentence.endswith(words)


def test_describe_effect_options():
    assert describe_effect(0.031, 0.012, 0.05, 0.004) == (
        "Adding the rules changed AUC by +0.031 (95% CI +0.012 to +0.050; p = 0.004): a moderate improvement.")
    assert "p < 0.001" in describe_effect(0.05, 0.02, 0.08, 1e-6)
    assert "; p" not in describe_effect(0.05, 0.02, 0.08, None)
    assert "(90% CI" in describe_effect(0.05, 0.02, 0.08, np.nan, ci_level=0.90)
    loss = describe_effect(-0.02, -0.03, -0.01, 0.01, metric="log loss", higher_is_better=False)
    assert loss.endswith("changed log loss by -0.020 (95% CI -0.030 to -0.010; p = 0.010): a small improvement.")


@pytest.mark.parametrize("args, kwargs, match", [
    ((0.1, 0.2, 0.05, 0.01), {}, "ci_low <= ci_high"),
    ((np.nan, 0.0, 0.1, 0.01), {}, "finite delta"),
    ((0.1, 0.05, 0.15, 1.5), {}, "'p_value' must be in"),
    ((0.1, 0.05, 0.15, 0.01), {"ci_level": 95}, "'ci_level' must be in"),
    ((0.1, 0.05, 0.15, 0.01), {"size_limits": (0.1, 0.05, 0.2)}, "3 increasing numbers"),
])
def test_describe_effect_bad_input(args, kwargs, match):
    with pytest.raises(EvaluationError, match=match):
        describe_effect(*args, **kwargs)
