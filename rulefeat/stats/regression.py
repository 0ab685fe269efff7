"""Logistic and linear regression fits and nested-model comparisons (numpy/scipy only)."""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy import optimize as sopt
from scipy import special as ssp
from scipy import stats as sps

from ..errors import EvaluationError, RulefeatWarning
from ._records import Fields, as_matrix, as_outcome, as_zero_one, complete_cases

__all__ = ["fit_logit", "LogitFit", "fit_ols", "OLSFit", "hierarchical_regression", "NestedComparison"]


def design_matrix(X: np.ndarray, names: tuple[str, ...], add_constant: bool, where: str):
    if add_constant:
        X, names = np.column_stack([np.ones(len(X)), X]), ("const", *names)
    if X.shape[1] == 0:
        raise EvaluationError(f"{where}: the model has no columns; pass predictors or add_constant=True.")
    if len(set(names)) != len(names):
        dupes = sorted({n for n in names if names.count(n) > 1})
        raise EvaluationError(f"{where}: column names {dupes} appear twice; rename them.")
    _check_rank(X, names, where)
    return X, names


def _check_rank(X: np.ndarray, names: tuple[str, ...], where: str) -> None:
    n, k = X.shape
    if n <= k:
        raise EvaluationError(f"{where}: {n} rows cannot fit {k} parameters {list(names)}; need more rows "
                              "than parameters.")
    if np.linalg.matrix_rank(X) == k:
        return
    # Name the first column (in order) that earlier columns already span: that is the one to drop.
    for j in range(1, k + 1):
        if np.linalg.matrix_rank(X[:, :j]) < j:
            what = "is constant zero" if not X[:, j - 1].any() else \
                f"is a linear combination of {list(names[:j - 1])}"
            raise EvaluationError(f"{where}: singular design - column {names[j - 1]!r} {what} (e.g. a constant "
                                  "column next to the added constant, or a duplicated predictor); drop it.")


# -- fits ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class LogitFit(Fields):
    """Maximum-likelihood logistic regression; ``ll_null`` is the intercept-only model's log-likelihood."""

    params: np.ndarray
    bse: np.ndarray
    llf: float
    ll_null: float
    aic: float
    mcfadden_r2: float
    converged: bool
    n_iter: int
    names: tuple[str, ...]
    nobs: int


@dataclass(frozen=True)
class OLSFit(Fields):
    """Ordinary least squares; R² is centred with a constant and uncentred without one (as is usual)."""

    params: np.ndarray
    bse: np.ndarray
    rsquared: float
    rsquared_adj: float
    llf: float
    aic: float
    ssr: float
    df_resid: int
    names: tuple[str, ...]
    nobs: int


def _logit_llf(eta: np.ndarray, y: np.ndarray) -> float:
    return float(y @ eta - np.logaddexp(0.0, eta).sum())


def _newton(X: np.ndarray, y: np.ndarray, max_iter: int, tol: float) -> tuple[np.ndarray, float, bool, int]:
    """Newton-Raphson with step halving, so the log-likelihood never decreases."""
    beta = np.zeros(X.shape[1])
    llf = _logit_llf(X @ beta, y)
    for it in range(1, max_iter + 1):
        p = ssp.expit(X @ beta)
        hess = (X * (p * (1.0 - p))[:, None]).T @ X
        try:
            step = np.linalg.solve(hess, X.T @ (y - p))
        except np.linalg.LinAlgError:
            return beta, llf, False, it  # weights vanished: the separation check decides what it means
        t = 1.0
        while _logit_llf(X @ (beta + t * step), y) < llf - 1e-12 * abs(llf) and t > 1e-8:
            t /= 2.0
        beta = beta + t * step
        llf = _logit_llf(X @ beta, y)
        if np.max(np.abs(t * step)) <= tol * (1.0 + np.max(np.abs(beta))):
            return beta, llf, True, it
    return beta, llf, False, max_iter


def _separation(X: np.ndarray, y: np.ndarray, names: tuple[str, ...], where: str) -> None:
    """Raise if a direction b with s_i x_i'b >= 0 for all rows (s = +-1) predicts some rows exactly.

    Linear programmes of Konis (2007, DPhil thesis, University of Oxford): maximise sum_i s_i x_i'b
    subject to s_i x_i'b >= 0 and |b_j| <= 1; a positive optimum means the MLE does not exist.  The
    separation is complete when some b makes every margin positive (max t with s_i x_i'b >= t).
    """
    scale = np.max(np.abs(X), axis=0)
    Z = (X / np.where(scale > 0, scale, 1.0)) * (2.0 * y - 1.0)[:, None]
    n, k = Z.shape
    box = [(-1.0, 1.0)] * k
    res = sopt.linprog(-Z.sum(axis=0), A_ub=-Z, b_ub=np.zeros(n), bounds=box, method="highs")
    if res.status != 0 or -res.fun <= 1e-6:
        return
    strict = sopt.linprog(np.r_[np.zeros(k), -1.0], A_ub=np.column_stack([-Z, np.ones(n)]), b_ub=np.zeros(n),
                          bounds=[*box, (0.0, 1.0)], method="highs")
    complete = strict.status == 0 and -strict.fun > 1e-7
    direction = strict.x[:k] if complete else res.x
    exact = n if complete else f"at least {int((Z @ res.x > 1e-7).sum())}"
    involved = [names[j] for j in np.flatnonzero(np.abs(direction) > 1e-7) if names[j] != "const"] or list(names)
    raise EvaluationError(f"{where}: {'complete' if complete else 'quasi-complete'} separation - a combination "
                          f"of {involved} predicts {exact} of {n} rows exactly, so the maximum-likelihood "
                          "coefficients are infinite. Drop or merge those predictors, or use a penalised model.")


