"""Checking the inputs of :func:`~rulefeat.evaluate.diagnose.diagnose`: settings, units, outcomes and models.

Everything here runs before any fold, so a typo in a column name fails in a second, not after the features of
every fold were computed.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from sklearn.base import clone

from ... import _frame
from ..._text import did_you_mean
from ..._validation import Interval, Satisfies, is_int, validate
from ...errors import EvaluationError
from ...limits import MAX_N_BOOT
from ...rules.transformer import RuleFeatures, as_ruleset
from .. import transformers
from ..inputs import check_units, label_codes, log_populations, read_target
from ..splits import check_splitter

__all__ = ["WHERE", "UnitInputs", "check_settings", "prepare_units", "read_outcomes", "rules_transformer",
           "mined_transformer", "check_classifier", "regression_counterpart"]

WHERE = "diagnose"
GAIN = "gain"


SETTINGS = {  # checked in this order, before the fold splitter
    "random_state": Satisfies(lambda v: v is None or (is_int(v) and v >= 0), "an integer >= 0"),
    "n_jobs": Satisfies(lambda v: v is None or (is_int(v) and v != 0),
                        "None or a non-zero integer (-1 for one worker per core)"),
    "shap_sample": Satisfies(lambda v: v is None or (is_int(v) and v >= 0), "an integer >= 0"),
    "n_boot": Interval(int, 1, MAX_N_BOOT, noun="an integer"),
    "verbose": Interval(int, 0, noun="an integer"),
}


def check_settings(cv, shap_sample, n_boot, random_state, n_jobs, verbose) -> dict:
    """The validated settings; ``shap_sample`` None explains every held-out unit, 0 skips SHAP."""
    validate(WHERE, {"random_state": random_state, "n_jobs": n_jobs, "shap_sample": shap_sample, "n_boot": n_boot,
                     "verbose": verbose}, SETTINGS, error=EvaluationError)
    return {"cv": check_splitter(cv, where=WHERE),
            "shap_sample": None if shap_sample is None else int(shap_sample),
            "n_boot": int(n_boot), "random_state": random_state,
            "n_jobs": n_jobs, "verbose": int(verbose)}


@dataclass(frozen=True, eq=False)
class UnitInputs:
    """The units in positional form: row i of every array is row i of the units table."""

    X: pd.DataFrame
    y: np.ndarray
    positive: object
    students: np.ndarray
    student_labels: np.ndarray
    log_codes: np.ndarray
    populations: np.ndarray
    population_names: list
    population_source: str | None
    notes: list = field(default_factory=list)


def _binary_label(values: pd.Series) -> tuple[np.ndarray, object]:
    try:
        distinct = np.unique(values.to_numpy())
    except TypeError as exc:
        raise EvaluationError(f"{WHERE}: 'y' mixes value types that cannot be ordered.") from exc
    if len(distinct) != 2:
        shown = distinct[:5].tolist()
        raise EvaluationError(f"{WHERE}: 'y' must hold exactly two classes (a detector's label: the behaviour "
                              f"seen or not); found {len(distinct)} distinct values ({shown!r}).")
    return (values.to_numpy() == distinct[1]).astype(float), distinct[1]


def _unit_populations(X, population, log, log_codes, notes) -> tuple[np.ndarray, list, str | None]:
    if population is None:
        if log.has("population"):
            codes, names = log_populations(log, log_codes, notes)
            return codes, names, "log"
        return np.full(len(X), -1, dtype=np.int64), [], None
    cols = [str(c) for c in X.columns]
    if not isinstance(population, str) or population not in X.columns:
        raise EvaluationError(f"The 'population' parameter of {WHERE} must name a column of units (or be None to "
                              f"use the log's population field). Got {population!r}."
                              f"{did_you_mean(str(population), cols)} Columns: {cols!r}.")
    codes, names = label_codes(X[population].reset_index(drop=True))
    return codes, names, population


def prepare_units(log, units, y, population, unit) -> UnitInputs:
    """Check the units table (pandas, pyarrow or polars) against the log and read the label, students and populations."""
    units = _frame.as_pandas(units)
    spec = check_units(log, units, unit, where=WHERE)
    values, y_column = read_target(units, y, len(units), where=WHERE)
    y_coded, positive = _binary_label(values)
    X = (units.drop(columns=[y_column]) if y_column is not None else units).reset_index(drop=True)
    labels = X[spec.student]
    log_codes = log.student_codes(labels, missing="error", where=WHERE)
    notes: list = []
    pops, names, source = _unit_populations(X, population, log, log_codes, notes)
    students, _ = label_codes(labels)
    return UnitInputs(X, y_coded, positive, students, labels.to_numpy(), log_codes, pops, names, source, notes)


# -- outcomes ----------------------------------------------------------------------------------------------
def _outcome_values(outcomes: pd.DataFrame, outcome: str) -> pd.Series:
    cols = [str(c) for c in outcomes.columns]
    if outcome == GAIN:
        lacking = [c for c in ("pretest", "posttest") if c not in outcomes.columns]
        if lacking:
            raise EvaluationError(f"{WHERE}: outcome='gain' is posttest − pretest, but outcomes lacks "
                                  f"{lacking!r}.{did_you_mean(lacking[0], cols)} Columns: {cols!r}.")
        parts = [pd.to_numeric(outcomes[c], errors="coerce") for c in ("posttest", "pretest")]
        return parts[0] - parts[1]
    if not isinstance(outcome, str) or outcome not in outcomes.columns:
        options = [c for c in cols if c != "student"] + [GAIN]
        raise EvaluationError(f"The 'outcome' parameter of {WHERE} must name a column of outcomes or be 'gain'. "
                              f"Got {outcome!r}.{did_you_mean(str(outcome), options)} Columns: {cols!r}.")
    values = outcomes[outcome]
    if _frame.is_bool_dtype(values.dtype):
        return values.astype("float64")
    if not _frame.is_number_dtype(values.dtype):
        raise EvaluationError(f"{WHERE}: the outcome column {outcome!r} must be numeric (a score, or 0/1); got "
                              f"dtype {values.dtype}. Encode it first.")
    return values.astype("float64")


def read_outcomes(outcomes, outcome) -> pd.Series:
    """One outcome per student, indexed by student label (NaN rows kept; they are counted later)."""
    if not isinstance(outcomes, pd.DataFrame):
        raise EvaluationError(f"{WHERE}: 'outcomes' must be a pandas DataFrame with a 'student' column and the "
                              f"outcome column, one row per student. Got {type(outcomes).__name__}.")
    cols = [str(c) for c in outcomes.columns]
    if len(outcomes) == 0:
        raise EvaluationError(f"{WHERE}: 'outcomes' has no rows; give one row per student, or outcomes=None.")
    if "student" not in outcomes.columns:
        raise EvaluationError(f"{WHERE}: 'outcomes' has no 'student' column, so its rows cannot be matched to "
                              f"the students of units.{did_you_mean('student', cols)} Columns: {cols!r}. Rename "
                              "the column holding the student ids to 'student'.")
    values = _outcome_values(outcomes, outcome)
    students = outcomes["student"]
    dupes = students[students.duplicated()].unique()
    if len(dupes):
        raise EvaluationError(f"{WHERE}: 'outcomes' has more than one row for {len(dupes)} students (e.g. "
                              f"{dupes[0]!r}); give one row per student.")
    return pd.Series(values.to_numpy(dtype=float), index=pd.Index(students.to_numpy(), name="student"),
                     name=str(outcome))


# -- transformers and models -------------------------------------------------------------------------------
def rules_transformer(rules, log, unit):
    """A RuleFeatures on ``log`` (built from the rules, or the given one): its fitted program gives firings."""
    if isinstance(rules, RuleFeatures):
        if rules.log is not log:
            raise EvaluationError(f"{WHERE}: the RuleFeatures given as 'rules' reads a different EventLog than "
                                  "the 'log' argument. Build it with log=<the same log>.")
        return rules, as_ruleset(rules.rules)
    if hasattr(rules, "fit") and hasattr(rules, "transform"):
        raise EvaluationError(f"{WHERE}: 'rules' must be rules (RuleSet, list of Rule, TOML text or path) or a "
                              f"RuleFeatures; got a {type(rules).__name__}. The diagnostics read each rule's "
                              "firings from RuleFeatures' fitted program.")
    ruleset = as_ruleset(rules)
    return RuleFeatures(rules=ruleset, log=log, unit=unit), ruleset


def mined_transformer(mined, log, unit, seed: int):
    """``mined``: None (default LogFeatures), a dict of LogFeatures parameters, or a transformer on ``log``."""
    return transformers.mined_transformer(mined, log, unit, seed, where=WHERE)


def check_classifier(model):
    if not (hasattr(model, "fit") and hasattr(model, "get_params") and hasattr(model, "predict_proba")):
        raise EvaluationError(f"The 'model' parameter of {WHERE} must be a scikit-learn classifier with fit, "
                              f"get_params and predict_proba. Got {type(model).__name__}.")
    return model


def _counterparts() -> dict:
    """Classifier class -> regressor class of the same family (a table, so adding one is one line)."""
    from lightgbm import LGBMClassifier, LGBMRegressor
    from sklearn import ensemble, linear_model, neighbors, tree

    return {LGBMClassifier: LGBMRegressor,
            ensemble.RandomForestClassifier: ensemble.RandomForestRegressor,
            ensemble.ExtraTreesClassifier: ensemble.ExtraTreesRegressor,
            ensemble.GradientBoostingClassifier: ensemble.GradientBoostingRegressor,
            ensemble.HistGradientBoostingClassifier: ensemble.HistGradientBoostingRegressor,
            tree.DecisionTreeClassifier: tree.DecisionTreeRegressor,
            neighbors.KNeighborsClassifier: neighbors.KNeighborsRegressor,
            linear_model.LogisticRegression: linear_model.Ridge}


# Parameters whose classifier values mean nothing (or something else) to the regressor.
_CLASS_ONLY = frozenset({"class_weight", "criterion", "loss", "objective", "is_unbalance", "scale_pos_weight",
                         "solver"})


def _swap(estimator):
    """The regressor of ``estimator``'s family with its shared parameters, or None when unknown."""
    from sklearn.pipeline import Pipeline

    if isinstance(estimator, Pipeline):
        last_name, last = estimator.steps[-1]
        swapped = _swap(last)
        return None if swapped is None else clone(estimator).set_params(**{last_name: swapped})
    target = _counterparts().get(type(estimator))
    if target is None:
        return None
    accepted = target().get_params(deep=False)
    shared = {k: v for k, v in estimator.get_params(deep=False).items() if k in accepted and k not in _CLASS_ONLY}
    return target(**shared)


def regression_counterpart(model, fallback) -> tuple[object, str | None]:
    """The regressor that predicts a rule's unit value from the mined features, and a note when it is a fallback."""
    if model is None:
        return fallback, None
    swapped = _swap(model)
    if swapped is not None:
        return swapped, None
    return fallback, (f"The model {type(model).__name__} has no known regression counterpart, so redundancy (R² "
                      "of a rule's unit value from the mined features) uses the default LightGBM regressor.")
