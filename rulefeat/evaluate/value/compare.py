"""Paired comparisons of two variants: Δ with one corrected-t interval and p, a student-bootstrap column, DeLong.

How each number is made (also written into every evaluation's notes):

* The headline procedure is the corrected repeated cross-validation t (Nadeau & Bengio 2003, Machine Learning
  52:239; applied to r x k folds by Bouckaert & Frank 2004, PAKDD).  ``delta`` is the mean over all r x k folds of
  ``metric(variant) - metric(baseline)`` on the fold's test students, ``se`` its corrected standard error
  ``sqrt((1/(r k) + n_test/n_train) var(d))`` and ``t = delta / se`` with ``r k - 1`` degrees of freedom.  The
  interval and ``p_value`` come from that one t: with ``alternative="greater"`` the test is one-sided (H1 "the
  variant is better than the baseline": Δ > 0 where higher is better — AUC, kappa, average precision, R² — and
  Δ < 0 for log loss, Brier, RMSE) and the interval is the two-sided ``1 - 2 alpha`` one (90 % at alpha 0.05),
  whose bound on the side of H1 is the one-sided ``1 - alpha`` bound; with ``"two-sided"`` it is the
  ``1 - alpha`` interval and the two-sided p.  So the interval lies wholly on the side of H1 exactly when
  ``p_value < alpha`` (``ci_level`` records the level).  The corrected variance widens the naive one for the
  overlap of training sets, so the interval allows for the choice of training students as well as the test
  students.  What it estimates is the expected Δ of detectors trained on training sets of the folds' size, not
  the accuracy of the one detector fitted on every student.
* ``p_naive`` is the plain t-test of the same differences (too optimistic: training sets overlap), for comparison.
* Secondary column: ``pooled_delta`` is the difference on the pooled out-of-fold predictions of repeat 0 (every
  unit predicted once, by a model that never saw its student) and ``boot_ci_low`` / ``boot_ci_high`` its 95 %
  percentile interval over bootstrap replicates that resample *students* with replacement (a student's units
  stay together).  It holds the trained models fixed, so it ignores training-set variability and is narrower
  than it should be; it is kept, labelled, for comparison.  AUC takes the fast vectorised path of
  :func:`~rulefeat.stats.inference.grouped_bootstrap_auc_difference`; metrics that are sums over rows (kappa's
  confusion counts, log loss, Brier, R², RMSE) are bootstrapped here from per-student sums times a matrix of
  student multiplicities, and average precision from per-student tallies of each distinct score like the AUC
  path — all vectorised over blocks of replicates.  Replicates without both classes (classification) or with a
  constant target (R²) are dropped.
* ``delong_z`` / ``delong_p`` (AUC only): DeLong's paired test on the pooled predictions of repeat 0, with the same
  alternative.  It treats units as independent, which they are not within a student.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse
from scipy import stats as sps

from ...errors import EvaluationError
from ...stats import inference as stats
from ..metrics import LOG_LOSS_EPS, METRICS, weighted_average_precision

__all__ = ["Pooled", "paired_test", "bootstrap_delta", "comparison", "per_rule_rows", "effect_sentence",
           "estimand_sentence", "interval_level", "ALPHA", "CI_METHOD", "RELATIVE_SIZE_LIMITS"]

ALPHA = 0.05
CI_METHOD = "corrected repeated cross-validation t (Nadeau & Bengio 2003) over every fold and repeat"
# Size words for losses are relative to the baseline's value: 1 %, 3 %, 6 % of it.  Our convention, no source.
RELATIVE_SIZE_LIMITS = (0.01, 0.03, 0.06)
_BLOCK_ELEMENTS = 4_000_000


@dataclass(frozen=True, eq=False)
class Pooled:
    """Pooled out-of-fold predictions of one repeat: truth, student codes, predictions and kappa thresholds."""

    y: np.ndarray
    groups: np.ndarray
    preds: dict
    thresholds: dict

    def labels(self, variant: str) -> np.ndarray:
        return self.preds[variant] >= self.thresholds[variant]


def directional_p(t: float, df: float, two_sided: float, higher_is_better: bool, alternative: str) -> float:
    """p-value of a t (or z, ``df=inf``) statistic for the chosen alternative ("greater" = variant better)."""
    if np.isnan(t):
        return float("nan")
    if alternative == "two-sided":
        return float(two_sided)
    if t == 0 and two_sided == 1.0:  # every difference exactly 0: no evidence either way
        return 1.0
    if np.isinf(df):
        return float(sps.norm.sf(t) if higher_is_better else sps.norm.cdf(t))
    return float(sps.t.sf(t, df) if higher_is_better else sps.t.cdf(t, df))


def interval_level(alternative: str) -> float:
    """Level of the headline interval: ``1 - 2 alpha`` for a one-sided test, ``1 - alpha`` for a two-sided one."""
    return 1.0 - 2.0 * ALPHA if alternative == "greater" else 1.0 - ALPHA


def paired_test(d: np.ndarray, n_train: float, n_test: float, higher_is_better: bool,
                alternative: str) -> dict:
    """The headline procedure on per-fold differences (NaN folds dropped): corrected t, its interval and p.

    Returns ``mean``, ``se``, ``ci_low``, ``ci_high`` (at :func:`interval_level`), ``t``, ``df``, ``p_value`` and
    the naive t-test's ``p_naive``; every value NaN when fewer than 2 folds are usable.
    """
    d = np.asarray(d, dtype=float)
    d = d[~np.isnan(d)]
    nan = float("nan")
    if len(d) < 2 or not n_train > 0 or not n_test > 0:
        return {"mean": float(d.mean()) if len(d) else nan, "se": nan, "ci_low": nan, "ci_high": nan, "t": nan,
                "df": max(len(d) - 1, 0), "p_value": nan, "p_naive": nan}
    level = interval_level(alternative)
    corrected = stats.corrected_resampled_ttest(d, n_train, n_test, alpha=1.0 - level)
    naive = stats.naive_ttest(d)
    return {
        "mean": corrected.mean, "se": corrected.se, "ci_low": corrected.ci_low, "ci_high": corrected.ci_high,
        "t": corrected.t,
        "df": int(corrected.df),
        "p_value": directional_p(corrected.t, corrected.df, corrected.p_value, higher_is_better, alternative),
        "p_naive": directional_p(naive.t, naive.df, naive.p_value, higher_is_better, alternative),
    }


def _multiplicities(n_groups: int, n_boot: int, rng: np.random.Generator, n_rows: int = 0):
    """Blocks of (replicates, groups) counts: each replicate draws n_groups students with replacement.

    Blocks hold at most ~4M numbers of (replicates x max(groups, rows)), whatever ``n_boot``.
    """
    block = max(1, min(n_boot, _BLOCK_ELEMENTS // max(n_groups, n_rows, 1)))
    for start in range(0, n_boot, block):
        size = min(block, n_boot - start)
        draws = rng.integers(0, n_groups, size=(size, n_groups))
        flat = (draws + n_groups * np.arange(size)[:, None]).ravel()
        yield np.bincount(flat, minlength=size * n_groups).reshape(size, n_groups).astype(float)


def _sums(groups: np.ndarray, n_groups: int, columns: dict) -> dict:
    return {k: np.bincount(groups, weights=np.asarray(v, dtype=float), minlength=n_groups)
            for k, v in columns.items()}


def _row_statistics(metric: str, y, pred, labels) -> dict:
    """Per-row quantities whose per-student sums determine the metric."""
    if metric == "kappa":
        y, lab = y.astype(bool), labels.astype(bool)
        return {"tp": y & lab, "fp": ~y & lab, "fn": y & ~lab, "tn": ~y & ~lab}
    if metric in ("log_loss", "brier"):
        if metric == "brier":
            per_row = (pred - y) ** 2
        else:
            p = np.clip(pred, LOG_LOSS_EPS, 1 - LOG_LOSS_EPS)
            per_row = -np.where(y.astype(bool), np.log(p), np.log1p(-p))
        return {"loss": per_row, "n": np.ones(len(y)), "pos": y.astype(bool), "neg": ~y.astype(bool)}
    return {"res": (y - pred) ** 2, "y": y, "yy": y * y, "n": np.ones(len(y))}  # r2, rmse


def _from_sums(metric: str, s: dict) -> np.ndarray:
    """Metric value per replicate from replicate sums (NaN where undefined)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        if metric == "kappa":
            tp, fp, fn, tn = s["tp"], s["fp"], s["fn"], s["tn"]
            den = (tp + fp) * (fp + tn) + (tp + fn) * (fn + tn)
            return np.where(den > 0, 2.0 * (tp * tn - fn * fp) / den, np.nan)
        if metric in ("log_loss", "brier"):
            ok = (s["pos"] > 0) & (s["neg"] > 0)
            return np.where(ok, s["loss"] / s["n"], np.nan)
        if metric == "rmse":
            return np.sqrt(s["res"] / s["n"])
        total = s["yy"] - s["y"] ** 2 / s["n"]
        return np.where(total > 1e-12 * np.maximum(s["yy"], 1.0), 1.0 - s["res"] / total, np.nan)


