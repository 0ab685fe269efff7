"""A reduced calibration study of the headline procedure (slow; the full study is benchmarks/calibration.py).

Feature tables come from a small generator that is not the project's simulator: students with a random effect on
the logit scale, 4 informative and 6 noise mined columns, and 2 rule columns that are either noisy copies of two
informative mined columns (the rules add nothing) or carry a unit-level signal the mined columns lack.  The model
is a logistic regression (fast), 5 student-grouped folds repeated 3 times.  The true Δ is the expected AUC gain of
detectors trained on training sets of the folds' size (Monte Carlo over fresh training samples, one large fresh
test set).  Bounds are loose for the small number of datasets (Monte-Carlo standard errors about 0.02).
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score
from threadpoolctl import threadpool_limits

from rulefeat.evaluate.value.engine import compute_incremental_value_precomputed

pytestmark = pytest.mark.slow

STUDENTS, UNITS, REPEATS, ALPHA = 100, 6, 3, 0.05
WEIGHTS = np.array([0.8, 0.6, 0.4, 0.3])


def tables(rng, n_students, signal):
    n = n_students * UNITS
    u = rng.normal(0, 0.7, n_students)[np.repeat(np.arange(n_students), UNITS)]
    info, z = rng.normal(size=(n, 4)), rng.normal(size=n)
    y = (rng.random(n) < 1 / (1 + np.exp(-(-1.0 + info @ WEIGHTS + u + signal * z)))).astype(int)
    mined = pd.DataFrame(np.hstack([info, rng.normal(size=(n, 6))]), columns=[f"m{j}" for j in range(10)])
    source = np.column_stack([z, z]) if signal else info[:, :2]
    rules = pd.DataFrame(source + rng.normal(0, 0.3, (n, 2)), columns=["a__value", "b__value"])
    return mined, rules, y, np.repeat(np.arange(n_students), UNITS)


def model():
    return LogisticRegression(max_iter=200)


def true_delta(signal, draws=25):
    rng = np.random.default_rng(99)
    m_te, r_te, y_te, _ = tables(rng, 4000, signal)
    both_te = pd.concat([m_te, r_te], axis=1)
    out = []
    for _ in range(draws):
        m, r, y, _ = tables(rng, STUDENTS * 4 // 5, signal)
        base = model().fit(m, y).predict_proba(m_te)[:, 1]
        full = model().fit(pd.concat([m, r], axis=1), y).predict_proba(both_te)[:, 1]
        out.append(roc_auc_score(y_te, full) - roc_auc_score(y_te, base))
    return float(np.mean(out))


def headline(signal, seed):
    mined, rules, y, students = tables(np.random.default_rng(seed), STUDENTS, signal)
    with threadpool_limits(1), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res, _, _ = compute_incremental_value_precomputed(
            mined, rules, y, students, model=model(), cv=5, repeats=REPEATS, n_boot=20, ablation=False,
            transfer=False, learning_curve=None, random_state=seed)
    head = res["comparisons"][0]
    half = sps.t.ppf(1 - ALPHA / 2, head["df"]) * head["se"]
    return head["p_value"], head["ci_low"], head["delta"] - half, head["delta"] + half


def test_null_rejects_at_about_alpha():
    p = np.array([headline(0.0, seed)[0] for seed in range(80)])
    rate = float(np.mean(p < ALPHA))
    print(f"\nreduced calibration, null: rejects {rate:.3f} of 80 (alpha {ALPHA})")
    assert rate <= 0.09  # nominal 0.05; 0.09 is about 2 MC standard errors above it


def test_signal_power_and_coverage_of_the_expected_delta():
    truth = true_delta(0.6)
    runs = np.array([headline(0.6, 1000 + seed) for seed in range(60)])
    power = float(np.mean(runs[:, 0] < ALPHA))
    lower_ok = float(np.mean(runs[:, 1] <= truth))
    covered = float(np.mean((runs[:, 2] <= truth) & (truth <= runs[:, 3])))
    print(f"\nreduced calibration, signal: true Δ {truth:+.4f}, power {power:.3f}, one-sided bound below the truth "
          f"{lower_ok:.3f}, 95% interval coverage {covered:.3f} (60 datasets)")
    assert truth > 0.02
    assert power >= 0.6 and lower_ok >= 0.88 and covered >= 0.87
