"""The probability of each closed unit from the model steps of a fitted detector, called once per live call.

A live call closes a few units, so what a model's ``predict_proba`` does per call, whatever the number of
rows, weighs more than the prediction itself.  For LightGBM's scikit-learn classifier (the model of
:func:`~rulefeat.make_detector`) that is most of it: re-reading and copying its parameters and converting
the table takes about a millisecond, predicting one row with its booster some tens of microseconds.
:func:`proba_of` works out once, when the scorer is built, how to call the model: a binary LightGBM
classifier alone after the features is asked through its fitted booster, with the thread count the
classifier would pass, which returns the same probabilities (``tests/ship/test_ship_live.py`` checks them
against ``predict_proba`` of the bound pipeline); any other model steps get the feature table through
their own ``predict_proba``.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd
from sklearn.pipeline import Pipeline

__all__ = ["proba_of"]


def proba_of(model, names: list, params: dict) -> Callable[[np.ndarray], np.ndarray]:
    """A function from a (units x features) float array to the probability of the positive class."""
    direct = _booster_call(model, params)
    if direct is not None:
        return direct

    def through_pipeline(features: np.ndarray) -> np.ndarray:
        return model.predict_proba(pd.DataFrame(features, columns=names), **params)[:, 1]
    return through_pipeline


def _booster_call(model, params: dict):
    """Predict through a LightGBM binary classifier's booster, or None where that could differ."""
    steps = model.steps if isinstance(model, Pipeline) else [("model", model)]
    if len(steps) != 1:
        return None  # other steps transform the features first
    classifier = steps[0][1]
    try:
        from lightgbm import LGBMClassifier
    except ImportError:  # the default model's library is a dependency, but a detector may use another model
        return None
    if type(classifier) is not LGBMClassifier or len(classifier.classes_) != 2 or callable(classifier.objective_):
        return None
    threads = params.get("num_threads", classifier.n_jobs)
    chosen = classifier.get_params()
    # Only the thread count may be given, as a plain positive number (LightGBM gives 0 and negative
    # counts meanings of its own); prediction options set on the classifier (early stopping of
    # prediction, raw scores) leave the call to the classifier itself.
    if set(params) - {"num_threads"} or not isinstance(threads, int) or threads <= 0 or any(
            name.startswith(("pred", "num_iteration", "start_iteration")) for name in chosen):
        return None
    booster = classifier.booster_

    def through_booster(features: np.ndarray) -> np.ndarray:
        return booster.predict(np.ascontiguousarray(features, dtype=np.float64), num_threads=threads)
    return through_booster