def _summed_bootstrap(metric, y, groups, a, b, n_boot, rng) -> tuple[float, np.ndarray]:
    """Bootstrap a sum-decomposable metric's difference via per-student sums (exact, vectorised)."""
    _, codes = np.unique(groups, return_inverse=True)
    n_groups = int(codes.max()) + 1
    stats_a = _sums(codes, n_groups, _row_statistics(metric, y, *a))
    stats_b = _sums(codes, n_groups, _row_statistics(metric, y, *b))
    full = {k: np.array([v.sum()]) for k, v in stats_a.items()}, {k: np.array([v.sum()]) for k, v in stats_b.items()}
    estimate = float(_from_sums(metric, full[0])[0] - _from_sums(metric, full[1])[0])
    reps = []
    for counts in _multiplicities(n_groups, n_boot, rng):
        va = _from_sums(metric, {k: counts @ v for k, v in stats_a.items()})
        vb = _from_sums(metric, {k: counts @ v for k, v in stats_b.items()})
        reps.append(va - vb)
    return estimate, np.concatenate(reps)


def _ap_from_tallies(pos: np.ndarray, neg: np.ndarray) -> np.ndarray:
    """Average precision per column from positive / negative weights per distinct score (rows ascending)."""
    tp, fp = np.cumsum(pos[::-1], axis=0), np.cumsum(neg[::-1], axis=0)  # thresholds from high to low
    with np.errstate(invalid="ignore", divide="ignore"):
        precision = np.where(tp + fp > 0, tp / (tp + fp), 0.0)
        gain = np.diff(tp / tp[-1:], axis=0, prepend=0.0)
        return np.where(tp[-1] > 0, np.sum(gain * precision, axis=0), np.nan)


