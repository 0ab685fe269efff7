"""Statistics for per-rule validity diagnostics: nested regressions, correlations, standalone association.

Pure numpy/scipy functions on arrays or DataFrames (no event log): does a rule's per-unit value add to
other predictors, correlate with an outcome (given controls; with a student bootstrap when units are
nested in students), separate the label on its own, and how much does a statistic vary across
populations.  Missing values are refused naming the rows, or with ``missing="drop"`` dropped and counted
in ``n_dropped``.  Results are frozen dataclasses also readable like a dict (``r["p_value"]``, ``to_dict()``).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from scipy import stats as sps

from ..errors import EvaluationError
from ._records import Fields, as_matrix, as_outcome, complete_cases
from .inference import (
    auc,
    bootstrap_counts,
    bootstrap_setup,
    check_alpha,
    check_binary,
    check_vector,
    cohen_kappa,
)
from .regression import (
    LogitFit,
    NestedComparison,
    OLSFit,
    design_matrix,
    fit_logit,
    fit_ols,
    hierarchical_regression,
)

__all__ = [
    "fit_logit", "LogitFit", "fit_ols", "OLSFit", "hierarchical_regression", "NestedComparison",
    "partial_correlation", "PartialCorrelation", "correlation_ci", "Correlation",
    "standalone_association", "StandaloneAssociation", "spread", "Spread",
]

@dataclass(frozen=True)
class PartialCorrelation(Fields):
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
    level = check_alpha(alpha, where)
    X, _ = as_matrix(x, where, "x")
    Y, _ = as_matrix(y, where, "y")
    C, _ = as_matrix(control, where, "control")
    if X.shape[1] != 1 or Y.shape[1] != 1 or C.shape[1] == 0:
        raise EvaluationError(f"{where}: 'x' and 'y' must be single columns and 'control' at least one column; "
                              f"got {X.shape[1]}, {Y.shape[1]} and {C.shape[1]}.")
    data, dropped = complete_cases(where, missing, {"x": X, "y": Y, "control": C})
    n, k = len(data["x"]), C.shape[1]
    if n - 3 - k < 1:
        raise EvaluationError(f"{where}: {n} rows with {k} controls leave n - 3 - k = {n - 3 - k} degrees for "
                              "the Fisher-z interval; need at least 1.")
    design, _ = design_matrix(data["control"], tuple(f"control{j}" for j in range(k)), True, where)
    resid = np.column_stack([data["x"], data["y"]])
    resid = resid - design @ np.linalg.lstsq(design, resid, rcond=None)[0]
    r = _pearson(resid[:, 0], resid[:, 1], where, "'x' or 'y' after removing the controls")
    ci = _fisher_ci(r, 1.0 / np.sqrt(n - 3 - k), level)
    return PartialCorrelation(r, ci[0], ci[1], _t_p_value(r, n - 2 - k), n - 2 - k, n, k, dropped)


@dataclass(frozen=True)
class Correlation(Fields):
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
    codes, n_groups, n_boot, alpha, rng = bootstrap_setup(groups, len(x), n_boot, alpha, random_state, where)
    x_codes, y_codes = (np.unique(v, return_inverse=True)[1].ravel() for v in (x, y))
    reps = []
    for counts in bootstrap_counts(n_groups, n_boot, rng, len(x)):
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
    level = check_alpha(alpha, where)
    X, _ = as_matrix(x, where, "x")
    Y, _ = as_matrix(y, where, "y")
    if X.shape[1] != 1 or Y.shape[1] != 1:
        raise EvaluationError(f"{where}: 'x' and 'y' must be single columns; got {X.shape[1]} and {Y.shape[1]}.")
    arrays = {"x": X[:, 0], "y": Y[:, 0]}
    if groups is not None:
        g = check_vector(groups, where, "groups")
        arrays["groups"] = np.unique(g, return_inverse=True)[1].ravel().astype(float)
    data, dropped = complete_cases(where, missing, arrays)
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
class StandaloneAssociation(Fields):
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
    labels = check_vector(y, where, "y")
    values = as_outcome(value, where, "value")
    if len(values) != len(labels):
        raise EvaluationError(f"{where}: 'y' has {len(labels)} rows but 'value' has {len(values)}.")
    if threshold is not None and not (isinstance(threshold, (int, float, np.number)) and np.isfinite(threshold)):
        raise EvaluationError(f"{where}: 'threshold' must be a finite number or None; got {threshold!r}.")
    used = ~np.isnan(values)
    if not used.any():
        raise EvaluationError(f"{where}: every 'value' is missing; nothing to evaluate.")
    positive = check_binary(labels[used], where)
    v = values[used]
    flag = v > 0 if threshold is None else v >= threshold
    tp, support, n_pos = int((flag & positive).sum()), int(flag.sum()), int(positive.sum())
    base = n_pos / len(v)
    precision = tp / support if support else float("nan")
    return StandaloneAssociation(auc(positive, v), cohen_kappa(positive, flag), precision, tp / n_pos,
                                 precision / base, base, support, support / len(v), len(v), int((~used).sum()),
                                 n_pos, None if threshold is None else float(threshold))


@dataclass(frozen=True)
class Spread(Fields):
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
