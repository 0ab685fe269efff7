"""The fold runner: in-fold features, one model per variant, predictions back to the main process.

In every fold the feature transformers are cloned and fitted on the training units only (contract 2), then
transform the training and the test units.  Every variant — mined, rules, combined, combined without a rule, mined
plus a rule — is a subset of the columns of those two in-fold matrices.  That equals a separate pipeline per variant
because a transformer's fitted state does not depend on which of its columns a model later reads.
"""

from __future__ import annotations

import sys
import time
import warnings
from dataclasses import dataclass, field

import joblib
import numpy as np
import pandas as pd
from sklearn.base import clone
from threadpoolctl import threadpool_limits
from tqdm import tqdm

from ..errors import EvaluationError
from ..ship.bind import log_params
from .guards import Finding, feature_findings
from .metrics import kappa_threshold
from .splits import Fold

__all__ = ["FoldFeatures", "fold_features", "column_names", "dense", "TransformerSource", "PrecomputedSource", "Job",
           "Task", "Outcome", "run_task", "run_chunk", "chunks", "run_all", "variant_columns", "rule_of_column"]


@dataclass(frozen=True, eq=False)
class FoldFeatures:
    """In-fold feature matrices and which columns belong to the mined block and to each rule."""

    train: np.ndarray
    test: np.ndarray
    names: list
    mined: np.ndarray
    rules: dict


def rule_of_column(column: str, rule_names) -> str | None:
    """The rule a ``<rule>__<summary>`` column belongs to (the longest rule name that prefixes it)."""
    head = column.rsplit("__", 1)[0]
    if head in rule_names:
        return head
    hits = [r for r in rule_names if column.startswith(f"{r}__")]
    return max(hits, key=len) if hits else None


def column_names(estimator, Z, prefix: str) -> list:
    if isinstance(Z, pd.DataFrame):
        base = [str(c) for c in Z.columns]
    elif hasattr(estimator, "get_feature_names_out"):
        base = [str(c) for c in estimator.get_feature_names_out()]
    else:
        base = [f"x{j}" for j in range(np.shape(Z)[1])]
    return [f"{prefix}__{b}" for b in base]


def dense(Z) -> np.ndarray:
    if hasattr(Z, "toarray"):
        Z = Z.toarray()
    return np.asarray(Z, dtype=np.float64)


class TransformerSource:
    """Features from transformers refitted in every fold: the mined features and the rule features."""

    def __init__(self, X: pd.DataFrame, mined, rules, rule_names: list):
        self.X, self.mined, self.rules, self.rule_names = X, mined, rules, list(rule_names)
        # The logs travel to the workers beside the transformers (a fitted prototype pickles without its log)
        # and are set again on every clone there: transport, not part of any fitted artefact.
        self.logs = {"mined": log_params(mined), "rules": log_params(rules)}

    def features(self, train: np.ndarray, test: np.ndarray, y_train: np.ndarray) -> FoldFeatures:
        Xtr, Xte = self.X.iloc[train], self.X.iloc[test]
        blocks = []
        for prefix, prototype in (("mined", self.mined), ("rules", self.rules)):
            est = clone(prototype).set_params(**self.logs[prefix])
            Ztr = est.fit_transform(Xtr, y_train)
            Zte = est.transform(Xte)
            blocks.append((column_names(est, Ztr, prefix), dense(Ztr), dense(Zte)))
        return fold_features(blocks[0], blocks[1], self.rule_names)


def fold_features(mined: tuple, rules: tuple, rule_names: list) -> FoldFeatures:
    """One fold's FoldFeatures from the ``(column names, train matrix, test matrix)`` of both blocks."""
    (mined_names, mtr, mte), (rule_cols, rtr, rte) = mined, rules
    owners = {r: [] for r in rule_names}
    for j, name in enumerate(rule_cols):
        owner = rule_of_column(name.removeprefix("rules__"), rule_names)
        if owner is None:
            raise EvaluationError(f"incremental_value: the rule features produced a column {name!r} that "
                                  f"belongs to none of the rules {rule_names!r}; columns must be named "
                                  "'<rule>__<summary>'.")
        owners[owner].append(len(mined_names) + j)
    return FoldFeatures(np.hstack([mtr, rtr]), np.hstack([mte, rte]), mined_names + rule_cols,
                        np.arange(len(mined_names)), {r: np.asarray(c, dtype=np.int64) for r, c in owners.items()})


class PrecomputedSource:
    """Features computed once for all units (nothing refitted per fold); folds take row subsets."""

    def __init__(self, values: np.ndarray, names: list, mined: np.ndarray, rules: dict):
        self.values, self.names, self.mined, self.rules = values, names, mined, rules

    def features(self, train: np.ndarray, test: np.ndarray, y_train: np.ndarray) -> FoldFeatures:
        return FoldFeatures(self.values[train], self.values[test], self.names, self.mined, self.rules)