def fit_logit(X, y, *, add_constant: bool = True, max_iter: int = 100, tol: float = 1e-10) -> LogitFit:
    """Logistic regression by Newton-Raphson (IRLS), with exact checks for separation and singularity.

    ``X`` holds numeric or boolean predictors (1-D is one column; DataFrame column names become
    ``names``, after ``"const"`` when ``add_constant``); ``y`` two values, the greater coded 1.  Newton
    steps (halved until the log-likelihood does not drop) stop when the largest is below
    ``tol * (1 + max|params|)``.  Returns ``params`` and ``bse`` (inverse observed information), ``llf``,
    ``ll_null`` (intercept-only model, with or without a constant in the fit), ``aic = -2 llf + 2 k`` and
    ``mcfadden_r2 = 1 - llf / ll_null``; non-convergence warns.  :class:`~rulefeat.errors.EvaluationError`
    is raised for missing values, a singular design (naming the redundant column) and complete or
    quasi-complete separation (a linear programme checks when the fit saturates or does not converge).

    Examples
    --------
    >>> fit = fit_logit([0.5, 1.0, 1.5, 2.0, 2.5, 3.0], [0, 0, 1, 0, 1, 1])
    >>> fit.names, round(float(fit.params[1]), 3), fit.converged
    (('const', 'x'), 2.428, True)
    """
    where = "fit_logit"
    A, names = as_matrix(X, where, "x")
    data, _ = complete_cases(where, "raise", {"X": A, "y": as_outcome(y, where)})
    design, names = design_matrix(data["X"], names, add_constant, where)
    return _logit(design, data["y"], names, where, max_iter, tol)


def _logit(design: np.ndarray, y: np.ndarray, names: tuple[str, ...], where: str, max_iter: int = 100,
           tol: float = 1e-10) -> LogitFit:
    target = as_zero_one(y, where)
    beta, llf, converged, n_iter = _newton(design, target, max_iter, tol)
    if not converged or np.max(np.abs(design @ beta)) > 30.0:  # |eta| > 30: probabilities saturate
        _separation(design, target, names, where)
    if not converged:
        warnings.warn(f"{where}: Newton-Raphson did not converge in {max_iter} iterations.", RulefeatWarning,
                      stacklevel=3)
    p = ssp.expit(design @ beta)
    try:
        cov = np.linalg.inv((design * (p * (1.0 - p))[:, None]).T @ design)
    except np.linalg.LinAlgError as exc:
        raise EvaluationError(f"{where}: the information matrix is singular at the estimate (fitted "
                              "probabilities of 0 or 1); the model cannot be fitted as specified.") from exc
    rate = target.mean()
    ll_null = float(len(target) * (rate * np.log(rate) + (1.0 - rate) * np.log1p(-rate)))
    k = design.shape[1]
    return LogitFit(beta, np.sqrt(np.diag(cov)), llf, ll_null, -2.0 * llf + 2.0 * k, 1.0 - llf / ll_null,
                    converged, n_iter, names, len(target))


def fit_ols(X, y, *, add_constant: bool = True) -> OLSFit:
    """Ordinary least squares with the Gaussian log-likelihood and AIC.

    ``rsquared`` is ``1 - ssr / tss`` with ``tss`` centred when ``add_constant`` (uncentred otherwise);
    ``rsquared_adj = 1 - (1 - R²)(n - c) / df_resid`` with ``c = 1`` for a constant, ``df_resid = n - k``;
    ``llf = -n/2 (log(2 pi ssr / n) + 1)``; ``aic = -2 llf + 2 k``; ``bse`` from ``ssr / df_resid``.
    Bad input raises :class:`~rulefeat.errors.EvaluationError` as :func:`fit_logit` does.

    Examples
    --------
    >>> fit = fit_ols([1.0, 2.0, 3.0, 4.0], [2.0, 4.1, 5.9, 8.0])
    >>> round(float(fit.params[1]), 2), round(fit.rsquared, 4)
    (1.98, 0.9991)
    """
    where = "fit_ols"
    A, names = as_matrix(X, where, "x")
    data, _ = complete_cases(where, "raise", {"X": A, "y": as_outcome(y, where)})
    design, names = design_matrix(data["X"], names, add_constant, where)
    return _ols(design, data["y"], names, where, add_constant)


