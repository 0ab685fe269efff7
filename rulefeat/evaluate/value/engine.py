"""``incremental_value``: do expert rules add predictive value over mined log features?

Student-grouped cross-validation of three detectors on the same folds — mined features only, rule features only,
both — plus, per rule, the combined detector without that rule and the mined detector with only that rule; a
learning curve; and a leave-one-population-out transfer view.  The fold runner lives in :mod:`._runner`, the
statistics of each comparison in :mod:`.compare`, the results dict is assembled in :mod:`._assemble`.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.base import clone
from sklearn.pipeline import FeatureUnion, Pipeline

from ... import _frame
from ..._text import did_you_mean
from ..._validation import Flag, Interval, Options, validate
from ...errors import EvaluationError
from ...limits import MAX_N_BOOT, MAX_REPEATS
from ...report.value import IncrementalValueReport
from ..folds import Job, PrecomputedSource, Task, TransformerSource, run_all
from ..inputs import WHERE, prepare, prepare_precomputed
from ..models import available_cores, default_model, model_threads, thread_budget
from ..seeds import Seeds
from ..splits import check_splitter, population_folds, student_folds
from ..transformers import mined_transformer, rules_transformer
from . import assemble as _assemble

__all__ = ["incremental_value", "incremental_value_precomputed", "make_detector", "evaluate_inputs"]

ALTERNATIVES = ("greater", "two-sided")
# Chosen by the calibration study (docs/inference.md): one repeat leaves the corrected t conservative and
# underpowered (it missed a real +0.02 AUC four times in ten); three keep the default run within its time budget.
DEFAULT_REPEATS = 3


SETTINGS = {  # checked in this order; the fold splitter and the learning-curve fractions have their own checks
    "alternative": Options(ALTERNATIVES),
    "ablation": Flag(),
    "transfer": Flag(),
    "repeats": Interval(int, 1, MAX_REPEATS, noun="an integer"),
    "n_boot": Interval(int, 1, MAX_N_BOOT, noun="an integer"),
    "verbose": Interval(int, 0, noun="an integer"),
}


def _fractions(learning_curve) -> tuple:
    if learning_curve is None or learning_curve is False:
        return ()
    try:
        values = sorted({float(f) for f in learning_curve})
    except (TypeError, ValueError) as exc:
        raise EvaluationError(f"The 'learning_curve' parameter of {WHERE} must be a list of fractions in (0, 1] "
                              f"or None. Got {learning_curve!r} instead.") from exc
    if any(not 0 < f <= 1 for f in values):
        raise EvaluationError(f"The 'learning_curve' parameter of {WHERE} must hold fractions in (0, 1]. "
                              f"Got {learning_curve!r} instead.")
    return tuple(values)


def _settings(cv, repeats, n_boot, alternative, learning_curve, ablation, transfer, verbose, random_state,
              unit) -> dict:
    validate(WHERE, {"alternative": alternative, "ablation": ablation, "transfer": transfer, "repeats": repeats,
                     "n_boot": n_boot, "verbose": verbose}, SETTINGS, error=EvaluationError)
    return {"cv": check_splitter(cv), "repeats": int(repeats),
            "n_boot": int(n_boot), "alternative": alternative,
            "fractions": _fractions(learning_curve), "ablation": bool(ablation), "transfer": bool(transfer),
            "verbose": int(verbose), "random_state": random_state,
            "unit": unit if isinstance(unit, str) else getattr(unit, "name", str(unit))}


def _check_model(model, task: str):
    if not (hasattr(model, "fit") and hasattr(model, "get_params")):
        raise EvaluationError(f"The 'model' parameter of {WHERE} must be a scikit-learn estimator (with fit and "
                              f"get_params). Got {type(model).__name__}.")
    if task == "classification" and not hasattr(model, "predict_proba"):
        raise EvaluationError(f"{WHERE}: for classification the model needs predict_proba (AUC, log loss and "
                              f"Brier read probabilities); {type(model).__name__} has none.")
    if task == "regression" and not hasattr(model, "predict"):
        raise EvaluationError(f"{WHERE}: the model needs predict; {type(model).__name__} has none.")
    return model


def _rule_info(ruleset) -> list[dict]:
    return [{"name": r.name, "means": r.means, "why": r.why, "when": r.when, "report": list(r.report)}
            for r in ruleset]


def _tasks(inputs, settings, seeds) -> tuple[list, list, list]:
    cv_folds = student_folds(inputs.y, inputs.students, settings["cv"], settings["repeats"], seeds.splits,
                             inputs.task)
    curve_seeds = seeds.curve(len(cv_folds))
    # The learning curve is a picture of the trend, not a test: its subsamples run in the first repeat's folds
    # only, which saves four fits per later fold.
    first = cv_folds[0].repeat if cv_folds else 0
    tasks = [Task("cv", f, s, f.repeat == first) for f, s in zip(cv_folds, curve_seeds, strict=True)]
    pop_folds = population_folds(inputs.populations) if settings["transfer"] else []
    if len(pop_folds) < 2:
        pop_folds = []
    tasks += [Task("transfer", f, 0) for f in pop_folds]
    return tasks, cv_folds, pop_folds


def _evaluate(inputs, source, rule_info, rules_hash, ablation_rules, model, settings, n_jobs, seeds, data,
              notes, command, t0):
    """Run every fold and assemble the results dict and the out-of-fold tables."""
    tasks, cv_folds, pop_folds = _tasks(inputs, settings, seeds)
    workers, threads = thread_budget(n_jobs, len(tasks))
    if model is None:
        n_train = np.mean([len(t.fold.train) for t in tasks])
        model = default_model(inputs.task, seeds.model, model_threads(threads, n_train))
    model = _check_model(model, inputs.task)  # before any fold's features are computed
    if hasattr(source, "for_tasks"):  # a source that computes every fold's features up front (rulefeat.scale)
        source = source.for_tasks(tasks, inputs.y)
    t1 = time.perf_counter()
    try:
        job = Job(source, inputs.y, inputs.students, model, inputs.task, settings["ablation"],
                  settings["fractions"], threads if workers > 1 else None)
        outcomes = run_all(job, tasks, workers, settings["verbose"])
    finally:
        if hasattr(source, "close"):  # a source holding data elsewhere (rulefeat.scale) lets it go
            source.close()
    t2 = time.perf_counter()
    context = _assemble.Context(inputs=inputs, settings=settings, seeds=seeds, model=model,
                                rule_info=rule_info, rules_hash=rules_hash, ablation_rules=ablation_rules,
                                data=data, notes=list(inputs.notes) + notes, command=command)
    results, oof, oof_transfer = _assemble.results(context, outcomes, cv_folds, pop_folds)
    t3 = time.perf_counter()
    results["timing"].update({
        "prepare": t1 - t0,
        "featurize": float(sum(o.seconds["featurize"] for o in outcomes)),
        "fit": float(sum(o.seconds["fit"] for o in outcomes)),
        "folds": t2 - t1,
        "statistics": t3 - t2,
        "total": t3 - t0,
    })
    return results, oof, oof_transfer


def _report(results, oof, oof_transfer):
    return IncrementalValueReport(results, oof, oof_transfer)


def compute_incremental_value(log, units, y, rules, *, model=None, cv=5, repeats=DEFAULT_REPEATS,
                              population=None, unit="window", mined=None, n_jobs=None, random_state=None, verbose=0, n_boot=1000,
                              alternative="greater", learning_curve=(0.25, 0.5, 1.0), ablation=True,
                              transfer=True, task="auto", command=None):
    """Same as :func:`incremental_value` but returns ``(results, oof, oof_transfer)`` instead of the report."""
    t0 = time.perf_counter()
    inputs = prepare(log, units, y, population, unit, task)
    data = {"n_events": len(log), "log": log.summary()}
    return evaluate_inputs(inputs, log, rules, mined, data, TransformerSource, model=model, cv=cv, repeats=repeats,
                           unit=unit, n_jobs=n_jobs, random_state=random_state, verbose=verbose, n_boot=n_boot,
                           alternative=alternative, learning_curve=learning_curve, ablation=ablation,
                           transfer=transfer, command=command, t0=t0)


def evaluate_inputs(inputs, log, rules, mined, data: dict, source, *, model=None, cv=5, repeats=DEFAULT_REPEATS, unit="window",
                    n_jobs=None, random_state=None, verbose=0, n_boot=1000, alternative="greater",
                    learning_curve=(0.25, 0.5, 1.0), ablation=True, transfer=True, command=None, t0=None):
    """The evaluation of checked ``inputs``: ``(results, oof, oof_transfer)``.

    ``source(X, mined, rules, rule_names)`` makes the fold features (:class:`TransformerSource` on one
    machine); ``log`` is what the transformers read (None when the source brings the events itself, as
    :func:`rulefeat.scale.incremental_value` does); ``data`` describes the log for the report.
    """
    t0 = time.perf_counter() if t0 is None else t0
    settings = _settings(cv, repeats, n_boot, alternative, learning_curve, ablation, transfer, verbose,
                         random_state, unit)
    seeds = Seeds(random_state, settings["repeats"], WHERE)
    rules_tf, ruleset = rules_transformer(rules, log, unit)
    mined_tf = mined_transformer(mined, log, unit, seeds.features)
    info = _rule_info(ruleset)
    features = source(inputs.X, mined_tf, rules_tf, list(ruleset.names))
    return _evaluate(inputs, features, info, ruleset.text_hash(), list(ruleset.names), model, settings, n_jobs,
                     seeds, data, [], command, t0)


def incremental_value(log, units, y, rules, *, model=None, cv=5, repeats=DEFAULT_REPEATS, population=None,
                      unit="window", mined=None, n_jobs=None, random_state=None, verbose=0, n_boot=1000, alternative="greater",
                      learning_curve=(0.25, 0.5, 1.0), ablation=True, transfer=True, task="auto",
                      command=None):
    """Student-grouped evaluation of how much expert rules add to mined log features.

    Every fold refits the feature transformers on its training students only, then fits one model per variant
    on column subsets of the same in-fold matrices: ``mined``, ``rules``, ``combined`` and, with ``ablation``,
    ``without:<rule>`` (combined minus one rule) and ``plus:<rule>`` (mined plus one rule).

    Parameters
    ----------
    log : EventLog
        The events.
    units : pandas.DataFrame
        The units table X (one row per unit, with the unit's key columns).
    y : array-like, pandas.Series or str
        One label (or number, for regression) per unit, aligned with ``units``, or the name of a column of units
        (that column is then not given to the transformers).
    rules : RuleSet, list of Rule, TOML text, path, or RuleFeatures
        The expert rules (a RuleFeatures instance sets its own options, e.g. ``min_count``).
    model : scikit-learn estimator, optional
        Any classifier with ``predict_proba`` (or regressor), cloned for every fit; default
        :func:`~rulefeat.evaluate.default_model` (LightGBM) with the thread budget.  It sees feature tables
        with missing values (NaN), so wrap models that cannot take them with an imputer.
    cv : int or group-aware splitter, default 5
        An int k runs ``StratifiedGroupKFold(k, shuffle=True)`` by student (regression targets are stratified
        on quantile bins).  Splitters that ignore students are refused.
    repeats : int, default 3
        Repetitions of the cross-validation with different splits (seeds derived from ``random_state``); the
        headline test uses every fold of every repeat (docs/inference.md on the choice of 3).
    population : str, optional
        Column of units with each unit's population (school, class) for the transfer view; None uses the log's
        ``population`` field of the unit's student, if any.
    unit : str or Unit, default "window"
        What a row of units is.
    mined : dict or transformer, optional
        LogFeatures parameters (``{"families": [...], "max_features": 50}``) or a transformer instance.
    n_jobs : int, optional
        Parallel fold workers (see :func:`~rulefeat.evaluate.thread_budget`): None runs the folds one after
        another with every core for the model, -1 one worker per core; folds run through ``joblib.Parallel``,
        so ``joblib.parallel_config`` (e.g. a dask backend) applies.  The default model uses one thread when
        folds train on fewer than 10,000 units (see :func:`~rulefeat.evaluate.models.model_threads`).
    random_state : int, optional
        Seeds splits, model, features, bootstrap and learning-curve subsamples; the same value gives the same
        results dict (apart from ``timing``).
    verbose : int, default 0
        1 or more draws a progress bar on stderr.
    n_boot : int, default 1000
        Student-bootstrap replicates of every Δ interval.
    alternative : {"greater", "two-sided"}, default "greater"
        "greater": one-sided tests with H1 "the variant is better than its baseline" (Δ > 0 where higher is
        better; Δ < 0 for log loss, Brier, RMSE).  Δ is always reported as variant − baseline in the metric's
        own units.
    learning_curve : sequence of float or None, default (0.25, 0.5, 1.0)
        Shares of the training students the model sees (the transformers stay fitted on the whole training
        fold), in the folds of the first repeat; None skips the curve.
    ablation : bool, default True
        Run the per-rule variants (two extra fits per rule and fold).
    transfer : bool, default True
        Run leave-one-population-out.
    task : {"auto", "classification", "regression"}
        "auto": two distinct labels is classification; a float target (or integers with 10+ values) regression.
    command : str, optional
        The command line that ran the evaluation, kept in the reproducibility block.

    Returns
    -------
    IncrementalValueReport
        Wraps the results dict (schema in the report's docs), the out-of-fold predictions and those of the
        transfer view.

    Notes
    -----
    Δ is the mean over every fold and repeat of the per-fold difference; its interval (90 % for the default
    one-sided test, 95 % two-sided) and the headline p-value come from the one corrected resampled t-test on those
    differences, so the interval excludes 0 on the side of an improvement exactly when p < 0.05.  A student
    bootstrap of repeat 0's pooled predictions is kept as a secondary column (details in
    :mod:`rulefeat.evaluate.value.compare` and docs/inference.md).  Folds with one class or fewer than 3 students in their test part are
    reported in ``results["notes"]`` and left out of the fold statistics.
    """
    return _report(*compute_incremental_value(
        log, units, y, rules, model=model, cv=cv, repeats=repeats, population=population, unit=unit, mined=mined,
        n_jobs=n_jobs, random_state=random_state, verbose=verbose, n_boot=n_boot, alternative=alternative,
        learning_curve=learning_curve, ablation=ablation, transfer=transfer, task=task, command=command))


def _feature_table(table, name: str) -> pd.DataFrame:
    if not isinstance(table, pd.DataFrame):
        raise EvaluationError(f"{WHERE}: {name!r} must be a pandas DataFrame of numeric features. Got "
                              f"{type(table).__name__}.")
    bad = [str(c) for c in table.columns if not _frame.is_number_dtype(table[c].dtype)]
    if bad:
        raise EvaluationError(f"{WHERE}: {name!r} has non-numeric columns {bad[:5]!r}; encode them first.")
    return table


def _precomputed_rules(rules: pd.DataFrame, rule_columns) -> dict:
    names = [str(c) for c in rules.columns]
    if rule_columns is None:
        out: dict = {}
        for j, c in enumerate(names):
            out.setdefault(c.rsplit("__", 1)[0], []).append(j)
        return out
    position = {c: j for j, c in enumerate(names)}
    out = {}
    for rule, cols in rule_columns.items():
        unknown = [c for c in cols if c not in position]
        if unknown:
            raise EvaluationError(f"{WHERE}: rule_columns[{rule!r}] names columns {unknown!r} that the rules "
                                  f"table lacks.{did_you_mean(str(unknown[0]), names)}")
        out[str(rule)] = [position[c] for c in cols]
    return out


def compute_incremental_value_precomputed(mined, rules, y, students, *, rule_columns=None, population=None,
                                          model=None, cv=5, repeats=DEFAULT_REPEATS, n_jobs=None,
                                          random_state=None, verbose=0, n_boot=1000, alternative="greater", learning_curve=(0.25, 0.5, 1.0),
                                          ablation=True, transfer=True, task="auto", command=None):
    """Same as :func:`incremental_value_precomputed` but returns ``(results, oof, oof_transfer)``."""
    t0 = time.perf_counter()
    settings = _settings(cv, repeats, n_boot, alternative, learning_curve, ablation, transfer, verbose,
                         random_state, "precomputed")
    mined, rules = _feature_table(mined, "mined"), _feature_table(rules, "rules")
    if len(mined) != len(rules):
        raise EvaluationError(f"{WHERE}: 'mined' has {len(mined)} rows and 'rules' {len(rules)}; both need one "
                              "row per unit, in the same order.")
    inputs = prepare_precomputed(len(mined), y, students, population, task)
    seeds = Seeds(random_state, settings["repeats"], WHERE)
    blocks = _precomputed_rules(rules, rule_columns)
    values = np.hstack([mined.to_numpy(dtype=float), rules.to_numpy(dtype=float)])
    names = [f"mined__{c}" for c in mined.columns] + [f"rules__{c}" for c in rules.columns]
    offset = mined.shape[1]
    source = PrecomputedSource(values, names, np.arange(offset),
                               {r: np.asarray(c, dtype=np.int64) + offset for r, c in blocks.items()})
    info = [{"name": r, "means": "", "why": "", "when": "", "report": [str(rules.columns[j]).rsplit("__", 1)[-1]
                                                                       for j in c]} for r, c in blocks.items()]
    rules_hash = _assemble.hash_text("\n".join(f"{r}: {list(rules.columns[c])}" for r, c in blocks.items()))
    notes = ["The features were given precomputed: anything they learned from data was learned from every "
             "student, test students included; only the model was refitted in each fold."]
    data = {"n_events": 0, "log": {}}
    return _evaluate(inputs, source, info, rules_hash, list(blocks), model, settings, n_jobs, seeds, data, notes,
                     command, t0)


def incremental_value_precomputed(mined, rules, y, students, *, rule_columns=None, population=None, model=None,
                                  cv=5, repeats=DEFAULT_REPEATS, n_jobs=None, random_state=None, verbose=0,
                                  n_boot=1000, alternative="greater", learning_curve=(0.25, 0.5, 1.0), ablation=True,
                                  transfer=True, task="auto", command=None):
    """The evaluation of :func:`incremental_value` on feature tables computed beforehand.

    Only the model is refitted per fold, so this is leakage-safe only for features that learn nothing from data
    (counts, rates, fixed thresholds); the results carry a note saying so.  It runs the same splits, models and
    statistics as :func:`incremental_value`, and is much faster when the features are reused across many
    evaluations (e.g. calibration studies).

    Parameters
    ----------
    mined, rules : pandas.DataFrame
        Numeric feature tables, one row per unit, in the same order.
    y : array-like
        One label (or number) per unit.
    students : array-like
        Each unit's student (the grouping of every split).
    rule_columns : dict, optional
        ``{rule: [columns of rules]}``; by default columns ``<rule>__<summary>`` are grouped by ``<rule>``.
    population : array-like, optional
        Each unit's population, for the transfer view.
    model, cv, repeats, n_jobs, random_state, verbose, n_boot, alternative, learning_curve, ablation, transfer, \
task, command
        As in :func:`incremental_value`.

    Returns
    -------
    IncrementalValueReport
    """
    return _report(*compute_incremental_value_precomputed(
        mined, rules, y, students, rule_columns=rule_columns, population=population, model=model, cv=cv,
        repeats=repeats, n_jobs=n_jobs, random_state=random_state, verbose=verbose, n_boot=n_boot,
        alternative=alternative, learning_curve=learning_curve, ablation=ablation, transfer=transfer, task=task,
        command=command))


def make_detector(log, rules, *, unit="window", model=None, mined=None, random_state=None,
                  task: str = "classification") -> Pipeline:
    """The combined detector to ship: ``Pipeline([features: FeatureUnion(mined, rules), model])``.

    It is the ``combined`` variant of :func:`incremental_value`: cross-validating it with the same
    student-grouped folds gives the same predictions.  Its transformers refuse units that cover no events
    (``empty_units="error"``): to score another log's units, bind the fitted detector to that log with
    :func:`rulefeat.bind` (docs/ship.md).  Its feature union outputs pandas frames with columns
    ``mined__<feature>`` and ``rules__<rule>__<summary>``.

    Parameters
    ----------
    log : EventLog
    rules : RuleSet, list of Rule, TOML text, path, or RuleFeatures
    unit : str or Unit, default "window"
    model : scikit-learn estimator, optional
        Default :func:`~rulefeat.evaluate.default_model` for ``task`` using every core.
    mined : dict, transformer or False, optional
        As in :func:`incremental_value`; ``False`` leaves mined features out (a rules-only detector,
        which :class:`~rulefeat.LiveScorer` can run live).
    random_state : int, optional
        Seeds the default model and the default LogFeatures.
    task : {"classification", "regression"}, default "classification"
        Chooses the default model.

    Returns
    -------
    sklearn.pipeline.Pipeline
    """
    seeds = Seeds(random_state, 1, WHERE)  # the same seeds incremental_value gives the combined variant
    rules_tf, _ = rules_transformer(rules, log, unit)
    if mined is False:  # rules only: what live scoring takes (rulefeat.LiveScorer, docs/live.md)
        union = FeatureUnion([("rules", clone(_refusing(rules_tf, rules)))]).set_output(transform="pandas")
        return Pipeline([("features", union), ("model", model or default_model(task, seeds.model, available_cores()))])
    mined_tf = mined_transformer(mined, log, unit, seeds.features)
    # A shipped detector refuses units without events (e.g. windows of another log's students) rather than
    # scoring them as empty; transformers given ready-made keep their own setting.
    rules_tf = _refusing(rules_tf, rules)
    if mined is None or isinstance(mined, dict):
        mined_tf = mined_tf.set_params(**{"empty_units": "error", **(mined or {})})
    if model is None:
        model = default_model(task, seeds.model, available_cores())
    union = FeatureUnion([("mined", clone(mined_tf)), ("rules", clone(rules_tf))]).set_output(transform="pandas")
    return Pipeline([("features", union), ("model", model)])


def _refusing(rules_tf, rules):
    return rules_tf if hasattr(rules, "fit") else rules_tf.set_params(empty_units="error")


def demo_rules_path() -> Path:
    """Path of the demo rules for the simulator (``rulefeat/data/demo_rules.toml``)."""
    return Path(__file__).resolve().parents[2] / "data" / "demo_rules.toml"
