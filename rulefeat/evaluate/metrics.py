"""Metrics of one set of predictions, per fold and pooled over out-of-fold predictions.

Every metric is a plain function ``metric(y, pred, sample_weight=None) -> float`` (weights let the student
bootstrap reuse it), registered in the :data:`METRICS` table with its direction.  Classification metrics read the
predicted probability of the positive class, except Cohen's kappa, which reads 0/1 labels made with a threshold
chosen on the *training* fold (:func:`kappa_threshold`): choosing it on the test fold would flatter the detector.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..errors import RulefeatWarning
from ..stats import inference as stats

__all__ = ["Metric", "METRICS", "CLASSIFICATION_METRICS", "REGRESSION_METRICS", "PRIMARY", "metric_names",
           "weighted_auc", "weighted_kappa", "weighted_average_precision", "weighted_log_loss",
           "weighted_brier", "weighted_r2", "weighted_rmse", "kappa_threshold", "score_predictions",
           "LOG_LOSS_EPS"]

# Probabilities are clipped to [eps, 1 - eps] before the log loss, so one confident mistake costs ~34.5, not inf.
LOG_LOSS_EPS = 1e-15


def _weights(y: np.ndarray, sample_weight) -> np.ndarray:
    return np.ones(len(y)) if sample_weight is None else np.asarray(sample_weight, dtype=float)


def _wmean(values: np.ndarray, w: np.ndarray) -> float:
    total = w.sum()
    return float(values @ w / total) if total > 0 else float("nan")


def weighted_auc(y, score, sample_weight=None) -> float:
    """Area under the ROC curve (A'), ties counted 1/2; equals ``sklearn.metrics.roc_auc_score``."""
    return stats.auc(y, score, sample_weight=sample_weight)


def weighted_kappa(y, labels, sample_weight=None) -> float:
    """Cohen's kappa of 0/1 predicted labels against 0/1 truth; NaN when both use one and the same label.

    Equals ``sklearn.metrics.cohen_kappa_score`` (also with ``sample_weight``).
    """
    y, labels = np.asarray(y, dtype=bool), np.asarray(labels, dtype=bool)
    w = _weights(y, sample_weight)
    tp, fp = w @ (y & labels), w @ (~y & labels)
    fn, tn = w @ (y & ~labels), w @ (~y & ~labels)
    den = (tp + fp) * (fp + tn) + (tp + fn) * (fn + tn)
    return float(2.0 * (tp * tn - fn * fp) / den) if den > 0 else float("nan")


def weighted_average_precision(y, score, sample_weight=None) -> float:
    """Average precision: ``sum_n (R_n - R_(n-1)) P_n`` over distinct score thresholds, high to low.

    The step-wise (not interpolated) area under the precision-recall curve; equals
    ``sklearn.metrics.average_precision_score`` (also with ``sample_weight``).  NaN without positives.
    """
    y = np.asarray(y, dtype=bool)
    score = np.asarray(score, dtype=float)
    w = _weights(y, sample_weight)
    order = np.argsort(-score, kind="stable")
    s, yw, nw = score[order], (w * y)[order], (w * ~y)[order]
    last = np.flatnonzero(np.r_[s[1:] != s[:-1], True])  # last row of each distinct score
    tp, fp = np.cumsum(yw)[last], np.cumsum(nw)[last]
    if tp[-1] <= 0:
        return float("nan")
    with np.errstate(invalid="ignore", divide="ignore"):
        precision = np.where(tp + fp > 0, tp / (tp + fp), 0.0)
    recall_gain = np.diff(np.r_[0.0, tp / tp[-1]])
    return float(recall_gain @ precision)


def weighted_log_loss(y, proba, sample_weight=None) -> float:
    """Mean negative log-likelihood of 0/1 truth, probabilities clipped to ``[1e-15, 1 - 1e-15]``."""
    y = np.asarray(y, dtype=bool)
    p = np.clip(np.asarray(proba, dtype=float), LOG_LOSS_EPS, 1.0 - LOG_LOSS_EPS)
    return _wmean(-np.where(y, np.log(p), np.log1p(-p)), _weights(y, sample_weight))


def weighted_brier(y, proba, sample_weight=None) -> float:
    """Brier score: mean squared difference between the probability and the 0/1 truth."""
    y = np.asarray(y, dtype=float)
    return _wmean((np.asarray(proba, dtype=float) - y) ** 2, _weights(y, sample_weight))


def weighted_r2(y, pred, sample_weight=None) -> float:
    """Coefficient of determination; equals ``sklearn.metrics.r2_score``; NaN when y is constant."""
    y, pred = np.asarray(y, dtype=float), np.asarray(pred, dtype=float)
    w = _weights(y, sample_weight)
    mean = _wmean(y, w)
    total = w @ (y - mean) ** 2
    return float(1.0 - (w @ (y - pred) ** 2) / total) if total > 0 else float("nan")


def weighted_rmse(y, pred, sample_weight=None) -> float:
    """Root mean squared error."""
    y, pred = np.asarray(y, dtype=float), np.asarray(pred, dtype=float)
    return float(np.sqrt(_wmean((y - pred) ** 2, _weights(y, sample_weight))))


@dataclass(frozen=True)
class Metric:
    """A metric's function and how to read it."""

    name: str
    label: str
    task: str
    higher_is_better: bool
    uses_labels: bool
    function: Callable[..., float]


METRICS = {m.name: m for m in (
    Metric("auc", "AUC", "classification", True, False, weighted_auc),
    Metric("kappa", "Cohen's kappa", "classification", True, True, weighted_kappa),
    Metric("average_precision", "average precision", "classification", True, False, weighted_average_precision),
    Metric("log_loss", "log loss", "classification", False, False, weighted_log_loss),
    Metric("brier", "Brier score", "classification", False, False, weighted_brier),
    Metric("r2", "R²", "regression", True, False, weighted_r2),
    Metric("rmse", "RMSE", "regression", False, False, weighted_rmse),
)}
CLASSIFICATION_METRICS = tuple(n for n, m in METRICS.items() if m.task == "classification")
REGRESSION_METRICS = tuple(n for n, m in METRICS.items() if m.task == "regression")
PRIMARY = {"classification": "auc", "regression": "r2"}


def metric_names(task: str) -> tuple[str, ...]:
    """The metrics reported for a task, primary metric first."""
    return CLASSIFICATION_METRICS if task == "classification" else REGRESSION_METRICS


def kappa_threshold(y_train: np.ndarray, pred_train: np.ndarray) -> float | None:
    """Threshold maximising kappa on the training fold's in-sample predictions (None with one class)."""
    if len(np.unique(y_train)) < 2:
        return None
    return stats.best_kappa_threshold(y_train, pred_train)


def score_predictions(task: str, y: np.ndarray, pred: np.ndarray, threshold=None) -> dict[str, float]:
    """Every metric of the task for one set of predictions.

    ``threshold`` (classification) is one number, or one per row when pooling folds that each chose their own.
    Metrics that need both classes (or a non-constant y) are NaN when the rows lack them, and all are NaN when
    ``pred`` has missing values (a model that could not be fitted).
    """
    names = metric_names(task)
    y, pred = np.asarray(y), np.asarray(pred, dtype=float)
    if len(y) == 0 or np.isnan(pred).any():
        return dict.fromkeys(names, float("nan"))
    if task == "regression":
        return {n: METRICS[n].function(y, pred) for n in names}
    both = len(np.unique(y)) == 2
    labels = pred >= (np.inf if threshold is None else np.asarray(threshold, dtype=float))
    out = {}
    for n in names:
        metric = METRICS[n]
        if n in ("auc", "kappa", "average_precision") and not both:
            out[n] = float("nan")
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RulefeatWarning)  # undefined kappa is reported as NaN
            out[n] = metric.function(y, labels if metric.uses_labels else pred)
    return out