def variant_columns(ff: FoldFeatures, ablation: bool) -> dict:
    """Column positions of every variant; mined columns first, as the shipped FeatureUnion orders them."""
    rule_cols = np.concatenate([ff.rules[r] for r in ff.rules] or [np.zeros(0, dtype=np.int64)])
    out = {"mined": ff.mined, "rules": rule_cols, "combined": np.concatenate([ff.mined, rule_cols])}
    if ablation:
        for r, cols in ff.rules.items():
            out[f"without:{r}"] = np.setdiff1d(out["combined"], cols, assume_unique=True)
            out[f"plus:{r}"] = np.concatenate([ff.mined, cols])
    return {k: np.asarray(v, dtype=np.int64) for k, v in out.items()}


@dataclass(frozen=True, eq=False)
class Job:
    """What every fold task shares."""

    source: object
    y: np.ndarray
    groups: np.ndarray
    model: object
    task: str
    ablation: bool
    fractions: tuple
    threads: int | None = None
    guards: bool = True


@dataclass(frozen=True, eq=False)
class Task:
    """One fold to run: a cross-validation fold (with learning-curve subsamples) or a transfer fold."""

    kind: str
    fold: Fold
    seed: int
    curve: bool = True  # run the learning-curve subsamples in this fold (the first repeat only, by default)


@dataclass(eq=False)
class Outcome:
    """What a fold sends back: test predictions per variant and what the report needs about the fold."""

    kind: str
    fold: Fold
    n_train_students: int
    n_test_students: int
    preds: dict
    thresholds: dict
    curve: dict = field(default_factory=dict)
    findings: list = field(default_factory=list)
    counts: dict = field(default_factory=dict)
    issues: list = field(default_factory=list)
    caught: list = field(default_factory=list)
    seconds: dict = field(default_factory=dict)


def predict_scores(est, Z: np.ndarray, task: str) -> np.ndarray:
    if task == "regression":
        return np.asarray(est.predict(Z), dtype=float).ravel()
    classes = list(getattr(est, "classes_", [0, 1]))
    return np.asarray(est.predict_proba(Z), dtype=float)[:, classes.index(1)]


def _fit_predict(job: Job, ff: FoldFeatures, cols: np.ndarray, y_tr: np.ndarray, rows: np.ndarray, where: str):
    """Fit a clone of the model on training rows ``rows`` (positions in ``ff.train``) and columns ``cols``.

    Returns the test predictions and the in-sample predictions on those training rows (classification only).
    """
    classification = job.task == "classification"
    if len(cols) == 0:
        constant = float(y_tr.mean())
        return np.full(len(ff.test), constant), np.full(len(rows), constant)
    # Plain arrays, columns in FeatureUnion order (mined, then rules): pandas frames would only add validation
    # overhead to the many small fits, and models give the same numbers either way.
    Ztr = ff.train[np.ix_(rows, cols)]
    est = clone(job.model)
    try:
        est.fit(Ztr, y_tr.astype(int) if classification else y_tr)
        test = predict_scores(est, ff.test[:, cols], job.task)
        train = predict_scores(est, Ztr, job.task) if classification else None
    except EvaluationError:
        raise
    except Exception as exc:
        raise EvaluationError(f"incremental_value: the model failed on {where}: {type(exc).__name__}: {exc} "
                              "If it cannot take missing values (NaN marks e.g. units without attempts), wrap it "
                              "in a Pipeline with an imputer, or use the default LightGBM model.") from exc
    return test, train


def _fit_variants(job: Job, ff: FoldFeatures, variants: dict, y_train: np.ndarray, rows: np.ndarray, where: str):
    """Predictions per variant; identical column sets are fitted once."""
    preds, thresholds, done = {}, {}, {}
    y_tr = y_train[rows]
    two_classes = job.task != "classification" or len(np.unique(y_tr)) == 2
    for name, cols in variants.items():
        key = tuple(cols.tolist())
        if key not in done:
            if not two_classes:
                done[key] = (np.full(len(ff.test), np.nan), None)
            else:
                test, train = _fit_predict(job, ff, cols, y_tr, rows, f"{where}, variant {name!r}")
                thr = kappa_threshold(y_tr, train) if train is not None else None
                done[key] = (test, thr)
        preds[name], thresholds[name] = done[key]
    return preds, thresholds


