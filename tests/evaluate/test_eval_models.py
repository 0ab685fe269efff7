"""The default model preset and the thread budget of the evaluation."""

import numpy as np
import pytest

from rulefeat.errors import EvaluationError
from rulefeat.evaluate import default_model, thread_budget
from rulefeat.evaluate.models import SMALL_TRAINING_SET, available_cores, model_threads


@pytest.mark.parametrize(("n_jobs", "n_tasks", "cores", "expected"), [
    (None, None, 8, (1, 8)),      # one worker, every core to the model
    (None, 3, 2, (1, 2)),
    (-1, None, 8, (8, 1)),        # one worker per core, one model thread each
    (-1, 20, 2, (2, 1)),
    (1, None, 8, (1, 8)),
    (2, None, 8, (2, 4)),
    (3, None, 8, (3, 2)),
    (16, None, 4, (4, 1)),        # never more workers than cores
    (4, 2, 8, (2, 4)),            # never more workers than folds; spare cores go to the models
    (-2, None, 8, (7, 1)),        # joblib's convention: cores + 1 - k
    (-8, None, 4, (1, 4)),
])
def test_thread_budget(n_jobs, n_tasks, cores, expected):
    workers, threads = thread_budget(n_jobs, n_tasks, cores)
    assert (workers, threads) == expected
    assert workers * threads <= cores


def test_thread_budget_default_cores_and_bad_values():
    workers, threads = thread_budget(None)
    assert workers == 1 and threads == available_cores()
    for bad in (0, 1.5, "2", True):
        with pytest.raises(EvaluationError, match="'n_jobs' parameter of incremental_value"):
            thread_budget(bad, cores=2)
    with pytest.raises(EvaluationError, match="'cores' must be at least 1"):
        thread_budget(None, cores=0)


def test_default_model_preset():
    clf = default_model("classification", random_state=7, n_threads=2)
    params = clf.get_params()
    assert type(clf).__name__ == "LGBMClassifier"
    assert params["deterministic"] is True and params["force_row_wise"] is True
    assert params["n_jobs"] == 2 and params["random_state"] == 7 and params["verbose"] == -1
    assert (params["n_estimators"], params["learning_rate"], params["num_leaves"],
            params["min_child_samples"], params["max_bin"]) == (200, 0.05, 15, 20, 63)
    reg = default_model("regression", random_state=None, n_threads=1)
    assert type(reg).__name__ == "LGBMRegressor" and reg.get_params()["random_state"] == 0


def test_default_model_is_deterministic():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(300, 5))
    y = (X[:, 0] + rng.normal(size=300) > 0).astype(int)
    a = default_model("classification", 3, 1).fit(X, y).predict_proba(X)
    b = default_model("classification", 3, 1).fit(X, y).predict_proba(X)
    np.testing.assert_array_equal(a, b)


def test_default_model_bad_values():
    with pytest.raises(EvaluationError, match="'task' must be one of"):
        default_model("clasification")
    with pytest.raises(EvaluationError, match="'n_threads' must be a positive integer"):
        default_model("classification", n_threads=0)


def test_small_training_sets_get_one_model_thread():
    assert model_threads(2, SMALL_TRAINING_SET) == 2
    assert model_threads(2, SMALL_TRAINING_SET - 1) == 1
    assert model_threads(1, 10 * SMALL_TRAINING_SET) == 1
