"""One fold of the rule diagnostics: in-fold features, firings of the held-out students, models and SHAP.

The transformers are cloned and fitted on the training units only (contract 2); everything a fold sends back
describes its held-out units and students, so pooling the folds gives out-of-fold values for every unit.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from sklearn.base import clone
from threadpoolctl import threadpool_limits

from ..._aggregate import Aggregator
from ...errors import EvaluationError
from ...ship.bind import log_params
from ..folds import column_names, dense, predict_scores, run_parallel
from ..splits import Fold
from .attribution import tree_shap
from .inputs import WHERE

__all__ = ["FoldJob", "FoldResult", "primary_summary", "run_folds"]

_SHAP_NOTICE = re.compile(r".*shap values output has changed")

# A rule's unit value is its first reported summary in this order (else its first summary).
PRIMARY_ORDER = ("rate", "count")


def primary_summary(report) -> str:
    """The summary that stands for a rule's firing in a unit: ``rate``, else ``count``, else the first one."""
    return next((s for s in PRIMARY_ORDER if s in report), report[0])


@dataclass(frozen=True, eq=False)
class FoldJob:
    """What every fold shares."""

    X: pd.DataFrame
    y: np.ndarray
    log: object
    mined: object
    rules: object
    classifier: object
    regressor: object
    shap_sample: int | None
    shap: bool
    threads: int | None = None

    def __post_init__(self):
        # The logs travel to the workers beside the transformers and are set again on every clone there.
        object.__setattr__(self, "logs", {"mined": log_params(self.mined), "rules": log_params(self.rules)})


@dataclass(eq=False)
class FoldResult:
    """What a fold sends back (arrays over its held-out units ``fold.test`` or its held-out students)."""

    fold: Fold
    rules: list
    columns: dict
    mined_score: np.ndarray
    value: dict
    fired: dict
    predicted_value: dict
    predicted_any: dict
    students: np.ndarray
    student_events: np.ndarray
    student_firings: dict
    shap: dict | None = None
    issues: list = field(default_factory=list)
    caught: list = field(default_factory=list)


@dataclass(frozen=True, eq=False)
class _Features:
    mined_train: np.ndarray
    mined_test: np.ndarray
    mined_names: list
    rules_train: pd.DataFrame
    rules_test: pd.DataFrame
    rules: object


def _features(job: FoldJob, fold: Fold) -> _Features:
    Xtr, Xte, y_tr = job.X.iloc[fold.train], job.X.iloc[fold.test], job.y[fold.train]
    mined = clone(job.mined).set_params(**job.logs["mined"])
    raw = mined.fit_transform(Xtr, y_tr)
    names = column_names(mined, raw, "mined")
    mined_test = dense(mined.transform(Xte))
    rules = clone(job.rules).set_params(**job.logs["rules"])
    rules_train = rules.fit_transform(Xtr, y_tr)
    return _Features(dense(raw), mined_test, names, rules_train, rules.transform(Xte), rules)


def _fit_predict(prototype, Z_train, target, Z_test, kind: str, where: str) -> np.ndarray:
    """Fit a clone on the training rows; predict the test rows (a constant when there is nothing to learn)."""
    if Z_train.shape[1] == 0 or len(np.unique(target)) < 2:
        return np.full(len(Z_test), float(np.mean(target)) if len(target) else np.nan)
    est = clone(prototype)
    try:
        est.fit(Z_train, target.astype(int) if kind == "classification" else target)
        return predict_scores(est, Z_test, kind)
    except EvaluationError:
        raise
    except Exception as exc:
        raise EvaluationError(f"{WHERE}: the model failed on {where}: {type(exc).__name__}: {exc} If it cannot "
                              "take missing values (NaN), wrap it in a Pipeline with an imputer, or use the "
                              "default LightGBM model.") from exc


def _unit_counts(rules, log, X: pd.DataFrame, fired: dict, names: list) -> dict:
    """Firings of every rule in each unit of X (the fitted rules' own unit resolution)."""
    index = rules.unit_.resolve(log, X, missing_students=rules.missing_students, where=WHERE)
    agg = Aggregator(index, log.values("time"))
    return {r: agg.count(fired[r]) for r in names}


def _student_counts(log, codes: np.ndarray, fired: dict, names: list) -> tuple[np.ndarray, dict]:
    """Events and firings of every rule over all the events of the given students (log codes)."""
    first, last = log.student_bounds()
    events = (last[codes] - first[codes]).astype(np.int64)
    firings = {}
    for r in names:
        total = np.concatenate([[0], np.cumsum(fired[r], dtype=np.int64)])
        firings[r] = total[last[codes]] - total[first[codes]]
    return events, firings


