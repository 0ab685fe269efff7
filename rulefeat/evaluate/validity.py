"""Statistics for per-rule validity diagnostics: nested regressions, correlations, standalone association.

Pure numpy/scipy functions on arrays or DataFrames (no event log): does a rule's per-unit value add to
other predictors, correlate with an outcome (given controls; with a student bootstrap when units are
nested in students), separate the label on its own, and how much does a statistic vary across
populations.  Missing values are refused naming the rows, or with ``missing="drop"`` dropped and counted
in ``n_dropped``.  Results are frozen dataclasses also readable like a dict (``r["p_value"]``, ``to_dict()``).
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass, fields

import numpy as np
import pandas as pd
from scipy import optimize as sopt
from scipy import special as ssp
from scipy import stats as sps

from rulefeat import _frame
from rulefeat._text import show_rows
from rulefeat.errors import EvaluationError, RulefeatWarning
from rulefeat.evaluate.stats import (
    _alpha,
    _binary,
    _bootstrap_counts,
    _bootstrap_setup,
    _vector,
    auc,
    cohen_kappa,
)

__all__ = [
    "fit_logit", "LogitFit", "fit_ols", "OLSFit", "hierarchical_regression", "NestedComparison",
    "partial_correlation", "PartialCorrelation", "correlation_ci", "Correlation",
    "standalone_association", "StandaloneAssociation", "spread", "Spread",
]

_MISSING = ("raise", "drop")


class _Fields:
    """Read a result dataclass like a mapping; ``to_dict`` gives plain Python values for JSON."""

    def keys(self) -> list[str]:
        return [f.name for f in fields(self)]

    def __getitem__(self, key: str):
        if key not in self.keys():
            raise KeyError(f"{type(self).__name__} has no field {key!r}; fields are {self.keys()}.")
        return getattr(self, key)

    def to_dict(self) -> dict:
        return {key: _plain(getattr(self, key)) for key in self.keys()}


def _plain(value):
    if isinstance(value, _Fields):
        return value.to_dict()
    if isinstance(value, (np.ndarray, np.generic)):
        return value.tolist()
    return list(value) if isinstance(value, tuple) else value


# -- input handling ------------------------------------------------------------------------------
def _matrix(X, where: str, name: str) -> tuple[np.ndarray, tuple[str, ...]]:
    """A float (n, k) matrix and its column names; 1-D input is one column."""
    if isinstance(X, pd.Series):
        X = X.to_frame(name=name if X.name is None else X.name)
    if isinstance(X, pd.DataFrame):
        columns = [X.iloc[:, j] for j in range(X.shape[1])]  # by position: names may repeat
        bad = [str(c.name) for c in columns if not (_frame.is_numeric(c) or _frame.is_boolean(c))]
        if bad:
            raise EvaluationError(f"{where}: {name!r} has non-numeric columns {bad}; encode categories as "
                                  "0/1 indicator columns first.")
        arr = np.column_stack([_frame.to_float(c) for c in columns]) if columns else np.empty((len(X), 0))
        return arr, tuple(str(c) for c in X.columns)
    try:
        arr = np.asarray(X, dtype=float)
    except (TypeError, ValueError) as exc:
        raise EvaluationError(f"{where}: {name!r} must be numeric; got {type(X).__name__}.") from exc
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2:
        raise EvaluationError(f"{where}: {name!r} must be 1-D or 2-D; got shape {arr.shape}.")
    return arr, (name,) if arr.shape[1] == 1 else tuple(f"{name}{j}" for j in range(arr.shape[1]))


def _complete(where: str, missing: str, arrays: dict[str, np.ndarray]) -> tuple[dict[str, np.ndarray], int]:
    """Check lengths and finiteness; drop incomplete rows when ``missing='drop'``, else refuse them."""
    if missing not in _MISSING:
        raise EvaluationError(f"{where}: 'missing' must be one of {_MISSING}; got {missing!r}.")
    lengths = {name: len(a) for name, a in arrays.items()}
    if len(set(lengths.values())) != 1:
        raise EvaluationError(f"{where}: inputs must have the same number of rows; got {lengths}.")
    flat = {name: a.reshape(len(a), -1) for name, a in arrays.items()}
    for name, a in flat.items():
        if np.isinf(a).any():
            raise EvaluationError(f"{where}: {name!r} has infinite values at "
                                  f"{show_rows(np.flatnonzero(np.isinf(a).any(axis=1)))}; values must be finite.")
    bad = np.zeros(next(iter(lengths.values())), dtype=bool)
    for a in flat.values():
        bad |= np.isnan(a).any(axis=1)
    if bad.any() and missing == "raise":
        holders = [name for name, a in flat.items() if np.isnan(a).any()]
        raise EvaluationError(f"{where}: missing values in {holders} at {show_rows(np.flatnonzero(bad))}; fill "
                              "them, or pass missing='drop' to leave those rows out (they are counted).")
    return {name: a[~bad] for name, a in arrays.items()}, int(bad.sum())


def _outcome(y, where: str, name: str = "y") -> np.ndarray:
    """A 1-D float array (None and pandas NA become NaN)."""
    try:
        values = y.to_numpy(dtype=float, na_value=np.nan) if isinstance(y, pd.Series) else np.asarray(y, dtype=float)
    except (TypeError, ValueError) as exc:
        raise EvaluationError(f"{where}: {name!r} must be numeric or boolean; got {type(y).__name__} "
                              f"with dtype {getattr(y, 'dtype', None)}.") from exc
    if values.ndim != 1:
        raise EvaluationError(f"{where}: {name!r} must be one-dimensional; got shape {values.shape}.")
    return values


def _zero_one(y: np.ndarray, where: str) -> np.ndarray:
    """0/1 floats for a two-valued outcome (the greater value is 1)."""
    distinct = np.unique(y)
    if len(distinct) != 2:
        raise EvaluationError(f"{where}: a logistic model needs exactly two outcome values; found "
                              f"{len(distinct)} ({distinct[:5].tolist()!r}).")
    return (y == distinct[1]).astype(float)


def _design(X: np.ndarray, names: tuple[str, ...], add_constant: bool, where: str):
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
class LogitFit(_Fields):
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
class OLSFit(_Fields):
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
    A, names = _matrix(X, where, "x")
    data, _ = _complete(where, "raise", {"X": A, "y": _outcome(y, where)})
    design, names = _design(data["X"], names, add_constant, where)
    return _logit(design, data["y"], names, where, max_iter, tol)


def _logit(design: np.ndarray, y: np.ndarray, names: tuple[str, ...], where: str, max_iter: int = 100,
           tol: float = 1e-10) -> LogitFit:
    target = _zero_one(y, where)
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
    A, names = _matrix(X, where, "x")
    data, _ = _complete(where, "raise", {"X": A, "y": _outcome(y, where)})
    design, names = _design(data["X"], names, add_constant, where)
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
class NestedComparison(_Fields):
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
    target = _outcome(y, where)
    B, base_names = _matrix(np.empty((len(target), 0)) if base is None else base, where, "base")
    E, extra_names = _matrix(extra, where, "extra")
    if E.shape[1] == 0:
        raise EvaluationError(f"{where}: 'extra' has no columns; pass at least one predictor to test.")
    data, dropped = _complete(where, missing, {"base": B, "extra": E, "y": target})
    kinds = ("auto", "continuous", "binary")
    if kind not in kinds:
        raise EvaluationError(f"{where}: 'kind' must be one of {kinds}; got {kind!r}.")
    if kind == "auto":
        kind = "binary" if len(np.unique(data["y"])) == 2 else "continuous"
    fits = []
    for label, X, names in [("base", data["base"], base_names),
                            ("full", np.column_stack([data["base"], data["extra"]]), (*base_names, *extra_names))]:
        design, names = _design(X, names, add_constant, f"{where} ({label} model)")
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
@dataclass(frozen=True)
class PartialCorrelation(_Fields):
    """Correlation of x and y after removing linear effects of ``n_controls`` controls (+ constant)."""

    r: float
    ci_low: float
    ci_high: float
    p_value: float
    df: int
    nobs: int
    n_controls: int
    n_dropped: int


def _fisher_ci(r: float, se: float, alpha: float) -> tuple[float, float]:
    half = float(sps.norm.ppf(1.0 - alpha / 2.0)) * se
    with np.errstate(divide="ignore"):
        z = np.arctanh(np.clip(r, -1.0, 1.0))
    return float(np.tanh(z - half)), float(np.tanh(z + half))


def _t_p_value(r: float, df: int) -> float:
    """Two-sided p of H0: rho = 0 from t = r sqrt(df / (1 - r^2)) on df degrees of freedom."""
    if abs(r) >= 1.0:
        return 0.0
    return float(2.0 * sps.t.sf(abs(r) * np.sqrt(df / (1.0 - r * r)), df))


def _pearson(x: np.ndarray, y: np.ndarray, where: str, what: str) -> float:
    dx, dy = x - x.mean(), y - y.mean()
    sx, sy = np.sqrt(dx @ dx), np.sqrt(dy @ dy)
    scale = max(np.abs(x).max(), np.abs(y).max(), 1.0) * np.sqrt(len(x))
    if sx <= 1e-12 * scale or sy <= 1e-12 * scale:
        raise EvaluationError(f"{where}: {what} has no variation, so the correlation is undefined.")
    return float(np.clip((dx @ dy) / (sx * sy), -1.0, 1.0))


def partial_correlation(x, y, control, *, alpha: float = 0.05, missing: str = "raise") -> PartialCorrelation:
    """Partial correlation of ``x`` and ``y`` given ``control`` (1-D or 2-D), with Fisher-z CI and p.

    ``r`` is the Pearson correlation of the residuals of x and of y after regressing each on the
    controls plus a constant.  With ``n`` rows and ``k`` control columns, the p-value is the exact
    t-test on ``df = n - 2 - k`` (it equals the t-test of x's coefficient in y ~ 1 + x + controls), and
    the CI is ``tanh(atanh(r) +- z_(1 - alpha/2) / sqrt(n - 3 - k))``: Fisher's z with the usual
    ``n - 3`` reduced by one per control (Fisher 1924, Metron 3:329).  Needs ``n - 3 - k >= 1``.

    Examples
    --------
    >>> r = partial_correlation([1, 2, 3, 4, 5, 6, 7, 8], [2, 1, 4, 3, 7, 5, 6, 8], [1, 1, 2, 2, 3, 3, 4, 4])
    >>> round(r.r, 3), r.df
    (-0.291, 5)
    """
    where = "partial_correlation"
    level = _alpha(alpha, where)
    X, _ = _matrix(x, where, "x")
    Y, _ = _matrix(y, where, "y")
    C, _ = _matrix(control, where, "control")
    if X.shape[1] != 1 or Y.shape[1] != 1 or C.shape[1] == 0:
        raise EvaluationError(f"{where}: 'x' and 'y' must be single columns and 'control' at least one column; "
                              f"got {X.shape[1]}, {Y.shape[1]} and {C.shape[1]}.")
    data, dropped = _complete(where, missing, {"x": X, "y": Y, "control": C})
    n, k = len(data["x"]), C.shape[1]
    if n - 3 - k < 1:
        raise EvaluationError(f"{where}: {n} rows with {k} controls leave n - 3 - k = {n - 3 - k} degrees for "
                              "the Fisher-z interval; need at least 1.")
    design, _ = _design(data["control"], tuple(f"control{j}" for j in range(k)), True, where)
    resid = np.column_stack([data["x"], data["y"]])
    resid = resid - design @ np.linalg.lstsq(design, resid, rcond=None)[0]
    r = _pearson(resid[:, 0], resid[:, 1], where, "'x' or 'y' after removing the controls")
    ci = _fisher_ci(r, 1.0 / np.sqrt(n - 3 - k), level)
    return PartialCorrelation(r, ci[0], ci[1], _t_p_value(r, n - 2 - k), n - 2 - k, n, k, dropped)


@dataclass(frozen=True)
class Correlation(_Fields):
    """A correlation with its CI; ``ci_method`` is ``"fisher_z"`` or ``"student_bootstrap"``."""

    r: float
    ci_low: float
    ci_high: float
    p_value: float
    method: str
    ci_method: str
    nobs: int
    n_groups: int | None
    n_boot: int | None
    n_valid: int | None
    n_dropped: int


def _midranks(w: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """Midranks of every row within each weighted replicate (rows of ``w`` are multiplicities)."""
    order = np.argsort(codes, kind="stable")
    starts = np.flatnonzero(np.r_[True, np.diff(codes[order]) != 0])
    per_value = np.add.reduceat(w[:, order], starts, axis=1)  # (B, n_distinct)
    below = np.cumsum(per_value, axis=1) - per_value
    return (below + (per_value + 1.0) / 2.0)[:, codes]


def _weighted_r(w: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Pearson r of every replicate from weighted moments; NaN where a replicate has no spread."""
    total = w.sum(axis=1)
    mx, my = (w * x).sum(axis=1) / total, (w * y).sum(axis=1) / total
    dx, dy = x - mx[:, None], y - my[:, None]
    sxx, syy, sxy = (w * dx * dx).sum(axis=1), (w * dy * dy).sum(axis=1), (w * dx * dy).sum(axis=1)
    ok = (sxx > 1e-12 * total * np.maximum(mx * mx, 1.0)) & (syy > 1e-12 * total * np.maximum(my * my, 1.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ok, sxy / np.sqrt(sxx * syy), np.nan)


def _boot_correlations(x, y, method, groups, n_boot, alpha, random_state, where):
    codes, n_groups, n_boot, alpha, rng = _bootstrap_setup(groups, len(x), n_boot, alpha, random_state, where)
    x_codes, y_codes = (np.unique(v, return_inverse=True)[1].ravel() for v in (x, y))
    reps = []
    for counts in _bootstrap_counts(n_groups, n_boot, rng, len(x)):
        w = counts[:, codes].astype(float)  # every row weighted by its student's multiplicity
        if method == "spearman":
            reps.append(_weighted_r(w, _midranks(w, x_codes), _midranks(w, y_codes)))
        else:
            reps.append(_weighted_r(w, x[None, :], y[None, :]))
    reps = np.concatenate(reps)
    return reps[np.isfinite(reps)], n_groups, n_boot


def correlation_ci(x, y, method: str = "pearson", alpha: float = 0.05, groups=None, n_boot: int = 2000,
                   random_state=None, *, missing: str = "raise") -> Correlation:
    """Pearson or Spearman correlation with a confidence interval and two-sided p-value.

    Without ``groups`` the rows are taken as independent: Pearson's CI is Fisher's z,
    ``tanh(atanh(r) +- z_(1 - alpha/2) / sqrt(n - 3))``, and p is the exact t-test on ``n - 2`` df (as
    :func:`scipy.stats.pearsonr`).  Spearman's rho is Pearson's r of midranks, p the same t
    approximation (as :func:`scipy.stats.spearmanr`), and the Fisher-z CI uses the variance
    ``(1 + rho^2 / 2) / (n - 3)`` of Bonett & Wright (2000, Psychometrika 65:23).

    With ``groups`` (each row's student) the rows of one student are not independent - a student's units
    share habits, so n rows carry less information than n students' worth and Fisher's interval would
    be too narrow.  The CI is then a percentile bootstrap over students: each replicate draws the
    students with replacement and keeps all their rows (Spearman re-ranks within each replicate).
    ``p_value`` is then the one dual to that interval: twice the smaller share of replicates on either
    side of 0, capped at 1.  Replicates without spread in x or y are dropped (``n_valid`` counts the rest).

    Examples
    --------
    >>> r = correlation_ci([1, 2, 3, 4, 5, 6], [1, 3, 2, 5, 4, 6])
    >>> round(r.r, 3), r.ci_method
    (0.886, 'fisher_z')
    """
    where = "correlation_ci"
    methods = ("pearson", "spearman")
    if method not in methods:
        raise EvaluationError(f"{where}: 'method' must be one of {methods}; got {method!r}.")
    level = _alpha(alpha, where)
    X, _ = _matrix(x, where, "x")
    Y, _ = _matrix(y, where, "y")
    if X.shape[1] != 1 or Y.shape[1] != 1:
        raise EvaluationError(f"{where}: 'x' and 'y' must be single columns; got {X.shape[1]} and {Y.shape[1]}.")
    arrays = {"x": X[:, 0], "y": Y[:, 0]}
    if groups is not None:
        g = _vector(groups, where, "groups")
        arrays["groups"] = np.unique(g, return_inverse=True)[1].ravel().astype(float)
    data, dropped = _complete(where, missing, arrays)
    xs, ys, n = data["x"], data["y"], len(data["x"])
    if n < 4:
        raise EvaluationError(f"{where}: needs at least 4 complete rows; got {n}.")
    ranked = (sps.rankdata(xs), sps.rankdata(ys)) if method == "spearman" else (xs, ys)
    r = _pearson(*ranked, where, "'x' or 'y'")
    if groups is None:
        se = np.sqrt((1.0 + r * r / 2.0 if method == "spearman" else 1.0) / (n - 3))
        low, high = _fisher_ci(r, se, level)
        return Correlation(r, low, high, _t_p_value(r, n - 2), method, "fisher_z", n, None, None, None, dropped)
    reps, n_groups, n_boot = _boot_correlations(xs, ys, method, data["groups"], n_boot, level, random_state, where)
    if len(reps) == 0:
        raise EvaluationError(f"{where}: every bootstrap replicate lacked spread in x or y; use more students.")
    low, high = np.quantile(reps, [level / 2.0, 1.0 - level / 2.0])
    p = min(1.0, 2.0 * min(np.mean(reps <= 0.0), np.mean(reps >= 0.0)))
    return Correlation(r, float(low), float(high), float(p), method, "student_bootstrap", n, n_groups, n_boot,
                       len(reps), dropped)


# -- standalone association and spread -----------------------------------------------------------------
@dataclass(frozen=True)
class StandaloneAssociation(_Fields):
    """How a rule's per-unit value alone relates to the label.

    ``auc`` ranks units by the raw value; the other fields judge the flag ``value > 0`` (or
    ``value >= threshold``): ``support`` units flagged (``support_rate`` of ``n_used``), Cohen's
    ``kappa``, ``precision``, ``recall`` and ``lift = precision / base_rate``.  ``n_missing`` units had no
    value and were left out; precision and lift are NaN when nothing is flagged.
    """

    auc: float
    kappa: float
    precision: float
    recall: float
    lift: float
    base_rate: float
    support: int
    support_rate: float
    n_used: int
    n_missing: int
    n_positive: int
    threshold: float | None


def standalone_association(y, value, threshold: float | None = None) -> StandaloneAssociation:
    """AUC of ``value`` against a binary label, and agreement of the flag it implies.

    Rows whose ``value`` is NaN are excluded and counted in ``n_missing``; ``y`` must have two classes
    (the greater positive) among the remaining rows.  The flag is ``value > 0`` by default (a rule's
    count, rate or any is positive when it fired), or ``value >= threshold``.

    Examples
    --------
    >>> a = standalone_association([0, 0, 1, 1, 0, 1], [0, 0, 2, 1, float("nan"), 0])
    >>> a.auc, a.precision, a.n_missing
    (0.8333333333333334, 1.0, 1)
    """
    where = "standalone_association"
    labels = _vector(y, where, "y")
    values = _outcome(value, where, "value")
    if len(values) != len(labels):
        raise EvaluationError(f"{where}: 'y' has {len(labels)} rows but 'value' has {len(values)}.")
    if threshold is not None and not (isinstance(threshold, (int, float, np.number)) and np.isfinite(threshold)):
        raise EvaluationError(f"{where}: 'threshold' must be a finite number or None; got {threshold!r}.")
    used = ~np.isnan(values)
    if not used.any():
        raise EvaluationError(f"{where}: every 'value' is missing; nothing to evaluate.")
    positive = _binary(labels[used], where)
    v = values[used]
    flag = v > 0 if threshold is None else v >= threshold
    tp, support, n_pos = int((flag & positive).sum()), int(flag.sum()), int(positive.sum())
    base = n_pos / len(v)
    precision = tp / support if support else float("nan")
    return StandaloneAssociation(auc(positive, v), cohen_kappa(positive, flag), precision, tp / n_pos,
                                 precision / base, base, support, support / len(v), len(v), int((~used).sum()),
                                 n_pos, None if threshold is None else float(threshold))


@dataclass(frozen=True)
class Spread(_Fields):
    """Spread of a statistic across populations; ``sd`` uses ddof=1 (NaN for one population)."""

    min: float
    max: float
    range: float
    sd: float
    mean: float
    argmin: str
    argmax: str
    n: int
    n_missing: int


def spread(values_by_group: Mapping[str, float]) -> Spread:
    """Min, max, range and SD of one statistic computed in several populations (schools, cohorts).

    NaN entries (a statistic undefined in that population) are left out and counted in ``n_missing``.

    Examples
    --------
    >>> s = spread({"north": 0.71, "south": 0.64, "east": float("nan")})
    >>> round(s.range, 2), s.argmin, s.n_missing
    (0.07, 'south', 1)
    """
    where = "spread"
    if not isinstance(values_by_group, Mapping) or not values_by_group:
        raise EvaluationError(f"{where}: 'values_by_group' must be a non-empty dict of group -> number; "
                              f"got {values_by_group!r}.")
    try:
        values = np.array([float(v) for v in values_by_group.values()])
    except (TypeError, ValueError) as exc:
        raise EvaluationError(f"{where}: every value must be a number; got {values_by_group!r}.") from exc
    names = np.array([str(k) for k in values_by_group], dtype=object)
    keep = ~np.isnan(values)
    if not keep.any():
        raise EvaluationError(f"{where}: every value is missing (NaN); nothing to summarise.")
    v, names = values[keep], names[keep]
    sd = float(v.std(ddof=1)) if len(v) > 1 else float("nan")
    return Spread(float(v.min()), float(v.max()), float(np.ptp(v)), sd, float(v.mean()),
                  str(names[np.argmin(v)]), str(names[np.argmax(v)]), len(v), int((~keep).sum()))
