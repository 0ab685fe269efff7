"""Per-fold and pooled metrics, checked against scikit-learn (reference library) and hand-computed values."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn import metrics as skm

from rulefeat.evaluate.metrics import (
    METRICS,
    kappa_threshold,
    metric_names,
    score_predictions,
    weighted_auc,
    weighted_average_precision,
    weighted_brier,
    weighted_kappa,
    weighted_log_loss,
    weighted_r2,
    weighted_rmse,
)
from rulefeat.stats import inference as stats


def _case(seed=0, n=200, ties=False):
    rng = np.random.default_rng(seed)
    y = (rng.random(n) < 0.35).astype(float)
    p = np.clip(0.3 + 0.3 * y + rng.normal(0, 0.2, n), 0.01, 0.99)
    if ties:
        p = np.clip(np.round(p, 1), 0.1, 0.9)  # ties, away from the log-loss clipping
    w = rng.integers(0, 4, n).astype(float)
    return y, p, w


@pytest.mark.parametrize("ties", [False, True])
def test_probability_metrics_match_sklearn(ties):
    # Reference library: scikit-learn's metrics, unweighted and weighted.
    y, p, w = _case(ties=ties)
    for sw in (None, w):
        assert weighted_auc(y, p, sw) == pytest.approx(skm.roc_auc_score(y, p, sample_weight=sw), abs=1e-12)
        assert weighted_average_precision(y, p, sw) == pytest.approx(
            skm.average_precision_score(y, p, sample_weight=sw), abs=1e-12)
        assert weighted_log_loss(y, p, sw) == pytest.approx(skm.log_loss(y, p, sample_weight=sw), abs=1e-12)
        assert weighted_brier(y, p, sw) == pytest.approx(skm.brier_score_loss(y, p, sample_weight=sw), abs=1e-12)


def test_kappa_matches_sklearn_and_hand_computed_table():
    y, p, w = _case(1)
    labels = p >= 0.5
    # Reference library: sklearn.metrics.cohen_kappa_score (also weighted) and our stats.cohen_kappa.
    assert weighted_kappa(y, labels) == pytest.approx(skm.cohen_kappa_score(y, labels), abs=1e-12)
    assert weighted_kappa(y, labels) == pytest.approx(stats.cohen_kappa(y, labels.astype(float)), abs=1e-12)
    assert weighted_kappa(y, labels, w) == pytest.approx(skm.cohen_kappa_score(y, labels, sample_weight=w),
                                                         abs=1e-12)
    # 2x2 agreement table [[20, 5], [10, 15]]: kappa = 0.40, hand-computed from Cohen's (1960) definition.
    truth = np.r_[np.zeros(25), np.ones(25)]
    pred = np.r_[np.zeros(20), np.ones(5), np.zeros(10), np.ones(15)]
    assert weighted_kappa(truth, pred) == pytest.approx(0.40, abs=1e-12)
    assert np.isnan(weighted_kappa(np.zeros(4), np.zeros(4)))


def test_regression_metrics_match_sklearn():
    rng = np.random.default_rng(2)
    y = rng.normal(size=100)
    pred = y + rng.normal(0, 0.5, 100)
    w = rng.random(100)
    for sw in (None, w):
        assert weighted_r2(y, pred, sw) == pytest.approx(skm.r2_score(y, pred, sample_weight=sw), abs=1e-12)
        assert weighted_rmse(y, pred, sw) == pytest.approx(
            np.sqrt(skm.mean_squared_error(y, pred, sample_weight=sw)), abs=1e-12)
    assert np.isnan(weighted_r2(np.ones(5), np.arange(5.0)))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.booleans(), st.integers(0, 6), st.integers(1, 3)), min_size=2, max_size=40))
def test_average_precision_property(rows):
    # Reference library: sklearn.metrics.average_precision_score on random data with many ties and weights.
    y = np.array([r[0] for r in rows], dtype=float)
    s = np.array([r[1] for r in rows], dtype=float)
    w = np.array([r[2] for r in rows], dtype=float)
    if y.sum() == 0:
        assert np.isnan(weighted_average_precision(y, s, w))
        return
    assert weighted_average_precision(y, s, w) == pytest.approx(
        skm.average_precision_score(y, s, sample_weight=w), abs=1e-10)


def test_log_loss_clips_probabilities():
    assert weighted_log_loss([1.0], [0.0]) == pytest.approx(-np.log(1e-15))
    assert np.isfinite(weighted_log_loss([0.0, 1.0], [1.0, 0.0]))


def test_metric_table_and_directions():
    assert metric_names("classification") == ("auc", "kappa", "average_precision", "log_loss", "brier")
    assert metric_names("regression") == ("r2", "rmse")
    lower = {n for n, m in METRICS.items() if not m.higher_is_better}
    assert lower == {"log_loss", "brier", "rmse"}


def test_score_predictions_uses_training_threshold_and_handles_gaps():
    y = np.array([0, 0, 1, 1, 0, 1.0])
    p = np.array([0.1, 0.4, 0.35, 0.8, 0.2, 0.9])
    out = score_predictions("classification", y, p, threshold=0.3)
    assert out["kappa"] == pytest.approx(skm.cohen_kappa_score(y, p >= 0.3))
    assert out["auc"] == pytest.approx(skm.roc_auc_score(y, p))
    one_class = score_predictions("classification", np.zeros(3), np.array([0.1, 0.2, 0.3]), 0.2)
    assert np.isnan(one_class["auc"]) and np.isnan(one_class["kappa"]) and np.isfinite(one_class["brier"])
    failed = score_predictions("classification", y, np.full(6, np.nan), 0.5)
    assert all(np.isnan(v) for v in failed.values())
    reg = score_predictions("regression", np.arange(5.0), np.arange(5.0) + 1)
    assert reg == {"r2": pytest.approx(0.5), "rmse": pytest.approx(1.0)}


def test_kappa_threshold_is_chosen_on_training_predictions():
    y = np.array([0, 0, 1, 0, 1, 1])
    p = np.array([0.1, 0.2, 0.3, 0.4, 0.5, 0.6])
    assert kappa_threshold(y, p) == stats.best_kappa_threshold(y, p) == 0.3
    assert kappa_threshold(np.zeros(4), p[:4]) is None