def _redundancy(job, feats, counts_train, columns, where) -> tuple[dict, dict]:
    """Out-of-fold predictions of each rule's unit value (regression) and of its any-firing (classification)."""
    values, anys = {}, {}
    for r, col in columns.items():
        target = feats.rules_train[col].to_numpy(dtype=float)
        ok = np.isfinite(target)
        values[r] = _fit_predict(job.regressor, feats.mined_train[ok], target[ok], feats.mined_test, "regression",
                                 f"{where}, the mined model of {col!r}") if ok.any() else \
            np.full(len(feats.mined_test), np.nan)
        fired = (counts_train[r] > 0).astype(float)
        anys[r] = (_fit_predict(job.classifier, feats.mined_train, fired, feats.mined_test, "classification",
                                f"{where}, the mined model of {r!r} firing") if len(np.unique(fired)) == 2 else None)
    return values, anys


def _shap(job, feats, y_train, seed: int, where: str) -> dict:
    rule_names = [str(c) for c in feats.rules_train.columns]
    names = feats.mined_names + rule_names
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise EvaluationError(f"{WHERE}: rule features {dupes!r} have the names of mined features; rename the rule.")
    Z_train = np.hstack([feats.mined_train, feats.rules_train.to_numpy(dtype=float)])
    Z_test = pd.DataFrame(np.hstack([feats.mined_test, feats.rules_test.to_numpy(dtype=float)]), columns=names)
    est = clone(job.classifier)
    try:
        est.fit(Z_train, y_train.astype(int))
    except Exception as exc:
        raise EvaluationError(f"{WHERE}: the combined model failed on {where}: {type(exc).__name__}: {exc}") from exc
    values, expected = tree_shap(est, Z_test, sample_size=job.shap_sample, random_state=seed)
    rows = values.index.to_numpy()
    raw = np.asarray(est.predict(Z_test.iloc[rows].to_numpy(), raw_score=True), dtype=float)
    return {"values": values.reset_index(drop=True), "features": Z_test.iloc[rows].reset_index(drop=True),
            "rows": rows, "expected": float(expected), "raw": raw, "rule_columns": rule_names}


def _fold_body(job: FoldJob, fold: Fold, seed: int) -> FoldResult:
    where = f"fold {fold.fold}"
    feats = _features(job, fold)
    rules = feats.rules
    names = list(rules.selected_)
    columns = {r: f"{r}__{primary_summary(rules.program_.report[r])}" for r in names}
    # The per-event firings RuleFeatures computed for transform (cached on the fitted transformer), not a second
    # evaluation of every rule on the log.
    fired = {r: np.asarray(v, dtype=bool) for r, v in rules._fired().items() if r in columns}
    y_tr = job.y[fold.train]
    counts_train = _unit_counts(rules, job.log, job.X.iloc[fold.train], fired, names)
    counts_test = _unit_counts(rules, job.log, job.X.iloc[fold.test], fired, names)
    issues = []
    one_class = len(np.unique(y_tr)) < 2
    if one_class:
        issues.append(f"the training part of {where} has one class only, so its units got no mined score and no "
                      "SHAP values")
    score = np.full(len(fold.test), np.nan) if one_class else _fit_predict(
        job.classifier, feats.mined_train, y_tr, feats.mined_test, "classification", f"{where}, the mined model")
    pred_value, pred_any = _redundancy(job, feats, counts_train, columns, where)
    codes = np.unique(job.log.student_codes(job.X.iloc[fold.test][rules.unit_.student], missing="empty"))
    codes = codes[codes >= 0]
    events, firings = _student_counts(job.log, codes, fired, names)
    shap = _shap(job, feats, y_tr, seed, where) if job.shap and not one_class else None
    return FoldResult(fold, names, columns, score, {r: feats.rules_test[c].to_numpy(dtype=float)
                                                   for r, c in columns.items()},
                      counts_test, pred_value, pred_any, codes, events, firings, shap, issues)


def run_fold(job: FoldJob, fold: Fold, seed: int) -> FoldResult:
    """Run one fold (in a joblib worker), recording its warnings so the main process can report them."""
    with warnings.catch_warnings(record=True) as caught, threadpool_limits(limits=job.threads):
        warnings.simplefilter("always")
        result = _fold_body(job, fold, seed)
    # Warning filters are process-wide: under a threading backend another fold's recording can override the filter
    # with which tree_shap silences shap's notice about its output format, so that known notice is dropped here.
    result.caught = [(w.category, str(w.message)) for w in caught if not _SHAP_NOTICE.match(str(w.message))]
    return result


def run_folds(job: FoldJob, folds: list, seeds: list, workers: int, verbose: int) -> list:
    """Every fold of :func:`diagnose` through the evaluation's one fold loop, in fold order."""
    return run_parallel(run_fold, [(job, f, s) for f, s in zip(folds, seeds, strict=True)], workers, verbose, WHERE)