def _ap_bootstrap(y, groups, a, b, n_boot, rng) -> tuple[float, np.ndarray]:
    """Average precision's difference over student-bootstrap replicates.

    Like the fast AUC path: per (distinct score, student) tallies of positives and negatives, times the
    (students x replicates) multiplicities, give every replicate's weights per distinct score at once.
    """
    _, codes = np.unique(groups, return_inverse=True)
    n_groups = int(codes.max()) + 1
    yb = y.astype(bool)
    tallies = []
    for score in (a, b):
        distinct, ties = np.unique(score, return_inverse=True)
        shape = (len(distinct), n_groups)
        tallies.append([sparse.csr_array((cls.astype(float), (ties, codes)), shape=shape) for cls in (yb, ~yb)])
    estimate = weighted_average_precision(y, a) - weighted_average_precision(y, b)
    reps = []
    for counts in _multiplicities(n_groups, n_boot, rng, n_rows=len(y)):
        weights = counts.T
        ap = [_ap_from_tallies(pos @ weights, neg @ weights) for pos, neg in tallies]
        has_both = (counts @ np.bincount(codes, weights=yb, minlength=n_groups) > 0) & (
            counts @ np.bincount(codes, weights=~yb, minlength=n_groups) > 0)
        reps.append(np.where(has_both, ap[0] - ap[1], np.nan))
    return float(estimate), np.concatenate(reps)


def bootstrap_delta(pooled: Pooled, variant: str, baseline: str, metric: str, n_boot: int,
                    seed: int) -> tuple[float, float, float]:
    """Δ = metric(variant) - metric(baseline) on pooled predictions, with the 95 % student-bootstrap interval."""
    a, b = pooled.preds[variant], pooled.preds[baseline]
    keep = np.isfinite(a) & np.isfinite(b)
    y, g, a, b = pooled.y[keep], pooled.groups[keep], a[keep], b[keep]
    if metric == "auc":
        r = stats.grouped_bootstrap_auc_difference(y, a, b, g, n_boot=n_boot, alpha=ALPHA, random_state=seed)
        return r.estimate, r.ci_low, r.ci_high
    rng = np.random.default_rng(seed)
    if metric == "average_precision":
        estimate, reps = _ap_bootstrap(y, g, a, b, n_boot, rng)
    else:
        la = pooled.labels(variant)[keep] if metric == "kappa" else None
        lb = pooled.labels(baseline)[keep] if metric == "kappa" else None
        estimate, reps = _summed_bootstrap(metric, y.astype(float), g, (a, la), (b, lb), n_boot, rng)
    valid = reps[np.isfinite(reps)]
    if not len(valid):
        raise EvaluationError(f"bootstrap of {metric}: no replicate gave a defined value; too few students.")
    low, high = np.quantile(valid, [ALPHA / 2, 1 - ALPHA / 2])
    return estimate, float(low), float(high)


def _size_limits(metric: str, baseline_value: float) -> tuple[float, float, float]:
    if METRICS[metric].higher_is_better:
        return stats.AUC_SIZE_LIMITS  # 0-1 scales; common practice, no source
    scale = abs(baseline_value) if np.isfinite(baseline_value) and baseline_value != 0 else 1.0
    return tuple(limit * scale for limit in RELATIVE_SIZE_LIMITS)


