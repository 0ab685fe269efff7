"""Tests of the validity statistics: fits, nested models, correlations, standalone association, spread."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps
from sklearn import metrics

from rulefeat.errors import EvaluationError, RulefeatWarning
from rulefeat.stats.validity import (
    correlation_ci,
    fit_logit,
    fit_ols,
    hierarchical_regression,
    partial_correlation,
    spread,
    standalone_association,
)


@pytest.fixture(scope="module")
def sm():
    return pytest.importorskip("statsmodels.api")


@pytest.fixture(scope="module")
def spector(sm):
    return sm.datasets.spector.load_pandas().data


def _random_design(seed: int, n: int = 400):
    rng = np.random.default_rng(seed)
    X = pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n), "c": rng.integers(0, 2, n).astype(bool)})
    eta = -0.4 + 0.8 * X.a - 0.5 * X.b + 0.7 * X.c
    y_bin = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(int)
    y_cont = 1.0 + 0.5 * X.a + 0.3 * X.c + rng.normal(size=n)
    return X, y_bin, y_cont


# -- logit -------------------------------------------------------------------------------------------
def test_logit_spector_matches_greene_and_statsmodels(spector):
    # Data: statsmodels' bundled Spector & Mazzeo (1980) program-effectiveness data (statsmodels 0.15).
    # Coefficients: Greene, Econometric Analysis, logit of GRADE on GPA, TUCE, PSI, published to three decimals as
    # -13.021 / 2.826 / 0.095 / 2.379; the same to ten digits in statsmodels 0.15's own expected results
    # (discrete/tests/results/results_discrete.py). Log-likelihoods -12.8896 (full) and -15.9915 (without PSI),
    # LR 6.2037 on 1 df and p 0.01275: reference library statsmodels 0.15 Logit on the same data.
    fit = fit_logit(spector[["GPA", "TUCE", "PSI"]], spector["GRADE"])
    np.testing.assert_allclose(fit.params, [-13.0213, 2.8261, 0.0952, 2.3787], atol=5e-5)
    assert fit.names == ("const", "GPA", "TUCE", "PSI")
    assert fit.llf == pytest.approx(-12.8896, abs=5e-5)
    assert fit.converged and fit.n_iter < 20
    nested = hierarchical_regression(spector[["GPA", "TUCE"]], spector["PSI"], spector["GRADE"])
    assert nested.kind == "binary" and nested.test == "likelihood ratio"
    assert nested.base.llf == pytest.approx(-15.9915, abs=5e-5)
    assert nested.statistic == pytest.approx(6.2037, abs=5e-5)
    assert nested.df1 == 1 and nested.df2 is None
    assert nested.p_value == pytest.approx(0.01275, abs=5e-6)


@pytest.mark.parametrize("seed", [0, 1])
def test_logit_matches_statsmodels(sm, seed):
    # Reference library: statsmodels.discrete.discrete_model.Logit.
    X, y, _ = _random_design(seed)
    ours = fit_logit(X, y)
    ref = sm.Logit(y, sm.add_constant(X.astype(float))).fit(disp=0, tol=1e-12)
    np.testing.assert_allclose(ours.params, ref.params.to_numpy(), rtol=1e-8)
    np.testing.assert_allclose(ours.bse, ref.bse.to_numpy(), rtol=1e-7)
    assert ours.llf == pytest.approx(ref.llf, rel=1e-10)
    assert ours.ll_null == pytest.approx(ref.llnull, rel=1e-10)
    assert ours.aic == pytest.approx(ref.aic, rel=1e-10)
    assert ours.mcfadden_r2 == pytest.approx(ref.prsquared, rel=1e-8)


def test_logit_without_constant_matches_statsmodels(sm):
    # Reference library: statsmodels Logit on a design without an intercept.
    X, y, _ = _random_design(2)
    ours = fit_logit(X, y, add_constant=False)
    ref = sm.Logit(y, X.astype(float)).fit(disp=0, tol=1e-12)
    assert ours.names == ("a", "b", "c")
    np.testing.assert_allclose(ours.params, ref.params.to_numpy(), rtol=1e-8)
    np.testing.assert_allclose(ours.bse, ref.bse.to_numpy(), rtol=1e-7)
    assert ours.llf == pytest.approx(ref.llf, rel=1e-10)
    assert ours.aic == pytest.approx(ref.aic, rel=1e-10)


def test_logit_complete_separation_is_refused():
    x = np.array([0.1, 0.4, 0.5, 0.9, 1.2, 1.5, 1.6, 2.0])
    y = np.array([0, 0, 0, 0, 1, 1, 1, 1])
    with pytest.raises(EvaluationError, match=r"fit_logit: complete separation .*\['x'\] predicts 8 of 8"):
        fit_logit(x, y)


def test_logit_quasi_complete_separation_is_refused():
    # A rule that fires only on positive units: every unit with rule > 0 is positive, the rest are mixed.
    rng = np.random.default_rng(3)
    X = pd.DataFrame({"noise": rng.normal(size=60), "rule": np.r_[np.zeros(40), rng.integers(1, 4, 20)]})
    y = np.r_[rng.integers(0, 2, 40), np.ones(20)]
    with pytest.raises(EvaluationError, match=r"quasi-complete separation .*\['rule'\] predicts at least 20 of 60"):
        fit_logit(X, y)


def test_logit_rare_but_not_separated_fits():
    rng = np.random.default_rng(4)
    x = rng.normal(size=300)
    y = (rng.random(300) < 1 / (1 + np.exp(-(-3 + 2 * x)))).astype(int)
    fit = fit_logit(x, y)
    assert fit.converged and fit.params[1] > 0


def test_logit_nonconvergence_warns():
    X, y, _ = _random_design(5)
    with pytest.warns(RulefeatWarning, match="did not converge in 1 iterations"):
        fit = fit_logit(X, y, max_iter=1)
    assert not fit.converged and fit.n_iter == 1


@pytest.mark.parametrize("X, y, add_constant, message", [
    (pd.DataFrame({"a": [1., 2, 3, 4, 5, 6], "b": [2., 4, 6, 8, 10, 12]}), [0, 1, 0, 1, 1, 0], True,
     r"singular design - column 'b' is a linear combination of \['const', 'a'\]"),
    (pd.DataFrame({"a": [1., 2, 3, 4, 5, 6], "k": [3.] * 6}), [0, 1, 0, 1, 1, 0], True,
     r"column 'k' is a linear combination of \['const', 'a'\]"),
    (pd.DataFrame({"z": [0.] * 6, "a": [1., 2, 3, 4, 5, 6]}), [0, 1, 0, 1, 1, 0], False,
     r"column 'z' is constant zero"),
    (np.ones((3, 3)), [0, 1, 0], True, r"3 rows cannot fit 4 parameters"),
    ([1., 2, 3, 4], [0, 1, 2, 1], True, r"exactly two outcome values; found 3"),
    ([1., 2, 3, 4], [1, 1, 1, 1], True, r"exactly two outcome values; found 1"),
    ([1., np.nan, 3, 4, 5], [0, 1, 0, 1, 1], True, r"missing values in \['X'\] at row 1; fill them"),
    ([1., 2, 3, 4, 5], [0, 1, None, 1, 1], True, r"missing values in \['y'\] at row 2"),
    ([1., 2, np.inf, 4, 5], [0, 1, 0, 1, 1], True, r"'X' has infinite values at row 2"),
    (pd.DataFrame({"school": ["a", "b", "a", "b"]}), [0, 1, 0, 1], True, r"non-numeric columns \['school'\]"),
    (np.empty((4, 0)), [0, 1, 0, 1], False, r"the model has no columns"),
    (np.ones((2, 2, 2)), [0, 1], True, r"must be 1-D or 2-D; got shape \(2, 2, 2\)"),
])
def test_logit_bad_input(X, y, add_constant, message):
    with pytest.raises(EvaluationError, match=message):
        fit_logit(X, y, add_constant=add_constant)


# -- OLS and nested models -----------------------------------------------------------------------------
@pytest.mark.parametrize("add_constant", [True, False])
def test_ols_matches_statsmodels(sm, add_constant):
    # Reference library: statsmodels OLS (uncentred R² without a constant, as statsmodels reports).
    X, _, y = _random_design(6)
    design = sm.add_constant(X.astype(float)) if add_constant else X.astype(float)
    ref = sm.OLS(y, design).fit()
    ours = fit_ols(X, y, add_constant=add_constant)
    np.testing.assert_allclose(ours.params, ref.params.to_numpy(), rtol=1e-10)
    np.testing.assert_allclose(ours.bse, ref.bse.to_numpy(), rtol=1e-10)
    for ours_value, ref_value in [(ours.rsquared, ref.rsquared), (ours.rsquared_adj, ref.rsquared_adj),
                                  (ours.llf, ref.llf), (ours.aic, ref.aic), (ours.ssr, ref.ssr)]:
        assert ours_value == pytest.approx(ref_value, rel=1e-10)
    assert ours.df_resid == ref.df_resid


def test_nested_continuous_matches_statsmodels_f_test(sm):
    # Reference library: statsmodels RegressionResults.compare_f_test.
    X, _, y = _random_design(7)
    full = sm.OLS(y, sm.add_constant(X.astype(float))).fit()
    small = sm.OLS(y, sm.add_constant(X[["a"]])).fit()
    f, p, df_diff = full.compare_f_test(small)
    r = hierarchical_regression(X[["a"]], X[["b", "c"]], y)
    assert (r.kind, r.test, r.df1, r.df2) == ("continuous", "partial F", int(df_diff), int(full.df_resid))
    assert r.statistic == pytest.approx(f, rel=1e-10)
    assert r.p_value == pytest.approx(p, rel=1e-8)
    assert r.delta_r2 == pytest.approx(full.rsquared - small.rsquared, rel=1e-10)
    assert r.delta_aic == pytest.approx(full.aic - small.aic, rel=1e-10)


def test_nested_binary_matches_statsmodels_lr_test(sm):
    # Reference library: statsmodels Logit log-likelihoods (LR = 2 * difference, chi-squared on 2 df),
    # prsquared and aic.
    X, y, _ = _random_design(8)
    full = sm.Logit(y, sm.add_constant(X.astype(float))).fit(disp=0, tol=1e-12)
    small = sm.Logit(y, sm.add_constant(X[["b"]])).fit(disp=0, tol=1e-12)
    lr, df = 2 * (full.llf - small.llf), full.df_model - small.df_model
    p = sps.chi2.sf(lr, df)
    r = hierarchical_regression(X[["b"]], X[["a", "c"]], y)
    assert r.statistic == pytest.approx(lr, rel=1e-8)
    assert r.p_value == pytest.approx(p, rel=1e-7)
    assert r.df1 == int(df) == 2
    assert (r.r2_base, r.r2_full) == (pytest.approx(small.prsquared, rel=1e-8), pytest.approx(full.prsquared, rel=1e-8))
    assert r.delta_aic == pytest.approx(full.aic - small.aic, rel=1e-8)


def test_nested_intercept_only_base_and_kind_override():
    X, y, y_cont = _random_design(9)
    r = hierarchical_regression(None, X.a, y_cont)
    assert r.r2_base == pytest.approx(0.0, abs=1e-12) and r.delta_r2 == pytest.approx(r.r2_full)
    # With one predictor, the partial F equals the squared t of its coefficient (F(1, df) = t(df)^2, algebra).
    ols = fit_ols(X.a, y_cont)
    assert r.statistic == pytest.approx((ols.params[1] / ols.bse[1]) ** 2, rel=1e-10)
    as_cont = hierarchical_regression(X[["b"]], X[["a"]], y, kind="continuous")
    assert as_cont.kind == "continuous" and as_cont.test == "partial F"


def test_nested_missing_drop_counts_rows():
    X, _, y = _random_design(10, n=60)
    extra = X.a.to_numpy().copy()
    extra[[3, 17]] = np.nan
    with pytest.raises(EvaluationError, match=r"missing values in \['extra'\] at rows 3, 17; fill them"):
        hierarchical_regression(X.b, extra, y)
    r = hierarchical_regression(X.b, extra, y, missing="drop")
    keep = ~np.isnan(extra)
    ref = hierarchical_regression(X.b[keep], extra[keep], y[keep])
    assert (r.nobs, r.n_dropped) == (58, 2)
    assert r.statistic == pytest.approx(ref.statistic, rel=1e-12)


@pytest.mark.parametrize("kwargs, message", [
    ({"kind": "ordinal"}, r"'kind' must be one of \('auto', 'continuous', 'binary'\); got 'ordinal'"),
    ({"missing": "ignore"}, r"'missing' must be one of \('raise', 'drop'\)"),
    ({"extra": np.empty((6, 0))}, r"'extra' has no columns"),
    ({"base": None, "add_constant": False}, r"the model has no columns"),
    ({"y": [1, 2, 3, 4, 5]}, r"inputs must have the same number of rows"),
    ({"kind": "binary"}, r"exactly two outcome values; found 6"),
    ({"base": pd.DataFrame({"r": [1., 2, 3, 1, 2, 3]}), "extra": pd.DataFrame({"r": [0., 1, 0, 1, 1, 0]})},
     r"column names \['r'\] appear twice"),
])
def test_nested_bad_input(kwargs, message):
    args = {"base": [1., 2, 3, 4, 5, 7], "extra": [0., 1, 0, 1, 1, 0], "y": [1.1, 2.3, 2.9, 4.2, 5.1, 5.8]}
    args.update(kwargs)
    with pytest.raises(EvaluationError, match=message):
        hierarchical_regression(**args)


def test_results_read_like_dicts(spector):
    r = hierarchical_regression(spector[["GPA"]], spector[["PSI"]], spector["GRADE"])
    assert r["p_value"] == r.p_value and "delta_aic" in r.keys()
    plain = r.to_dict()
    assert plain["full"]["names"] == ["const", "GPA", "PSI"] and isinstance(plain["full"]["params"], list)
    with pytest.raises(KeyError, match="has no field 'pvalue'"):
        r["pvalue"]


# -- partial correlation ----------------------------------------------------------------------------------
def _correlated(seed: int, n: int = 200):
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(n, 2))
    x = z @ [0.6, -0.3] + rng.normal(size=n)
    y = 0.4 * x + z @ [0.5, 0.2] + rng.normal(size=n)
    return x, y, z


def test_partial_correlation_matches_statsmodels_residuals(sm):
    # Reference library: statsmodels OLS residuals; the p-value equals the t-test of x in y ~ 1 + x + z
    # (Frisch-Waugh-Lovell), also from statsmodels.
    x, y, z = _correlated(11)
    Z = sm.add_constant(z)
    rx, ry = sm.OLS(x, Z).fit().resid, sm.OLS(y, Z).fit().resid
    r = partial_correlation(x, y, z)
    assert r.r == pytest.approx(np.corrcoef(rx, ry)[0, 1], rel=1e-12)
    full = sm.OLS(y, np.column_stack([Z, x])).fit()
    assert r.p_value == pytest.approx(full.pvalues[-1], rel=1e-8)
    assert (r.df, r.nobs, r.n_controls) == (len(x) - 4, len(x), 2)
    # Fisher z with n - 3 - k degrees (Fisher 1924), computed by hand.
    half = sps.norm.ppf(0.975) / np.sqrt(len(x) - 3 - 2)
    assert (r.ci_low, r.ci_high) == (pytest.approx(np.tanh(np.arctanh(r.r) - half), rel=1e-12),
                                     pytest.approx(np.tanh(np.arctanh(r.r) + half), rel=1e-12))


def test_partial_correlation_one_control_closed_form():
    # Closed form r_xy.z = (r_xy - r_xz r_yz) / sqrt((1 - r_xz^2)(1 - r_yz^2)) (any statistics handbook).
    x, y, z = _correlated(12)
    c = np.corrcoef([x, y, z[:, 0]])
    expected = (c[0, 1] - c[0, 2] * c[1, 2]) / np.sqrt((1 - c[0, 2] ** 2) * (1 - c[1, 2] ** 2))
    assert partial_correlation(x, y, z[:, 0]).r == pytest.approx(expected, rel=1e-12)
    frame = pd.DataFrame({"z": z[:, 0]})
    assert partial_correlation(pd.Series(x), pd.Series(y), frame).r == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("x, control, message", [
    ([1., 2, 3, 4, 5, 6, 7], [2., 4, 6, 8, 10, 12, 14], r"'x' or 'y' after removing the controls has no variation"),
    ([1., 2, 3, 4, 5, 6, 7], np.empty((7, 0)), r"'control' at least one column"),
    ([1., 2, 3, 4, 5, 6, 7], [1.] * 7, r"column 'control0' is a linear combination of \['const'\]"),
])
def test_partial_correlation_bad_input(x, control, message):
    y = np.arange(len(x), dtype=float) ** 1.5
    with pytest.raises(EvaluationError, match=message):
        partial_correlation(x, y, control)
    with pytest.raises(EvaluationError, match=r"'alpha' must be a number in \(0, 1\)"):
        partial_correlation(x, y, control, alpha=1.5)


def test_partial_correlation_too_few_rows():
    with pytest.raises(EvaluationError, match=r"4 rows with 1 controls leave n - 3 - k = 0 degrees"):
        partial_correlation([1., 2, 4, 3], [2., 1, 3, 5], [1., 3, 2, 2])


# -- correlation with CI ----------------------------------------------------------------------------------
def test_pearson_matches_scipy():
    # Reference library: scipy.stats.pearsonr and its Fisher-z confidence_interval().
    x, y, _ = _correlated(13, n=80)
    ref = sps.pearsonr(x, y)
    ci = ref.confidence_interval(0.9)
    r = correlation_ci(x, y, alpha=0.1)
    assert r.r == pytest.approx(ref.statistic, rel=1e-12)
    assert r.p_value == pytest.approx(ref.pvalue, rel=1e-8)
    assert (r.ci_low, r.ci_high) == (pytest.approx(ci.low, rel=1e-10), pytest.approx(ci.high, rel=1e-10))
    assert (r.method, r.ci_method, r.nobs, r.n_groups) == ("pearson", "fisher_z", 80, None)


def test_spearman_matches_scipy_with_ties():
    # Reference library: scipy.stats.spearmanr (rho and t-based p); CI by Bonett & Wright (2000), by hand.
    rng = np.random.default_rng(14)
    x = rng.integers(0, 6, 90).astype(float)
    y = x + rng.integers(0, 4, 90)
    ref = sps.spearmanr(x, y)
    r = correlation_ci(x, y, method="spearman")
    assert r.r == pytest.approx(ref.statistic, rel=1e-12)
    assert r.p_value == pytest.approx(ref.pvalue, rel=1e-8, abs=1e-300)
    half = sps.norm.ppf(0.975) * np.sqrt((1 + r.r ** 2 / 2) / (90 - 3))
    assert r.ci_low == pytest.approx(np.tanh(np.arctanh(r.r) - half), rel=1e-12)
    assert r.ci_high == pytest.approx(np.tanh(np.arctanh(r.r) + half), rel=1e-12)


def _students(seed: int, n_students: int = 12, per: int = 6):
    rng = np.random.default_rng(seed)
    groups = np.repeat([f"s{i:02d}" for i in range(n_students)], per)
    habit = np.repeat(rng.normal(size=n_students), per)
    x = np.round(habit + rng.normal(size=len(groups)), 1)  # rounded: ties for Spearman
    y = np.round(0.5 * habit + 0.3 * x + rng.normal(size=len(groups)), 1)
    return x, y, groups


@pytest.mark.parametrize("method", ["pearson", "spearman"])
def test_student_bootstrap_matches_explicit_resampling(method):
    # The percentile CI must equal resampling whole students by hand and recomputing with scipy
    # (reference library) on the expanded rows - the same draws: default_rng(seed).integers(0, G, (B, G)).
    x, y, groups = _students(15)
    labels = np.unique(groups)
    n_boot = 150
    draws = np.random.default_rng(7).integers(0, len(labels), size=(n_boot, len(labels)))
    func = sps.pearsonr if method == "pearson" else sps.spearmanr
    reps = [func(x[rows], y[rows]).statistic
            for rows in (np.concatenate([np.flatnonzero(groups == labels[g]) for g in d]) for d in draws)]
    r = correlation_ci(x, y, method=method, groups=groups, n_boot=n_boot, random_state=7)
    low, high = np.quantile(reps, [0.025, 0.975])
    assert (r.ci_low, r.ci_high) == (pytest.approx(low, rel=1e-10), pytest.approx(high, rel=1e-10))
    reps = np.asarray(reps)
    assert r.p_value == pytest.approx(min(1, 2 * min(np.mean(reps <= 0), np.mean(reps >= 0))))
    assert r.r == pytest.approx(func(x, y).statistic, rel=1e-12)
    assert (r.ci_method, r.n_groups, r.n_boot, r.n_valid) == ("student_bootstrap", 12, n_boot, n_boot)


def test_student_bootstrap_is_seeded_and_wider_for_clustered_rows():
    # Rows share a student effect in x and y, so the row-level Fisher interval is too narrow.
    rng = np.random.default_rng(16)
    groups = np.repeat(np.arange(30), 20)
    x = np.repeat(rng.normal(size=30), 20) + 0.3 * rng.normal(size=600)
    y = np.repeat(rng.normal(size=30), 20) + 0.3 * rng.normal(size=600)
    a = correlation_ci(x, y, groups=groups, n_boot=400, random_state=3)
    b = correlation_ci(x, y, groups=groups, n_boot=400, random_state=3)
    fisher = correlation_ci(x, y)
    assert (a.ci_low, a.ci_high) == (b.ci_low, b.ci_high)
    assert a.ci_high - a.ci_low > 2 * (fisher.ci_high - fisher.ci_low)


def test_correlation_missing_drop():
    x, y, groups = _students(17)
    x = x.copy()
    x[[0, 5]] = np.nan
    r = correlation_ci(x, y, missing="drop")
    keep = ~np.isnan(x)
    assert (r.nobs, r.n_dropped) == (70, 2)
    assert r.r == pytest.approx(sps.pearsonr(x[keep], y[keep]).statistic, rel=1e-12)
    g = correlation_ci(x, y, groups=groups, missing="drop", n_boot=50, random_state=0)
    assert g.n_dropped == 2 and g.n_groups == 12


@pytest.mark.parametrize("kwargs, message", [
    ({"method": "kendall"}, r"'method' must be one of \('pearson', 'spearman'\); got 'kendall'"),
    ({"x": [1.0] * 8}, r"'x' or 'y' has no variation"),
    ({"x": [1., 2, 3], "y": [2., 1, 3]}, r"needs at least 4 complete rows; got 3"),
    ({"groups": [1, 1, 2]}, r"inputs must have the same number of rows"),
    ({"groups": [1] * 8}, r"needs at least 2 groups \(students\)"),
    ({"groups": [1, 1, 2, 2, 3, 3, 4, 4], "n_boot": 0}, r"'n_boot' must be a positive integer"),
    ({"groups": [1, 1, 2, 2, 3, 3, 4, 4], "random_state": "seed"}, r"'random_state' must be None, an int"),
    ({"x": np.ones((8, 2))}, r"single columns; got 2 and 1"),
])
def test_correlation_bad_input(kwargs, message):
    args = {"x": [1., 2, 3, 4, 5, 6, 7, 8], "y": [2., 1, 4, 3, 6, 5, 8, 7]}
    args.update(kwargs)
    with pytest.raises(EvaluationError, match=message):
        correlation_ci(**args)


# -- standalone association and spread ------------------------------------------------------------------
def test_standalone_association_matches_sklearn():
    # Reference library: sklearn.metrics roc_auc_score, cohen_kappa_score, precision_score, recall_score.
    rng = np.random.default_rng(18)
    y = rng.integers(0, 2, 300)
    value = np.where(rng.random(300) < 0.3 + 0.3 * y, rng.poisson(2, 300) + 1.0, 0.0)
    value[rng.choice(300, 25, replace=False)] = np.nan
    a = standalone_association(y, value)
    keep = ~np.isnan(value)
    yk, vk, flag = y[keep], value[keep], value[keep] > 0
    assert a.auc == pytest.approx(metrics.roc_auc_score(yk, vk), rel=1e-12)
    assert a.kappa == pytest.approx(metrics.cohen_kappa_score(yk, flag), rel=1e-12)
    assert a.precision == pytest.approx(metrics.precision_score(yk, flag), rel=1e-12)
    assert a.recall == pytest.approx(metrics.recall_score(yk, flag), rel=1e-12)
    assert a.lift == pytest.approx(a.precision / yk.mean(), rel=1e-12)
    assert (a.n_used, a.n_missing, a.support, a.n_positive) == (275, 25, int(flag.sum()), int(yk.sum()))
    high = standalone_association(pd.Series(y == 1), pd.Series(value), threshold=3)
    assert high.support == int((vk >= 3).sum()) and high.threshold == 3.0
    assert high.recall == pytest.approx(metrics.recall_score(yk, vk >= 3), rel=1e-12)


def test_standalone_association_nothing_flagged():
    a = standalone_association([0, 1, 0, 1], [0.0, 0.0, 0.0, 0.0])
    assert a.support == 0 and np.isnan(a.precision) and np.isnan(a.lift)
    assert a.recall == 0.0 and a.kappa == 0.0 and a.auc == 0.5


@pytest.mark.parametrize("y, value, kwargs, message", [
    ([0, 1, 1], [np.nan, 1.0, 2.0], {}, r"'y_true' must hold exactly two classes; found 1"),
    ([0, 1], [np.nan, np.nan], {}, r"every 'value' is missing"),
    ([0, 1, 0], [1.0, 2.0], {}, r"'y' has 3 rows but 'value' has 2"),
    ([0, 1], [1.0, 2.0], {"threshold": "high"}, r"'threshold' must be a finite number or None; got 'high'"),
    ([0, None], [1.0, 2.0], {}, r"'y' has missing values at positions \[1\]"),
    ([0, 1], ["a", "b"], {}, r"'value' must be numeric or boolean"),
])
def test_standalone_association_bad_input(y, value, kwargs, message):
    with pytest.raises(EvaluationError, match=message):
        standalone_association(y, value, **kwargs)


def test_spread_hand_computed():
    s = spread({"north": 0.70, "south": 0.64, "east": 0.76, "west": float("nan")})
    assert (s.min, s.max, s.range) == (0.64, 0.76, pytest.approx(0.12))
    assert s.sd == pytest.approx(0.06)  # values 0.64, 0.70, 0.76: deviations +-0.06, ddof=1
    assert (s.argmin, s.argmax, s.n, s.n_missing) == ("south", "east", 3, 1)
    assert np.isnan(spread({"only": 0.5}).sd)


@pytest.mark.parametrize("values, message", [
    ({}, r"non-empty dict"),
    ([0.5, 0.6], r"non-empty dict"),
    ({"a": "high"}, r"every value must be a number"),
    ({"a": float("nan")}, r"every value is missing"),
])
def test_spread_bad_input(values, message):
    with pytest.raises(EvaluationError, match=message):
        spread(values)
