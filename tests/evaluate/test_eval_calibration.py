"""Calibration of the evaluation's statistics on simulated data with known truth (slow; runs in CI).

Setting: small datasets of 50 students (6 coded windows each) from the simulator, the mined baseline is the
``correctness`` family, the rule under test detects hint skimming, the model is a logistic regression on
standardised features, 5-fold student-grouped CV, one repeat.

* Null: hint skimming has label link 0 (it still happens at its usual rate); the headline test (corrected
  resampled t-test, one-sided) must reject at alpha = 0.05 in at most 8 % of 200 datasets.
* Planted effect: hint skimming has label link 4 (and twice its base rate); power at alpha = 0.05 must be >= 0.8
  over 100 datasets, and the secondary student-bootstrap 95 % CI of ΔAUC must cover the true ΔAUC in >= 90 % of them.
  The true ΔAUC of a dataset: both variants trained on all of its students, scored on 2,000 held-out students of
  the same simulated platform.

Datasets are disjoint sets of 50 students cut from a few large simulations (each simulation is one platform:
skills, schools, coder).  The features used here learn nothing from data (counts and rates of each window's own
events, no pruning), so they are computed once per simulation and evaluated with the precomputed entry point,
which runs the same splits, models and statistics as the in-fold path (their equality is tested in
test_eval_engine.py).
"""

import warnings

import joblib
import numpy as np
import pandas as pd
import pytest
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from threadpoolctl import threadpool_limits

from rulefeat import EventLog
from rulefeat.errors import LogRepairWarning
from rulefeat.evaluate.value.engine import compute_incremental_value_precomputed
from rulefeat.mined.transformer import LogFeatures
from rulefeat.rules.transformer import RuleFeatures
from rulefeat.simulate import tutor_logs

pytestmark = pytest.mark.slow

RULE = """
[rules.skimmed_hint]
when = "action == 'hint' and prev(action, within='step') == 'hint' and gap < 3s"
report = ["count", "rate", "any"]
"""
STUDENTS = 50
ALPHA = 0.05


def model():
    return make_pipeline(SimpleImputer(), StandardScaler(), LogisticRegression(max_iter=300))


def platform(seed: int, n_students: int, link: float):
    """One simulation: per window the student, the label, and the (stateless) mined and rule features."""
    # The scenario this test was calibrated on (the simulator's defaults before the learnable demo scenario):
    # weak links for the other behaviours, 3-step windows, label rate 0.2, a coder erring 10 % both ways.
    data = tutor_logs(n_students=n_students, seed=seed, n_skills=4, problems_per_skill=8,
                      label_links={"rapid_guess": 1.5, "hint_skim": link, "help_avoid": 0.0, "idle": 0.8},
                      behaviours={"hint_skim": 2.0}, window_steps=3, label_rate=0.2, coder_error=0.1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        log = EventLog(data.events)
    X = data.windows[["student", "start", "end"]]
    mined = LogFeatures(log, families=["correctness"], prune=False).fit_transform(X)
    rules = RuleFeatures(log, RULE).fit_transform(X)
    return X["student"].astype(str).to_numpy(), data.windows["label"].to_numpy(), mined, rules


def subsets(students: np.ndarray, count: int, size: int = STUDENTS) -> list[np.ndarray]:
    names = np.unique(students)
    assert len(names) >= count * size
    return [np.isin(students, names[k * size:(k + 1) * size]) for k in range(count)]


def evaluate(students, y, mined, rules, seed, n_boot):
    """Headline p, naive p and the CI of ΔAUC (combined − mined) for one dataset."""
    with threadpool_limits(1):
        res, _, _ = compute_incremental_value_precomputed(
            mined.reset_index(drop=True), rules.reset_index(drop=True), y, students, model=model(), cv=5,
            repeats=1, n_boot=n_boot, ablation=False, transfer=False, learning_curve=None, random_state=seed)
    head = res["comparisons"][0]
    assert (head["metric"], head["variant"], head["baseline"]) == ("auc", "combined", "mined")
    return head["p_value"], head["p_naive"], head["pooled_delta"], head["boot_ci_low"], head["boot_ci_high"]


def true_delta(train, population, y, mined, rules) -> float:
    """ΔAUC of the two variants trained on the whole dataset, on a large held-out population."""
    both = pd.concat([mined, rules], axis=1)
    with threadpool_limits(1):
        base = model().fit(mined[train], y[train]).predict_proba(mined[population])[:, 1]
        full = model().fit(both[train], y[train]).predict_proba(both[population])[:, 1]
    return roc_auc_score(y[population], full) - roc_auc_score(y[population], base)


def run_effect(mask, population, students, y, mined, rules, seed):
    return (*evaluate(students[mask], y[mask], mined[mask], rules[mask], seed, 500),
            true_delta(mask, population, y, mined, rules))


@pytest.fixture(scope="module")
def null_runs():
    jobs = []
    for seed in (101, 102, 103, 104):
        students, y, mined, rules = platform(seed, 50 * STUDENTS, link=0.0)
        for k, mask in enumerate(subsets(students, 50)):
            jobs.append(joblib.delayed(evaluate)(students[mask], y[mask], mined[mask], rules[mask], seed * 100 + k,
                                                 50))
    return np.array(joblib.Parallel(n_jobs=2)(jobs))


@pytest.fixture(scope="module")
def effect_runs():
    students, y, mined, rules = platform(201, 100 * STUDENTS + 2000, link=4.0)
    population = np.isin(students, np.unique(students)[-2000:])
    jobs = [joblib.delayed(run_effect)(mask, population, students, y, mined, rules, k)
            for k, mask in enumerate(subsets(students, 100))]
    return np.array(joblib.Parallel(n_jobs=2)(jobs))


def test_null_rejection_rate(null_runs):
    assert len(null_runs) == 200
    headline = float(np.mean(null_runs[:, 0] < ALPHA))
    naive = float(np.mean(null_runs[:, 1] < ALPHA))
    print(f"\nnull: corrected resampled t-test rejects {headline:.3f}, naive fold t-test {naive:.3f} "
          f"(alpha {ALPHA}, 200 datasets); mean ΔAUC {null_runs[:, 2].mean():+.4f}")
    assert np.isfinite(null_runs[:, :2]).all()
    assert headline <= 0.08


def test_power_under_a_planted_effect(effect_runs):
    power = float(np.mean(effect_runs[:, 0] < ALPHA))
    print(f"\neffect: power {power:.3f} (naive {np.mean(effect_runs[:, 1] < ALPHA):.3f}), mean ΔAUC "
          f"{effect_runs[:, 2].mean():+.3f}, mean true ΔAUC {effect_runs[:, 5].mean():+.3f}")
    assert len(effect_runs) == 100 and power >= 0.8


def test_bootstrap_interval_covers_the_true_difference(effect_runs):
    low, high, truth = effect_runs[:, 3], effect_runs[:, 4], effect_runs[:, 5]
    covered = float(np.mean((low <= truth) & (truth <= high)))
    print(f"\ncoverage of the 95% student-bootstrap CI: {covered:.3f} (truth below {np.mean(truth < low):.3f}, "
          f"above {np.mean(truth > high):.3f}; mean width {np.mean(high - low):.3f})")
    assert covered >= 0.9