def estimand_sentence(n_folds: int, repeats: int, n_train_students: float, alternative: str) -> str:
    """What the headline estimated and how sure it is, in plain words."""
    folds = f"{repeats} × {n_folds // max(repeats, 1)}" if repeats > 1 else f"{n_folds}"
    side = ("one-sided p (the question is whether the rules help)" if alternative == "greater"
            else "two-sided p")
    return (f"This is the expected change for a detector trained on about {n_train_students:.0f} students like "
            f"these, averaged over {folds} student-grouped folds; the interval and the {side} come from one "
            "corrected t-test that allows for both the test students and the training students.")


def effect_sentence(delta, ci_low, ci_high, p_value, metric: str, subject: str, baseline_value: float,
                    alternative: str = "two-sided") -> str:
    """Plain-words sentence for a Δ with its interval at :func:`interval_level` (or why there is none)."""
    if not np.isfinite([delta, ci_low, ci_high]).all():
        return f"{subject}: not enough valid folds or students to estimate the change in {METRICS[metric].label}."
    return stats.describe_effect(delta, ci_low, ci_high, p_value, metric=METRICS[metric].label, subject=subject,
                                 higher_is_better=METRICS[metric].higher_is_better,
                                 size_limits=_size_limits(metric, baseline_value),
                                 ci_level=interval_level(alternative), one_sided=alternative == "greater")


def _delong(pooled: Pooled, variant: str, baseline: str, alternative: str) -> tuple[float | None, float | None]:
    a, b = pooled.preds[variant], pooled.preds[baseline]
    keep = np.isfinite(a) & np.isfinite(b)
    try:
        r = stats.delong_test(pooled.y[keep], a[keep], b[keep])
    except EvaluationError:
        return None, None
    return float(r.z), directional_p(r.z, np.inf, r.p_value, True, alternative)


def comparison(variant: str, baseline: str, metric: str, fold_d: np.ndarray, sizes: tuple[float, float],
               pooled: Pooled, n_boot: int, seed: int, alternative: str, subject: str,
               baseline_value: float, notes: list) -> dict:
    """One entry of ``results["comparisons"]``."""
    higher = METRICS[metric].higher_is_better
    test = paired_test(fold_d, sizes[0], sizes[1], higher, alternative)
    try:
        pooled_delta, boot_low, boot_high = bootstrap_delta(pooled, variant, baseline, metric, n_boot, seed)
    except EvaluationError as exc:
        pooled_delta, boot_low, boot_high = float("nan"), float("nan"), float("nan")
        notes.append(f"No bootstrap interval for {metric} ({variant} - {baseline}): {exc}")
    z, p_delong = _delong(pooled, variant, baseline, alternative) if metric == "auc" else (None, None)
    return {
        "variant": variant, "baseline": baseline, "metric": metric,
        "delta": test["mean"], "ci_low": test["ci_low"], "ci_high": test["ci_high"],
        "ci_level": interval_level(alternative), "ci_method": CI_METHOD,
        "se": test["se"], "t": test["t"], "df": test["df"], "p_value": test["p_value"], "p_naive": test["p_naive"],
        "pooled_delta": pooled_delta, "boot_ci_low": boot_low, "boot_ci_high": boot_high,
        "boot_method": f"student bootstrap of repeat 0's pooled predictions, 95% (n_boot={n_boot})",
        "delong_z": z, "delong_p": p_delong,
        "effect": effect_sentence(test["mean"], test["ci_low"], test["ci_high"], test["p_value"], metric, subject,
                                  baseline_value, alternative),
    }


def per_rule_rows(rules: list[str], metric: str, fold_scores: dict, sizes: tuple[float, float],
                  alternative: str) -> list[dict]:
    """Drop-one (combined vs combined without the rule) and add-one (mined plus the rule vs mined) rows through the
    headline procedure (mean fold Δ, corrected-t interval and p), Holm-adjusted within each family."""
    higher = METRICS[metric].higher_is_better
    rows = []
    for rule in rules:
        row = {"rule": rule}
        for family, variant, baseline in (("drop", "combined", f"without:{rule}"), ("add", f"plus:{rule}", "mined")):
            d = fold_scores[variant][metric] - fold_scores[baseline][metric]
            test = paired_test(d, sizes[0], sizes[1], higher, alternative)
            row.update({f"{family}_delta": test["mean"], f"{family}_ci_low": test["ci_low"],
                        f"{family}_ci_high": test["ci_high"], f"{family}_p": test["p_value"]})
        rows.append(row)
    for family in ("drop", "add"):
        adjusted = stats.holm([r[f"{family}_p"] for r in rows]) if rows else []
        for r, p in zip(rows, adjusted, strict=True):
            r[f"{family}_p_holm"] = float(p)
    return [{k: r[k] for k in ("rule", "drop_delta", "drop_ci_low", "drop_ci_high", "drop_p", "drop_p_holm",
                               "add_delta", "add_ci_low", "add_ci_high", "add_p", "add_p_holm")} for r in rows]
