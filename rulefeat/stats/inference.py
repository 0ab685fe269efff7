"""Statistics for comparing detectors: AUC, DeLong, kappa, t-tests, grouped bootstrap, Holm.

Everything works on plain arrays (numpy/scipy only) and is vectorized; the evaluator calls
these functions on the out-of-fold predictions of each variant.  Binary labels follow
scikit-learn: the greater of the two labels in ``y_true`` (``1`` for 0/1 or bool) is positive.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import stats as sps

from ..errors import EvaluationError, RulefeatWarning
from ._checks import (
    check_alpha,
    check_binary,
    check_codes,
    check_positive_number,
    check_same_length,
    check_scores,
    check_vector,
    check_weights,
)

__all__ = [
    "auc", "delong_covariance", "delong_test", "DeLongResult", "hanley_mcneil_se",
    "cohen_kappa", "kappa_from_table", "best_kappa_threshold",
    "corrected_resampled_ttest", "naive_ttest", "TTestResult",
    "grouped_bootstrap_auc_difference", "grouped_bootstrap_metric_difference", "BootstrapResult",
    "holm", "describe_effect", "AUC_SIZE_LIMITS",
]

# Bootstrap blocks hold at most this many numbers per array (~16 MB of int64).
_BLOCK_ELEMENTS = 2_000_000

# |difference| limits for "negligible", "small", "moderate" on the AUC scale: common practice, no source.
AUC_SIZE_LIMITS = (0.01, 0.03, 0.06)


def auc(y_true, score, sample_weight=None) -> float:
    """Area under the ROC curve, ties counted 1/2 (midranks).

    Equal to :func:`sklearn.metrics.roc_auc_score`, including with ``sample_weight``
    (non-negative; an integer weight ``k`` is the same as repeating the row ``k`` times).
    ``y_true`` holds two labels, the greater one positive; ``score`` is finite, higher
    meaning more likely positive.

    Examples
    --------
    >>> auc([0, 0, 1, 1], [0.1, 0.4, 0.35, 0.8])
    0.75
    """
    where = "auc"
    y, s = check_binary(y_true, where), check_scores(score, where, "score")
    w = check_weights(sample_weight, check_same_length(where, y_true=y, score=s), where)
    distinct, ties = check_codes(s, where, "score")
    pos = np.bincount(ties, weights=w * y, minlength=len(distinct))
    neg = np.bincount(ties, weights=w * ~y, minlength=len(distinct))
    if pos.sum() <= 0 or neg.sum() <= 0:
        raise EvaluationError(f"{where}: one class has zero total 'sample_weight'; both classes must weigh > 0.")
    # A positive beats the negatives scored lower and ties (1/2) those at its score: midrank AUC.
    below = np.cumsum(neg) - neg
    return float(pos @ (below + 0.5 * neg) / (pos.sum() * neg.sum()))


@dataclass(frozen=True)
class DeLongResult:
    """Paired DeLong test of two AUCs (two-sided); ``difference = auc_a - auc_b`` with its CI."""

    auc_a: float
    auc_b: float
    difference: float
    se: float
    z: float
    p_value: float
    ci_low: float
    ci_high: float


def delong_covariance(y_true, scores) -> tuple[np.ndarray, np.ndarray]:
    """AUCs of several scores and DeLong's covariance matrix of them.

    Fast midrank algorithm of Sun & Xu (2014, IEEE Signal Processing Letters 21:1389),
    which gives exactly DeLong, DeLong & Clarke-Pearson (1988, Biometrics 44:837) in
    O(k n log n) instead of O(k m n).  ``scores`` is (k, n) or (n,), one row per detector;
    ``y_true`` needs two rows of each class.  Returns ``aucs`` (k,) and the (k, k)
    covariance ``S10 / m + S01 / n`` of the placement values (``ddof=1``).

    Examples
    --------
    >>> aucs, cov = delong_covariance([0, 0, 1, 1], [[0.1, 0.4, 0.35, 0.8]])
    >>> float(aucs[0])
    0.75
    """
    where = "delong_covariance"
    y = check_binary(y_true, where)
    s = np.atleast_2d(np.asarray(scores))
    if s.ndim != 2 or s.shape[1] != len(y):
        raise EvaluationError(f"{where}: 'scores' must have shape (k, {len(y)}); got {np.shape(scores)}.")
    s = np.vstack([check_scores(row, where, "scores") for row in s])
    m, n = int(y.sum()), int((~y).sum())
    if m < 2 or n < 2:
        raise EvaluationError(f"{where}: needs at least 2 positives and 2 negatives; got {m} and {n}.")
    pos, neg = s[:, y], s[:, ~y]
    rank_all = sps.rankdata(np.hstack([pos, neg]), axis=1)
    # Placement values: V10 = share of negatives a positive beats, V01 = share of positives a negative loses to.
    v10 = (rank_all[:, :m] - sps.rankdata(pos, axis=1)) / n
    v01 = 1.0 - (rank_all[:, m:] - sps.rankdata(neg, axis=1)) / m
    return v10.mean(axis=1), _cov_rows(v10) / m + _cov_rows(v01) / n


def _cov_rows(v: np.ndarray) -> np.ndarray:
    centred = v - v.mean(axis=1, keepdims=True)
    return centred @ centred.T / (v.shape[1] - 1)


def _degenerate(estimate: float) -> tuple[float, float]:
    """Statistic and p for a zero SE: 0 and 1 for a zero estimate, else +-inf and 0."""
    return (0.0, 1.0) if estimate == 0 else (float(np.copysign(np.inf, estimate)), 0.0)


def delong_test(y_true, score_a, score_b, alpha: float = 0.05) -> DeLongResult:
    """Paired DeLong test that two scores on the same rows have equal AUC.

    The CI is ``difference +- z_(1 - alpha/2) * se``.  When the SE of the difference is 0
    (e.g. identical scores), ``z = 0, p = 1`` if the difference is 0, else ``z = +-inf, p = 0``.

    Examples
    --------
    >>> r = delong_test([0, 0, 0, 1, 1, 1], [1, 2, 3, 4, 5, 6], [1, 5, 3, 4, 2, 6])
    >>> round(r.difference, 4)
    0.3333
    """
    where = "delong_test"
    a, b = check_scores(score_a, where, "score_a"), check_scores(score_b, where, "score_b")
    check_same_length(where, y_true=np.asarray(y_true), score_a=a, score_b=b)
    level = check_alpha(alpha, where)
    aucs, cov = delong_covariance(y_true, np.vstack([a, b]))
    diff = float(aucs[0] - aucs[1])
    se = float(np.sqrt(max(cov[0, 0] + cov[1, 1] - 2.0 * cov[0, 1], 0.0)))
    z, p = (diff / se, float(2.0 * sps.norm.sf(abs(diff / se)))) if se > 0 else _degenerate(diff)
    half = float(sps.norm.ppf(1.0 - level / 2.0)) * se
    return DeLongResult(float(aucs[0]), float(aucs[1]), diff, se, z, p, diff - half, diff + half)


def hanley_mcneil_se(auc: float, n_pos: int, n_neg: int) -> float:
    """Standard error of an AUC by Hanley & McNeil (1982, Radiology 143:29).

    ``SE^2 = [A(1-A) + (n_pos-1)(Q1-A^2) + (n_neg-1)(Q2-A^2)] / (n_pos n_neg)`` with
    ``Q1 = A/(2-A)`` and ``Q2 = 2A^2/(1+A)`` (exponential-model approximation).

    Examples
    --------
    >>> round(hanley_mcneil_se(0.893171, 51, 58), 4)
    0.0325
    """
    where = "hanley_mcneil_se"
    if isinstance(auc, bool) or not isinstance(auc, (int, float, np.number)) or not 0.0 <= auc <= 1.0:
        raise EvaluationError(f"{where}: 'auc' must be a number in [0, 1]; got {auc!r}.")
    check_positive_number(n_pos, where, "n_pos", integer=True)
    check_positive_number(n_neg, where, "n_neg", integer=True)
    a = float(auc)
    q1, q2 = a / (2.0 - a), 2.0 * a * a / (1.0 + a)
    var = (a * (1 - a) + (n_pos - 1) * (q1 - a * a) + (n_neg - 1) * (q2 - a * a)) / (n_pos * n_neg)
    return float(np.sqrt(max(var, 0.0)))


def kappa_from_table(table) -> tuple[float, float]:
    """Cohen's kappa and its asymptotic standard error from a square agreement table.

    The SE is the large-sample SE *not* assuming kappa = 0 (for confidence intervals), by
    Fleiss, Cohen & Everitt (1969, Psychological Bulletin 72:323)::

        var = [sum_i p_ii (1 - (p_i. + p_.i)(1 - k))^2
               + (1 - k)^2 sum_(i!=j) p_ij (p_.i + p_j.)^2
               - (k - p_e (1 - k))^2] / (N (1 - p_e)^2)

    ``table`` holds counts, rows the first rater (truth), columns the second (prediction).
    Both values are NaN (with a :class:`~rulefeat.errors.RulefeatWarning`) when chance
    agreement is 1, i.e. both raters used one and the same category: kappa is 0/0 there.

    Examples
    --------
    >>> k, se = kappa_from_table([[20, 5], [10, 15]])
    >>> round(k, 2)
    0.4
    """
    where = "kappa_from_table"
    t = np.asarray(table, dtype=float)
    if t.ndim != 2 or t.shape[0] != t.shape[1] or t.shape[0] < 1:
        raise EvaluationError(f"{where}: 'table' must be a square 2-D array of counts; got shape {t.shape}.")
    if not np.isfinite(t).all() or (t < 0).any() or t.sum() <= 0:
        raise EvaluationError(f"{where}: 'table' must hold finite non-negative counts with a positive total.")
    total = t.sum()
    p = t / total
    rows, cols = p.sum(axis=1), p.sum(axis=0)
    p_o, p_e = np.trace(p), float(rows @ cols)
    if np.isclose(p_e, 1.0, rtol=0.0, atol=1e-15):
        warnings.warn(f"{where}: kappa is undefined (both raters used a single category); returning NaN.",
                      RulefeatWarning, stacklevel=2)
        return float("nan"), float("nan")
    kappa = (p_o - p_e) / (1.0 - p_e)
    diag = np.diag(p) * (1.0 - (rows + cols) * (1.0 - kappa)) ** 2
    spread = p * (cols[:, None] + rows[None, :]) ** 2
    off = (1.0 - kappa) ** 2 * (spread.sum() - np.trace(spread))
    var = (diag.sum() + off - (kappa - p_e * (1.0 - kappa)) ** 2) / (total * (1.0 - p_e) ** 2)
    return float(kappa), float(np.sqrt(max(var, 0.0)))


def cohen_kappa(y_true, y_pred) -> float:
    """Cohen's (1960) kappa between two label vectors; equal to sklearn's ``cohen_kappa_score``.

    Returns NaN (with a warning) when both vectors use one and the same single label.

    Examples
    --------
    >>> round(cohen_kappa([0, 0, 1, 1, 1], [0, 1, 1, 1, 1]), 4)
    0.5455
    """
    where = "cohen_kappa"
    a, b = check_vector(y_true, where, "y_true"), check_vector(y_pred, where, "y_pred")
    n = check_same_length(where, y_true=a, y_pred=b)
    labels, codes = check_codes(np.concatenate([a, b]), where, "y_true/y_pred")
    c = len(labels)
    table = np.bincount(codes[:n] * c + codes[n:], minlength=c * c).reshape(c, c)
    return kappa_from_table(table)[0]


def best_kappa_threshold(y_true, score) -> float:
    """The threshold that maximises Cohen's kappa of ``score >= threshold`` against ``y_true``.

    Candidates are the distinct scores; all are evaluated at once from cumulative counts,
    with kappa computed exactly from integer cell counts.  Among equally good thresholds
    the lowest is returned.  Fit it on training-fold data only and apply it as
    "predict positive when score >= threshold".

    Examples
    --------
    >>> best_kappa_threshold([0, 0, 1, 0, 1, 1], [0.1, 0.2, 0.3, 0.4, 0.5, 0.6])  # 0.3 and 0.5 tie
    0.3
    """
    where = "best_kappa_threshold"
    y, s = check_binary(y_true, where), check_scores(score, where, "score")
    check_same_length(where, y_true=y, score=s)
    distinct, ties = check_codes(s, where, "score")
    # Predicted positive at candidate k = rows with score >= distinct[k]: reverse cumulative counts.
    tp = np.cumsum(np.bincount(ties[y], minlength=len(distinct))[::-1])[::-1]
    fp = np.cumsum(np.bincount(ties[~y], minlength=len(distinct))[::-1])[::-1]
    fn, tn = tp[0] - tp, fp[0] - fp
    # 2x2 kappa = 2(TP.TN - FN.FP) / ((TP+FP)(FP+TN) + (TP+FN)(FN+TN)); integer parts are exact and
    # the division is correctly rounded, so equal kappas compare equal and argmax picks the lowest.
    num = 2 * (tp * tn - fn * fp)
    den = (tp + fp) * (fp + tn) + (tp + fn) * (fn + tn)
    return float(distinct[int(np.argmax(num / den))])


@dataclass(frozen=True)
class TTestResult:
    """One-sample t-test of the mean fold difference (two-sided, ``1 - alpha`` CI)."""

    mean: float
    t: float
    df: int
    p_value: float
    ci_low: float
    ci_high: float
    se: float


def _t_test(differences, variance_factor: Callable[[int], float], alpha: float, where: str) -> TTestResult:
    """t-test with ``se = sqrt(factor(J) * var(d, ddof=1))``; equal differences give se = 0."""
    d = check_scores(differences, where, "differences")
    if len(d) < 2:
        raise EvaluationError(f"{where}: needs at least 2 fold differences to estimate a variance; got {len(d)}.")
    alpha = check_alpha(alpha, where)
    mean, df = float(d.mean()), len(d) - 1
    se = 0.0 if np.ptp(d) == 0 else float(np.sqrt(variance_factor(len(d)) * d.var(ddof=1)))
    t, p = (mean / se, float(2.0 * sps.t.sf(abs(mean / se), df))) if se > 0 else _degenerate(mean)
    half = float(sps.t.ppf(1.0 - alpha / 2.0, df)) * se
    return TTestResult(mean, float(t), df, p, mean - half, mean + half, se)


def corrected_resampled_ttest(differences, n_train: float, n_test: float, alpha: float = 0.05) -> TTestResult:
    """Corrected resampled t-test of repeated cross-validation differences.

    Nadeau & Bengio (2003, Machine Learning 52:239) corrected variance, used for repeated
    k-fold CV by Bouckaert & Frank (2004, PAKDD): ``t = mean(d) / sqrt((1/J + n_test/n_train)
    var(d))`` with ``df = J - 1``, where ``J`` is the number of folds times repeats.  Folds
    overlap in training data, so the plain t-test (:func:`naive_ttest`) is too optimistic.
    ``n_train``/``n_test`` are a fold's sizes (means if they vary; students when grouped).
    When all J >= 2 differences are equal, ``se = 0`` and ``t = 0, p = 1`` if they are 0,
    otherwise ``t = +-inf, p = 0``; the CI uses the t quantile with ``df``.

    Examples
    --------
    >>> d = [.02, .01, .03, 0, .04, .02, .01, .03, .02, .02]
    >>> round(corrected_resampled_ttest(d, 80, 20).t, 4)
    2.9277
    """
    where = "corrected_resampled_ttest"
    check_positive_number(n_train, where, "n_train")
    check_positive_number(n_test, where, "n_test")
    return _t_test(differences, lambda j: 1.0 / j + float(n_test) / float(n_train), alpha, where)


def naive_ttest(differences, alpha: float = 0.05) -> TTestResult:
    """Plain one-sample t-test of fold differences (``se = sd / sqrt(J)``), for comparison only.

    Examples
    --------
    >>> d = [.02, .01, .03, 0, .04, .02, .01, .03, .02, .02]
    >>> round(naive_ttest(d).t, 4)
    5.4772
    """
    return _t_test(differences, lambda j: 1.0 / j, alpha, "naive_ttest")


@dataclass(frozen=True)
class BootstrapResult:
    """Group bootstrap of a metric difference; ``replicates`` holds the ``n_valid`` usable ones."""

    estimate: float
    ci_low: float
    ci_high: float
    n_boot: int
    n_valid: int
    replicates: np.ndarray


def bootstrap_setup(groups, n: int, n_boot: int, alpha: float, random_state, where: str):
    """Validate the bootstrap arguments; return group codes, group count, n_boot, alpha, rng."""
    g = check_vector(groups, where, "groups")
    if len(g) != n:
        raise EvaluationError(f"{where}: 'groups' has length {len(g)}; expected {n}.")
    labels, codes = check_codes(g, where, "groups")
    if len(labels) < 2:
        raise EvaluationError(f"{where}: needs at least 2 groups (students) to resample; got {len(labels)}.")
    check_positive_number(n_boot, where, "n_boot", integer=True)
    try:
        rng = np.random.default_rng(random_state)
    except (TypeError, ValueError) as exc:
        raise EvaluationError(f"{where}: 'random_state' must be None, an int or a numpy Generator; "
                              f"got {random_state!r}.") from exc
    return codes, len(labels), int(n_boot), check_alpha(alpha, where), rng


def bootstrap_counts(n_groups: int, n_boot: int, rng: np.random.Generator, n_rows: int):
    """Yield blocks of (replicates, n_groups) multiplicities; each replicate draws n_groups groups.

    The block size depends only on the data's shape, so a seed always gives the same replicates.
    """
    block = max(1, min(n_boot, _BLOCK_ELEMENTS // max(n_groups, n_rows)))
    for start in range(0, n_boot, block):
        size = min(block, n_boot - start)
        draws = rng.integers(0, n_groups, size=(size, n_groups))
        flat = (draws + n_groups * np.arange(size)[:, None]).ravel()
        yield np.bincount(flat, minlength=size * n_groups).reshape(size, n_groups)


def _cell_plan(score: np.ndarray, y: np.ndarray, codes: np.ndarray, n_groups: int) -> tuple:
    """Merge rows into (score, group) cells, in score order, for :func:`_block_auc`.

    Returns the group and count of every cell holding negatives and of every cell holding
    positives, plus, for each positive cell, how many negative cells lie strictly below its
    score (``lo``) and at or below it (``hi``).
    """
    ties = check_codes(score, "grouped_bootstrap_auc_difference", "score")[1]
    cells, cell_of_row = check_codes(ties.astype(np.int64) * n_groups + codes, "bootstrap", "cells")
    plan = []
    for rows in (~y, y):
        count = np.bincount(cell_of_row[rows], minlength=len(cells))
        used = np.flatnonzero(count)
        plan.append((cells[used] // n_groups, cells[used] % n_groups, count[used]))
    (neg_tie, neg_group, neg_count), (pos_tie, pos_group, pos_count) = plan
    lo, hi = np.searchsorted(neg_tie, pos_tie, side="left"), np.searchsorted(neg_tie, pos_tie, side="right")
    return neg_group, neg_count, pos_group, pos_count, lo, hi


def _block_auc(counts: np.ndarray, plan: tuple) -> np.ndarray:
    """Midrank AUC of every replicate in a block of group multiplicities, in exact integers."""
    neg_group, neg_count, pos_group, pos_count, lo, hi = plan
    below = np.zeros((len(counts), len(neg_group) + 1), dtype=np.int64)
    np.cumsum(np.take(counts, neg_group, axis=1) * neg_count, axis=1, out=below[:, 1:])
    pos_weight = np.take(counts, pos_group, axis=1) * pos_count
    # Negatives strictly below a positive plus those at or below it = twice (below + half the tied).
    twice_wins = np.einsum("bk,bk->b", pos_weight, np.take(below, lo, axis=1) + np.take(below, hi, axis=1))
    pairs = pos_weight.sum(axis=1) * below[:, -1]
    return np.where(pairs > 0, twice_wins / (2.0 * np.maximum(pairs, 1)), np.nan)


def _percentile_result(estimate, replicates, n_boot, alpha, where) -> BootstrapResult:
    valid = replicates[np.isfinite(replicates)]
    if len(valid) == 0:
        raise EvaluationError(f"{where}: no bootstrap replicate contained every class; use more groups "
                              "(students) or check that positives are not confined to one group.")
    low, high = np.quantile(valid, [alpha / 2.0, 1.0 - alpha / 2.0])
    return BootstrapResult(float(estimate), float(low), float(high), n_boot, len(valid), valid)


def grouped_bootstrap_auc_difference(y_true, score_a, score_b, groups, n_boot: int = 1000,
                                     alpha: float = 0.05, random_state=None) -> BootstrapResult:
    """Percentile bootstrap CI of ``AUC(a) - AUC(b)``, resampling groups (students).

    Each replicate draws as many groups as there are, with replacement; every row is
    weighted by its group's multiplicity, so a student's rows stay together.  This is the
    fast path: rows are merged into (score, student) cells once; a block of replicates is a
    (block, students) multiplicity matrix spread onto the cells, and one cumulative sum
    over the score-ordered cells gives the midrank AUC of every replicate at once, in exact
    integer arithmetic.  For other metrics use :func:`grouped_bootstrap_metric_difference`.

    ``groups`` gives each row's student (at least 2).  ``estimate`` is the difference on the
    original rows; the CI is the ``alpha/2`` and ``1 - alpha/2`` quantiles (numpy's linear
    interpolation) of the valid replicates.  ``random_state``: None, int or Generator.

    Examples
    --------
    >>> r = grouped_bootstrap_auc_difference([0, 1, 0, 1, 0, 1], [1, 2, 1, 3, 2, 3],
    ...                                      [2, 1, 1, 3, 3, 2], [1, 1, 2, 2, 3, 3],
    ...                                      n_boot=200, random_state=0)
    >>> r.n_boot, round(r.estimate, 4)
    (200, 0.4444)
    """
    where = "grouped_bootstrap_auc_difference"
    a, b = check_scores(score_a, where, "score_a"), check_scores(score_b, where, "score_b")
    y = check_binary(y_true, where)
    n = check_same_length(where, y_true=y, score_a=a, score_b=b)
    codes, n_groups, n_boot, alpha, rng = bootstrap_setup(groups, n, n_boot, alpha, random_state, where)
    plans = [_cell_plan(s, y, codes, n_groups) for s in (a, b)]
    blocks = [_block_auc(counts, plans[0]) - _block_auc(counts, plans[1])
              for counts in bootstrap_counts(n_groups, n_boot, rng, n)]
    return _percentile_result(auc(y, a) - auc(y, b), np.concatenate(blocks), n_boot, alpha, where)


def grouped_bootstrap_metric_difference(y_true, pred_a, pred_b, groups, metric: Callable[..., float],
                                        n_boot: int = 1000, alpha: float = 0.05,
                                        random_state=None) -> BootstrapResult:
    """Percentile bootstrap CI of ``metric(a) - metric(b)`` for any metric, resampling groups.

    Draws exactly the same replicates as :func:`grouped_bootstrap_auc_difference` for the
    same ``random_state``, but calls ``metric(y, pred, sample_weight=w)`` once per replicate
    and detector (a Python loop; use the AUC function when the metric is AUC).  Only rows
    with positive weight are passed.  A replicate is dropped when a label of ``y_true`` is
    absent from it or the metric returns a non-finite value.  ``pred_a``/``pred_b`` may be
    (n,) or (n, c) (labels, scores or probability columns); ``metric`` is e.g. a
    scikit-learn metric.

    Examples
    --------
    >>> from sklearn.metrics import accuracy_score
    >>> r = grouped_bootstrap_metric_difference([0, 1, 0, 1], [0, 1, 0, 0], [0, 0, 0, 0],
    ...                                         [1, 1, 2, 2], accuracy_score, n_boot=50, random_state=0)
    >>> r.estimate
    0.25
    """
    where = "grouped_bootstrap_metric_difference"
    if not callable(metric):
        raise EvaluationError(f"{where}: 'metric' must be callable as metric(y, pred, sample_weight=w); got {metric!r}.")
    y = check_vector(y_true, where, "y_true")
    a, b = np.asarray(pred_a), np.asarray(pred_b)
    n = check_same_length(where, y_true=y, pred_a=a, pred_b=b)
    codes, n_groups, n_boot, alpha, rng = bootstrap_setup(groups, n, n_boot, alpha, random_state, where)
    labels, label_codes = check_codes(y, where, "y_true")

    def difference(w: np.ndarray) -> float:
        keep = w > 0
        if np.unique(label_codes[keep]).size < len(labels):
            return float("nan")
        try:
            values = [float(metric(y[keep], p[keep], sample_weight=w[keep])) for p in (a, b)]
        except Exception as exc:
            raise EvaluationError(f"{where}: metric {metric!r} failed: {exc}") from exc
        return values[0] - values[1]

    reps = [difference(row[codes].astype(float))
            for counts in bootstrap_counts(n_groups, n_boot, rng, n) for row in counts]
    return _percentile_result(difference(np.ones(n)), np.asarray(reps, dtype=float), n_boot, alpha, where)


def holm(p_values) -> np.ndarray:
    """Holm (1979, Scandinavian Journal of Statistics 6:65) step-down adjusted p-values.

    Equal to ``statsmodels.stats.multitest.multipletests(p, method='holm')[1]``.  NaNs are
    passed through and not counted among the tests; the shape is kept.

    Examples
    --------
    >>> holm([0.01, 0.04, 0.03]).round(2).tolist()
    [0.03, 0.06, 0.06]
    """
    p = np.asarray(p_values, dtype=float)
    flat = p.ravel()
    present = ~np.isnan(flat)
    values = flat[present]
    if ((values < 0) | (values > 1)).any():
        raise EvaluationError(f"holm: p-values must lie in [0, 1]; got {values[(values < 0) | (values > 1)]!r}.")
    order = np.argsort(values, kind="stable")
    m = len(values)
    adjusted = np.empty(m)
    adjusted[order] = np.minimum(np.maximum.accumulate((m - np.arange(m)) * values[order]), 1.0)
    out = np.full(flat.shape, np.nan)
    out[present] = adjusted
    return out.reshape(p.shape)


def _size_word(magnitude: float, limits: tuple[float, float, float]) -> str:
    for word, limit in zip(("negligible", "small", "moderate"), limits, strict=True):
        if magnitude < limit:
            return word
    return "large"


def _p_text(p_value: float | None, where: str, prefix: str = "") -> str:
    if p_value is None or np.isnan(p_value):
        return ""
    if not 0 <= p_value <= 1:
        raise EvaluationError(f"{where}: 'p_value' must be in [0, 1] or None; got {p_value!r}.")
    return f"; {prefix}p < 0.001" if p_value < 0.001 else f"; {prefix}p = {p_value:.3f}"


def describe_effect(delta: float, ci_low: float, ci_high: float, p_value: float | None,
                    metric: str = "AUC", *, ci_level: float = 0.95, subject: str = "Adding the rules",
                    higher_is_better: bool = True,
                    size_limits: tuple[float, float, float] = AUC_SIZE_LIMITS, one_sided: bool = False) -> str:
    """One plain-English sentence describing a metric difference and its uncertainty.

    When the interval covers 0 the sentence says there is "no clear evidence of a
    difference"; otherwise it names the size of ``|delta|`` — below ``size_limits``
    (default 0.01 / 0.03 / 0.06 on the AUC scale, common practice, no source) it is
    negligible / small / moderate, else large — and the direction (improvement or decline).
    ``p_value`` is shown as ``p = 0.004`` or ``p < 0.001`` and omitted when None or NaN.
    Set ``higher_is_better=False`` for losses (log loss, Brier score) so that a decrease is
    an improvement; ``ci_level`` only labels the interval.  ``one_sided=True`` labels the
    p-value as one-sided (H1: an improvement) and, when the interval lies wholly on the side
    of a decline, says there is no evidence of an improvement (a one-sided test cannot show a
    decline); pair it with the ``1 - 2 alpha`` interval so that the verdict and ``p < alpha``
    always agree.

    Examples
    --------
    >>> describe_effect(0.021, 0.004, 0.038, 0.012)
    'Adding the rules changed AUC by +0.021 (95% CI +0.004 to +0.038; p = 0.012): a small improvement.'
    >>> describe_effect(-0.004, -0.019, 0.011, 0.6)
    'Adding the rules changed AUC by -0.004 (95% CI -0.019 to +0.011; p = 0.600): no clear evidence of a difference.'
    >>> describe_effect(0.05, 0.03, 0.07, 0.0004, ci_level=0.9, one_sided=True)
    'Adding the rules changed AUC by +0.050 (90% CI +0.030 to +0.070; one-sided p < 0.001): a moderate improvement.'
    """
    where = "describe_effect"
    if not np.isfinite([delta, ci_low, ci_high]).all() or ci_low > ci_high:
        raise EvaluationError(f"{where}: needs finite delta and ci_low <= ci_high; "
                              f"got delta={delta!r}, CI [{ci_low!r}, {ci_high!r}].")
    if not 0 < ci_level < 1:
        raise EvaluationError(f"{where}: 'ci_level' must be in (0, 1); got {ci_level!r}.")
    if len(size_limits) != 3 or list(size_limits) != sorted(size_limits):
        raise EvaluationError(f"{where}: 'size_limits' must be 3 increasing numbers; got {size_limits!r}.")
    p_text = _p_text(p_value, where, "one-sided " if one_sided else "")
    interval = f"{ci_level * 100:g}% CI {ci_low:+.3f} to {ci_high:+.3f}{p_text}"
    head = f"{subject} changed {metric} by {delta:+.3f} ({interval})"
    if ci_low <= 0 <= ci_high:
        return f"{head}: no clear evidence of {'an improvement' if one_sided else 'a difference'}."
    better = (ci_low > 0) == higher_is_better
    if one_sided and not better:
        return f"{head}: no evidence of an improvement (the interval lies on the side of a decline)."
    return f"{head}: a {_size_word(abs(delta), size_limits)} {'improvement' if better else 'decline'}."
