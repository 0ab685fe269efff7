"""The default model of the evaluation and the thread budget that keeps folds and models off each other's cores.

A fold runs in one joblib worker and fits its models there; a model with its own thread pool (LightGBM) on top of
several workers would ask for more threads than the machine has and slow everything down.  :func:`thread_budget`
splits the cores: ``workers x model threads <= cores``.
"""

from __future__ import annotations

import os

import joblib
import numpy as np

from ..errors import EvaluationError

__all__ = ["default_model", "thread_budget", "model_threads", "available_cores", "TASKS", "SMALL_TRAINING_SET"]

TASKS = ("classification", "regression")

# A modest boosted-tree preset: enough capacity for a few hundred features and tens of thousands of units, small
# enough for dozens of fits per evaluation.  Common practice, no source.  63 histogram bins instead of LightGBM's
# 255 make each fit about 40 % faster (measured on 16,000 x 75 rows) and are plenty for counts and rates.
_PRESET = {
    "n_estimators": 200,
    "learning_rate": 0.05,
    "num_leaves": 15,
    "min_child_samples": 20,
    "max_bin": 63,
    "subsample": 1.0,
    "colsample_bytree": 1.0,
}


# Below this many training rows one LightGBM thread is faster than several: starting and synchronising threads
# for each of the 200 small trees costs more than it saves (measured on 1,440 x 75 rows: 0.75 s with one thread,
# 1.4 s with two on a busy 2-core machine).
SMALL_TRAINING_SET = 10_000


def available_cores() -> int:
    """Cores this process may use (the affinity mask when the OS reports one, else joblib's count)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # not on Linux
        return max(1, int(joblib.cpu_count()))


def default_model(task: str, random_state: int | None = None, n_threads: int = 1):
    """LightGBM with a determinism preset: the model :func:`~rulefeat.evaluate.incremental_value` uses by default.

    Parameters
    ----------
    task : {"classification", "regression"}
        ``LGBMClassifier`` or ``LGBMRegressor``.
    random_state : int or None
        Seed of the trees' randomness (0 when None, so the default model is still reproducible).
    n_threads : int
        Threads LightGBM may use (fixed, never "all cores": see :func:`thread_budget`).

    Returns
    -------
    lightgbm.LGBMClassifier or lightgbm.LGBMRegressor
        200 trees, learning rate 0.05, 15 leaves, at least 20 units per leaf, 63 bins, ``deterministic=True`` and
        ``force_row_wise=True`` (the same seed and data give bit-identical trees), ``verbose=-1``.

    Examples
    --------
    >>> model = default_model("classification", random_state=3, n_threads=2)
    >>> model.get_params()["n_jobs"], model.get_params()["deterministic"]
    (2, True)
    """
    from lightgbm import LGBMClassifier, LGBMRegressor

    if task not in TASKS:
        raise EvaluationError(f"default_model: 'task' must be one of {list(TASKS)!r}. Got {task!r} instead.")
    if isinstance(n_threads, bool) or not isinstance(n_threads, (int, np.integer)) or n_threads < 1:
        raise EvaluationError(f"default_model: 'n_threads' must be a positive integer. Got {n_threads!r} instead.")
    seed = 0 if random_state is None else int(random_state)
    cls = LGBMClassifier if task == "classification" else LGBMRegressor
    return cls(**_PRESET, random_state=seed, deterministic=True, force_row_wise=True, n_jobs=int(n_threads),
               verbose=-1)


def thread_budget(n_jobs: int | None, n_tasks: int | None = None, cores: int | None = None) -> tuple[int, int]:
    """Split the cores between parallel fold workers and each model's threads.

    Parameters
    ----------
    n_jobs : int or None
        ``None`` runs folds one after another and gives the model every core; ``-1`` runs one worker per core with
        one model thread each; ``k > 0`` runs ``k`` workers (at most one per core) sharing the cores; ``-k`` follows
        joblib (``cores + 1 - k`` workers).
    n_tasks : int, optional
        Number of folds to run: never more workers than folds (left-over cores go to the models).
    cores : int, optional
        Cores available; :func:`available_cores` when omitted.

    Returns
    -------
    (workers, model_threads) : tuple of int
        ``workers * model_threads <= cores``, both at least 1.

    Examples
    --------
    >>> thread_budget(None, cores=8), thread_budget(-1, cores=8), thread_budget(3, cores=8)
    ((1, 8), (8, 1), (3, 2))
    """
    cores = available_cores() if cores is None else int(cores)
    if cores < 1:
        raise EvaluationError(f"thread_budget: 'cores' must be at least 1. Got {cores!r} instead.")
    if n_jobs is None:
        return 1, cores
    if isinstance(n_jobs, bool) or not isinstance(n_jobs, (int, np.integer)) or n_jobs == 0:
        raise EvaluationError(f"The 'n_jobs' parameter of incremental_value must be None or a non-zero integer "
                              f"(-1 for one worker per core). Got {n_jobs!r} instead.")
    workers = int(n_jobs) if n_jobs > 0 else max(1, cores + 1 + int(n_jobs))
    workers = min(workers, cores)
    if n_tasks is not None:
        workers = max(1, min(workers, int(n_tasks)))
    return workers, max(1, cores // workers)


def model_threads(budget: int, n_train_rows: float) -> int:
    """Threads for the default model: the budget, or 1 for training sets under :data:`SMALL_TRAINING_SET` rows.

    Examples
    --------
    >>> model_threads(4, 50_000), model_threads(4, 2_000)
    (4, 1)
    """
    return int(budget) if n_train_rows >= SMALL_TRAINING_SET else 1