def _curve(job: Job, task: Task, ff: FoldFeatures, variants: dict) -> dict:
    """Predictions of mined and combined when the model sees only a share of the training students."""
    train_groups = job.groups[task.fold.train]
    students = np.unique(train_groups)
    order = np.random.default_rng(task.seed).permutation(students)
    out = {}
    for fraction in job.fractions:
        if fraction >= 1.0:
            continue
        keep = order[: max(2, int(np.ceil(fraction * len(students))))]  # nested: smaller shares are subsets
        rows = np.flatnonzero(np.isin(train_groups, keep))
        subset = {v: variants[v] for v in ("mined", "combined")}
        where = f"repeat {task.fold.repeat}, fold {task.fold.fold} ({fraction:g} of the training students)"
        out[fraction] = _fit_variants(job, ff, subset, job.y[task.fold.train], rows, where)[0]
    return out


def run_task(job: Job, task: Task) -> Outcome:
    """Run one fold (in a joblib worker): features, models, predictions."""
    fold = task.fold
    t0 = time.perf_counter()
    # With several workers the thread budget holds for every library in a worker (BLAS, OpenMP), not only the
    # default model; a single worker leaves the caller's thread settings alone (threads=None).
    with warnings.catch_warnings(record=True) as caught, threadpool_limits(limits=job.threads):
        warnings.simplefilter("always")
        ff = job.source.features(fold.train, fold.test, job.y[fold.train])
        t1 = time.perf_counter()
        variants = variant_columns(ff, job.ablation and task.kind == "cv")
        if task.kind == "transfer":
            variants = {v: variants[v] for v in ("mined", "rules", "combined")}
        where = (f"repeat {fold.repeat}, fold {fold.fold}" if task.kind == "cv"
                 else f"the transfer fold holding out population {fold.fold}")
        preds, thresholds = _fit_variants(job, ff, variants, job.y[fold.train], np.arange(len(fold.train)), where)
        curve = _curve(job, task, ff, variants) if task.kind == "cv" and task.curve and job.fractions else {}
        findings: list[Finding] = []
        if job.guards and task.kind == "cv":
            cols = variants["combined"]
            findings = feature_findings(ff.train[:, cols], job.y[fold.train], job.groups[fold.train],
                                        [ff.names[j] for j in cols], job.task)
    issues = [] if job.task != "classification" or len(np.unique(job.y[fold.train])) == 2 else [
        f"the training part of {where} has only one class, so no model could be fitted"]
    return Outcome(task.kind, fold, int(len(np.unique(job.groups[fold.train]))),
                   int(len(np.unique(job.groups[fold.test]))), preds, thresholds, curve, findings,
                   {"mined": int(len(ff.mined)), "rules": int(len(variants["rules"])),
                    "per_rule": {r: int(len(c)) for r, c in ff.rules.items()}}, issues,
                   [(w.category, str(w.message)) for w in caught],
                   {"featurize": t1 - t0, "fit": time.perf_counter() - t1})


def run_parallel(function, arguments: list, workers: int, verbose: int, label: str, unit: str = "fold") -> list:
    """The one fold loop: ``function(*args)`` for each entry of ``arguments``, results in order.

    Runs through ``joblib.Parallel`` (so ``joblib.parallel_config`` applies) and draws one tqdm progress bar on
    stderr from the main process as folds finish, only when ``verbose >= 1``.
    """
    parallel = joblib.Parallel(n_jobs=workers, return_as="generator")
    results = []
    with tqdm(total=len(arguments), desc=label, unit=unit, disable=verbose < 1, file=sys.stderr) as bar:
        for result in parallel(joblib.delayed(function)(*args) for args in arguments):
            results.append(result)
            bar.update()
    return results


def run_chunk(job: Job, tasks: list) -> list:
    """Several folds in one worker call: the job (and the log it carries) is shipped and unpacked once, and the
    log's memoised per-event arrays are reused by every fold of the chunk."""
    return [run_task(job, t) for t in tasks]


def chunks(tasks: list, workers: int) -> list[list]:
    """One task per call when running in this process; else about two chunks per worker, in order."""
    if workers <= 1:
        return [[t] for t in tasks]
    size = max(1, -(-len(tasks) // (2 * workers)))
    return [tasks[i:i + size] for i in range(0, len(tasks), size)]


def run_all(job: Job, tasks: list, workers: int, verbose: int) -> list:
    """Every task of :func:`incremental_value` through :func:`run_parallel`, in order.

    With several workers the folds go in chunks (:func:`chunks`): shipping the job with every single fold cost
    more than the fold's features themselves (measured in benchmarks/incremental_value.py's stage times).
    """
    parts = chunks(tasks, workers)
    unit = "fold" if all(len(p) == 1 for p in parts) else "chunk of folds"
    done = run_parallel(run_chunk, [(job, p) for p in parts], workers, verbose, "incremental_value", unit)
    return [outcome for part in done for outcome in part]
