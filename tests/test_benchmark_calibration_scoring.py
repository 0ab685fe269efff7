"""The calibration benchmark's post-hoc scoring matches the library's own statistics.

docs/inference.md quotes procedures scored from recorded fold differences (``--record`` / ``--score``); these
checks keep that scoring equal to what the library computes, so that the quoted rows describe the real headline.
"""
from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest
from scipy import stats as sps

from rulefeat.stats.inference import corrected_resampled_ttest, delong_covariance

_PATH = Path(__file__).resolve().parents[1] / "benchmarks" / "calibration.py"
_SPEC = importlib.util.spec_from_file_location("benchmark_calibration_scoring", _PATH)
calibration = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(calibration)


def _recorded(rng, datasets=4, folds=5, repeats=3):
    d = rng.normal(0.01, 0.02, (datasets, folds * repeats))
    repeat = np.repeat(np.arange(repeats), folds)
    n_train = rng.integers(1400, 1460, d.shape).astype(float)
    return d, repeat, n_train, 1800.0 - n_train


def test_corrected_t_on_all_repeats_is_the_library_test():
    d, repeat, n_train, n_test = _recorded(np.random.default_rng(0))
    mean, se, df = calibration.corrected_t(d, repeat, n_train, n_test, 3)
    for i in range(len(d)):
        ref = corrected_resampled_ttest(d[i], n_train[i].mean(), n_test[i].mean())
        assert mean[i] == pytest.approx(ref.mean, rel=1e-12) and se[i] == pytest.approx(ref.se, rel=1e-12)
        assert df == ref.df


def test_corrected_t_on_fewer_repeats_uses_only_their_folds():
    d, repeat, n_train, n_test = _recorded(np.random.default_rng(1))
    mean, se, df = calibration.corrected_t(d, repeat, n_train, n_test, 1)
    ref = corrected_resampled_ttest(d[0, :5], n_train[0, :5].mean(), n_test[0, :5].mean())
    assert (mean[0], df) == (pytest.approx(ref.mean, rel=1e-12), 4) and se[0] == pytest.approx(ref.se, rel=1e-12)


def test_readouts_agree_with_their_interval():
    mean, se = np.array([0.02, 0.001, -0.01]), np.array([0.008, 0.004, 0.006])
    out = calibration.readouts(mean, se, 14, truth=0.0)
    one_sided, _, half90 = out["one-sided p, 90% interval"]
    two_sided, _, half95 = out["two-sided p, 95% interval"]
    assert np.array_equal(one_sided, mean - half90 > 0)  # the interval excludes 0 exactly when p < alpha
    assert np.array_equal(two_sided, np.abs(mean) - half95 > 0)
    assert half95[0] == pytest.approx(sps.t.ppf(0.975, 14) * 0.008)


def test_placement_influence_gives_delong_variance():
    rng = np.random.default_rng(2)
    y = rng.random(400) < 0.3
    score = rng.normal(size=400) + y
    ic = calibration.placement_influence(y, score)
    _, cov = delong_covariance(y.astype(int), score)
    assert abs(ic.sum()) < 1e-9
    # Same placement values; DeLong divides their squares by (m - 1) and (n - 1), the influence form by m and n.
    assert (ic ** 2).sum() / len(y) ** 2 == pytest.approx(cov[0, 0], rel=0.01)


def test_pooling_refuses_runs_that_share_datasets(tmp_path):
    d, repeat, n_train, n_test = _recorded(np.random.default_rng(3), datasets=2)
    case = {"name": "null", "design": "3 x 5 folds", "truth": 0.0, "truth_se": 0.0, "seeds": np.arange(2),
            "repeat": repeat, "d": d, "n_train": n_train, "n_test": n_test, "ic_se": np.ones(2),
            "boot_low": np.zeros(2), "boot_high": np.ones(2)}
    calibration.save(str(tmp_path / "a.npz"), [case])
    calibration.save(str(tmp_path / "b.npz"), [{**case, "seeds": np.arange(2, 4)}])
    pooled = calibration.load([str(tmp_path / "a.npz"), str(tmp_path / "b.npz")])
    assert len(pooled) == 1 and np.array_equal(pooled[0]["d"], np.vstack([d, d]))
    with pytest.raises(SystemExit, match="share dataset seeds"):
        calibration.load([str(tmp_path / "a.npz"), str(tmp_path / "a.npz")])