def _ols(design: np.ndarray, y: np.ndarray, names: tuple[str, ...], where: str, add_constant: bool) -> OLSFit:
    params = np.linalg.lstsq(design, y, rcond=None)[0]
    n, k = design.shape
    ssr = float(np.sum((y - design @ params) ** 2))
    tss = float(np.sum((y - y.mean()) ** 2) if add_constant else y @ y)
    if tss <= 0:
        raise EvaluationError(f"{where}: 'y' has no variation to explain (total sum of squares is 0).")
    r2 = 1.0 - ssr / tss
    adj = 1.0 - (1.0 - r2) * (n - int(add_constant)) / (n - k)
    llf = -0.5 * n * (np.log(2.0 * np.pi * ssr / n) + 1.0) if ssr > 0 else np.inf
    bse = np.sqrt(np.diag(np.linalg.inv(design.T @ design)) * ssr / (n - k))
    return OLSFit(params, bse, r2, adj, float(llf), float(-2.0 * llf + 2.0 * k), ssr, n - k, names, n)


# -- nested models ------------------------------------------------------------------------------------
@dataclass(frozen=True)
class NestedComparison(Fields):
    """Base model against base + extra on the same rows.

    ``statistic`` is the partial F (continuous) or likelihood-ratio statistic (binary) with ``df1``
    extra parameters (and ``df2`` residual degrees of freedom for F, None for LR).  ``r2_*`` are R²
    (continuous) or McFadden's R² (binary); ``delta_*`` are full minus base.
    """

    kind: str
    test: str
    statistic: float
    df1: int
    df2: int | None
    p_value: float
    r2_base: float
    r2_full: float
    delta_r2: float
    aic_base: float
    aic_full: float
    delta_aic: float
    nobs: int
    n_dropped: int
    base: OLSFit | LogitFit
    full: OLSFit | LogitFit


def hierarchical_regression(base, extra, y, kind: str = "auto", *, add_constant: bool = True,
                            missing: str = "raise") -> NestedComparison:
    """Does ``extra`` explain the outcome beyond ``base``? Fit y ~ base, then y ~ base + extra.

    Continuous outcome (OLS): ``delta_r2`` and the partial F test
    ``F = ((ssr_base - ssr_full) / df1) / (ssr_full / df2)`` with ``df1`` = extra columns and
    ``df2`` = the full model's residual degrees of freedom.  Binary outcome (logit): the
    likelihood-ratio test ``LR = 2 (llf_full - llf_base)`` on ``df1`` degrees of freedom (chi-squared),
    with McFadden's R² of both models.  Both report AIC and ``delta_aic`` (negative favours the full model).
    ``base`` None is the intercept-only model; ``extra`` (e.g. one rule's per-unit values) needs a
    column; ``kind="auto"`` treats a two-valued outcome as binary; ``missing="drop"`` drops (and counts)
    rows with a missing value anywhere instead of refusing them.

    Examples
    --------
    >>> r = hierarchical_regression([1, 2, 3, 4, 5, 6], [0, 1, 0, 1, 1, 0], [1.1, 2.3, 2.9, 4.2, 5.1, 5.8])
    >>> r.kind, r.df1, r.df2
    ('continuous', 1, 3)
    """
    where = "hierarchical_regression"
    target = as_outcome(y, where)
    B, base_names = as_matrix(np.empty((len(target), 0)) if base is None else base, where, "base")
    E, extra_names = as_matrix(extra, where, "extra")
    if E.shape[1] == 0:
        raise EvaluationError(f"{where}: 'extra' has no columns; pass at least one predictor to test.")
    data, dropped = complete_cases(where, missing, {"base": B, "extra": E, "y": target})
    kinds = ("auto", "continuous", "binary")
    if kind not in kinds:
        raise EvaluationError(f"{where}: 'kind' must be one of {kinds}; got {kind!r}.")
    if kind == "auto":
        kind = "binary" if len(np.unique(data["y"])) == 2 else "continuous"
    fits = []
    for label, X, names in [("base", data["base"], base_names),
                            ("full", np.column_stack([data["base"], data["extra"]]), (*base_names, *extra_names))]:
        design, names = design_matrix(X, names, add_constant, f"{where} ({label} model)")
        fits.append(_logit(design, data["y"], names, f"{where} ({label} model)") if kind == "binary"
                    else _ols(design, data["y"], names, f"{where} ({label} model)", add_constant))
    small, large = fits
    df1 = len(large.params) - len(small.params)
    if kind == "binary":
        stat, df2, test = max(2.0 * (large.llf - small.llf), 0.0), None, "likelihood ratio"
        p, r2 = float(sps.chi2.sf(stat, df1)), (small.mcfadden_r2, large.mcfadden_r2)
    else:
        df2, test = large.df_resid, "partial F"
        stat = max((small.ssr - large.ssr) / df1, 0.0) / (large.ssr / df2) if large.ssr > 0 else np.inf
        p, r2 = float(sps.f.sf(stat, df1, df2)), (small.rsquared, large.rsquared)
    return NestedComparison(kind, test, float(stat), df1, df2, p, r2[0], r2[1], r2[1] - r2[0], small.aic,
                            large.aic, large.aic - small.aic, large.nobs, dropped, small, large)


# -- correlations -----------------------------------------------------------------------------------
