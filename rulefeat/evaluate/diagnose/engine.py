"""``diagnose``: is each expert rule a valid, non-redundant, stable detector of what it claims to detect?

Per rule, on the same student-grouped folds as :func:`~rulefeat.evaluate.incremental_value` (same
``random_state`` → same splits, same model seeds, same LightGBM preset), with every transformer refitted inside
each training fold:

- **firing** - how often the rule fires: ``firings / events`` over *all* the events in the log of the units'
  students (not only the events inside units), and the share of those students with at least one firing;
  overall and per population.  Firings come from the rules as fitted in the fold that holds the student out.
- **association** - the rule's *unit value* against the label on the held-out units: AUC of the value, and for
  the flag "the rule fired in the unit" Cohen's kappa, precision, recall, lift and support
  (:func:`~rulefeat.stats.validity.standalone_association`).
- **redundancy** - how well the mined features predict the rule's unit value: pooled out-of-fold R² of a
  regressor trained on the in-fold mined features, ``1 - Σ(v - v̂)² / Σ(v - v̄)²`` over the held-out units with a
  value (per-fold R² too); for the flag "fired in the unit", the out-of-fold AUC of a classifier.
- **unique** - partial correlation of the unit value with the label controlling for the mined detector's
  out-of-fold score, logit-transformed (scores clipped to ``[1e-6, 1 - 1e-6]``): Fisher-z CI and t-test p
  (:func:`~rulefeat.stats.validity.partial_correlation`, which treats units as independent), and a
  student-bootstrap CI of the same r (``n_boot`` replicates resampling students; the residuals come from the
  full-sample fits), which respects units nested in students.  This is information *beyond the mined
  detector*: when the detector uses its own features poorly (a flexible model on few units), even a rule that
  copies a mined feature shows a partial r.  **unique_features** therefore also controls for the mined
  features' out-of-fold prediction of the rule's value (the redundancy regressor's): information *beyond what
  the mined features know about the rule*, near zero for a rule that restates them.
- **stability** - range and SD across populations of the firing rate and of the standalone AUC
  (:func:`~rulefeat.stats.validity.spread`), with the per-population values.
- **external** - Spearman correlation of each held-out student's rule rate (firings / events over all the
  student's events) with the student's outcome, with the Bonett-Wright Fisher-z CI
  (:func:`~rulefeat.stats.validity.correlation_ci`).
- **hierarchical** (all rules together) - the outcome regressed on the student's mean out-of-fold mined logit
  score (one column, ``mined_score_mean``), then on that plus every rule's student rate: ΔR² and the partial F
  test for a continuous outcome; likelihood-ratio test, ΔAIC and McFadden R² for a binary one
  (:func:`~rulefeat.stats.validity.hierarchical_regression`).  Rules with the same rate for every student are
  left out; separation or a singular design becomes a note.
- **shap** - per fold, the combined model (the evaluation's ``combined`` variant: mined then rule features) is
  fitted on the training units and explains a seeded sample of ``shap_sample`` held-out units with
  path-dependent TreeSHAP (:func:`~rulefeat.evaluate.diagnose.attribution.tree_shap`, log-odds).  Pooled over folds:
  the share of total ``|SHAP|`` carried by rule vs mined features and per rule (all its summaries together).

A rule's **unit value** is its ``rate`` summary when reported, else ``count``, else its first summary.  Rules
that produce no features (helper rules left out by ``RuleFeatures(select=...)``) are not diagnosed.

Models.  ``model=None`` uses :func:`~rulefeat.evaluate.default_model` (LightGBM) for every classifier and its
regressor counterpart for redundancy.  A given classifier is cloned for every fit; redundancy uses its regression
counterpart from a table (LightGBM, scikit-learn forests, extra trees, gradient boosting, histogram gradient
boosting, decision tree and k-neighbours classifiers map to their regressors with the shared parameters;
LogisticRegression maps to Ridge; a Pipeline swaps its last step), else the default LightGBM regressor, with a
note.  SHAP needs a LightGBM classifier: with any other model it is skipped with a note; ``shap_sample=0`` skips it.

Results dict (``RuleDiagnostics.to_dict()``; stable keys, JSON-safe, NaN as None)::

    kind            "rule_diagnostics"
    version         1
    settings        cv, n_folds, unit, population ("log", a column name or None), outcome, shap_sample, n_boot,
                    random_state, model, regressor, primary_order (["rate", "count"])
    data            n_units, n_students, n_events, n_positive, positive_rate, positive_label, populations (names)
    rules           [{name, means, why, when, report, primary, column}] - the diagnosed rules, in rule order
    per_rule        [{rule, primary, column,
                      firing {n_students, n_events, firings, rate, share_students_any},
                      association {auc, n_used, n_missing, kappa, precision, recall, lift, support_rate, base_rate},
                      redundancy {r2, r2_folds, n_used, any_auc},
                      unique {r, ci_low, ci_high, p_value, df, nobs, n_dropped, ci_low_student, ci_high_student,
                              p_student} | None,
                      unique_features {the same keys} | None,
                      stability {firing_rate, auc: {min, max, range, sd, mean, argmin, argmax, n, n_missing,
                                 values {population: value}} | None} | None,
                      external {r, ci_low, ci_high, p_value, method, ci_method, n_students} | None}]
    per_population  [{rule, population, n_students, n_events, firings, rate, share_students_any, n_units,
                      n_positive, auc}]
    hierarchical    {available, reason, kind, test, statistic, df1, df2, p_value, r2_base, r2_full, delta_r2,
                     aic_base, aic_full, delta_aic, nobs, n_dropped, base, extra, r2_name}
                    (only available and reason when not computed)
    shap            {available, reason, n_rows, n_folds, rule_share, mined_share, mined_group,
                     mined {n_features, total_abs, share, mean_abs, mean_abs_net} | None,
                     per_rule [{rule, n_features, total_abs, share, mean_abs, mean_abs_net}], top_rules,
                     folds [{fold, n_rows, expected_value, max_abs_error}]}
    notes           [str]
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass

import numpy as np

from ...errors import EvaluationError
from ...report.diagnostics import RuleDiagnostics
from ..models import default_model, model_threads, thread_budget
from ..seeds import Seeds
from ..splits import student_folds
from . import stats as dstats
from .folds import FoldJob, primary_summary, run_folds
from .inputs import (
    WHERE,
    check_classifier,
    check_settings,
    mined_transformer,
    prepare_units,
    read_outcomes,
    regression_counterpart,
    rules_transformer,
)
from .pool import pool, pool_shap, shap_groups, student_table, unit_table

__all__ = ["diagnose", "RuleDiagnostics"]

# Warnings from the folds become notes (at most this many distinct ones).
_MAX_WARNINGS = 10


@dataclass(frozen=True, eq=False)
class _Context:
    inputs: object
    pooled: object
    students: object
    outcome: np.ndarray | None
    n_boot: int
    boot_seed: int


def _outcome_per_student(outcomes, outcome, inputs, notes):
    if outcomes is None:
        notes.append("No outcomes were given, so external validity and the hierarchical regression are skipped.")
        return None
    series = read_outcomes(outcomes, outcome)
    labels = np.unique(inputs.student_labels)
    matched = np.isin(labels, series.index.to_numpy())
    if not matched.any():
        raise EvaluationError(f"{WHERE}: none of the {len(labels)} students of units is in outcomes['student'] "
                              f"(e.g. units has {labels[0]!r}, outcomes has {series.index[0]!r}); the ids must "
                              "match, with the same type.")
    if not matched.all():
        notes.append(f"{int((~matched).sum())} students of units have no row in outcomes and are left out of the "
                     "student-level statistics.")
    return series


def _models(model, folds, seeds, n_jobs, notes):
    workers, threads = thread_budget(n_jobs, len(folds))
    n_threads = model_threads(threads, np.mean([len(f.train) for f in folds]))
    fallback = default_model("regression", seeds.model, n_threads)
    classifier = default_model("classification", seeds.model, n_threads) if model is None else \
        check_classifier(model)
    regressor, note = regression_counterpart(model, fallback)
    if note:
        notes.append(note)
    return classifier, regressor, workers, threads


def _shap_reason(model, shap_sample) -> str | None:
    """Why SHAP is skipped, or None when it runs."""
    from lightgbm import LGBMClassifier

    if shap_sample == 0:
        return "SHAP attributions were not computed (shap_sample=0)."
    if model is not None and not isinstance(model, LGBMClassifier):
        return (f"SHAP attributions were skipped: they need a LightGBM classifier (TreeSHAP on its trees), and the "
                f"model is a {type(model).__name__}.")
    return None


def _emit(results, notes) -> None:
    """Re-raise, once each, the warnings the folds raised, and note them."""
    seen: dict = {}
    for res in results:
        for key in dict.fromkeys(res.caught):
            seen[key] = seen.get(key, 0) + 1
    for (category, message), count in list(seen.items())[:_MAX_WARNINGS]:
        warnings.warn(message, category, stacklevel=4)
        notes.append(f"Warning raised in {count} fold(s): {message}")
    for res in results:
        notes.extend(f"{issue[0].upper()}{issue[1:]}." for issue in res.issues)


def _shap_block(shap, rules, reason) -> dict:
    if shap is None:
        return {"available": False, "reason": reason}
    values, _, meta, rule_columns = shap
    table, rest = shap_groups(values, rules, rule_columns)
    per_rule = [{"rule": g, **{k: table.loc[g, k] for k in table.columns}} for g in table.index if g != rest]
    rule_share = float(sum(r["share"] for r in per_rule))
    top = sorted(per_rule, key=lambda r: (-r["mean_abs"], r["rule"]))[:3]
    error = np.abs(meta["expected_value"] + values.sum(axis=1) - meta["raw_score"])
    folds = [{"fold": int(k), "n_rows": int((meta["fold"] == k).sum()),
              "expected_value": float(meta.loc[meta["fold"] == k, "expected_value"].iloc[0]),
              "max_abs_error": float(error[meta["fold"] == k].max())} for k in np.unique(meta["fold"])]
    mined = {k: table.loc[rest, k] for k in table.columns} if rest in table.index else None
    return {"available": True, "reason": None, "n_rows": int(len(values)), "n_folds": len(folds),
            "rule_share": rule_share, "mined_share": 1.0 - rule_share, "mined_group": rest, "mined": mined,
            "per_rule": per_rule, "top_rules": [r["rule"] for r in top], "folds": folds}


def _rule_info(ruleset, pooled) -> list[dict]:
    return [{"name": r.name, "means": r.means, "why": r.why, "when": r.when, "report": list(r.report),
             "primary": primary_summary(list(r.report)), "column": pooled.columns[r.name]}
            for r in ruleset if r.name in pooled.columns]


def _data_block(inputs, pooled) -> dict:
    positive = inputs.positive.item() if isinstance(inputs.positive, np.generic) else inputs.positive
    return {"n_units": int(len(inputs.y)), "n_students": int(len(np.unique(inputs.students))),
            "n_events": int(pooled.student_events.sum()), "n_positive": int(inputs.y.sum()),
            "positive_rate": float(inputs.y.mean()), "positive_label": positive if isinstance(
                positive, (bool, int, float, str)) else str(positive),
            "populations": list(inputs.population_names)}


def _settings_block(settings, folds, unit, inputs, outcome, classifier, regressor) -> dict:
    cv = settings["cv"]
    return {"cv": cv if isinstance(cv, int) else repr(cv), "n_folds": len(folds),
            "unit": unit if isinstance(unit, str) else getattr(unit, "name", str(unit)),
            "population": inputs.population_source, "outcome": outcome, "shap_sample": settings["shap_sample"],
            "n_boot": settings["n_boot"], "random_state": settings["random_state"],
            "model": type(classifier).__name__, "regressor": type(regressor).__name__,
            "primary_order": ["rate", "count"]}


def _assemble(ctx, ruleset, settings_block, shap, shap_reason, notes) -> dict:
    population_rows = dstats.per_population_rows(ctx.inputs, ctx.pooled, ctx.students)
    if len(ctx.inputs.population_names) < 2:
        found = "one population" if ctx.inputs.population_names else "no population column and none in the log"
        notes.append(f"Stability across populations needs at least two populations ({found}); not computed.")
    per_rule = [dstats.rule_block(ctx, r, population_rows, notes) for r in ctx.pooled.rules]
    untested = int((ctx.pooled.fold_of_unit < 0).sum())
    if untested:
        notes.append(f"{untested} units were held out by no fold and are left out of every statistic.")
    return {"kind": "rule_diagnostics", "version": 1, "settings": settings_block,
            "data": _data_block(ctx.inputs, ctx.pooled), "rules": _rule_info(ruleset, ctx.pooled),
            "per_rule": per_rule, "per_population": population_rows,
            "hierarchical": dstats.hierarchical_block(ctx, notes),
            "shap": _shap_block(shap, ctx.pooled.rules, shap_reason), "notes": notes}


def diagnose(log, units, y, rules, *, mined=None, model=None, cv=5, population=None, outcomes=None,
             outcome="posttest", unit="window", shap_sample=500, n_boot=1000, random_state=None, n_jobs=None,
             verbose=0) -> RuleDiagnostics:
    """Per-rule validity diagnostics on student-grouped folds: firing, association, redundancy, stability, SHAP.

    Every statistic and the results schema are described in the :mod:`rulefeat.evaluate.diagnose.engine` module
    docstring and in docs/diagnostics.md.

    Parameters
    ----------
    log : EventLog
        The events.
    units : pandas.DataFrame
        The units table X (one row per unit, with the unit's key columns).
    y : array-like, pandas.Series or str
        The binary label of each unit, aligned with ``units``, or the name of a column of units.
    rules : RuleSet, list of Rule, TOML text, path, or RuleFeatures
        The expert rules (a RuleFeatures sets its own options, e.g. ``select`` and ``min_count``).
    mined : dict or transformer, optional
        LogFeatures parameters (e.g. ``{"families": ["correctness"]}``) or a transformer on ``log``; default
        LogFeatures with every family.
    model : scikit-learn classifier, optional
        Default :func:`~rulefeat.evaluate.default_model`; see the module docstring for its regression
        counterpart and for SHAP with other models.
    cv : int or group-aware splitter, default 5
        As in :func:`~rulefeat.evaluate.incremental_value` (an int k is ``StratifiedGroupKFold(k, shuffle=True)``
        by student with the evaluation's split seed); splitters that ignore students are refused.
    population : str, optional
        Column of units with each unit's population (school); None uses the log's ``population`` field.  A
        student counts in the population of its first unit.
    outcomes : pandas.DataFrame, optional
        One row per student: a ``student`` column and the ``outcome`` column.  None skips external validity and
        the hierarchical regression.
    outcome : str, default "posttest"
        The outcome column, or ``"gain"`` for ``posttest - pretest``.
    unit : str or Unit, default "window"
        What a row of units is.
    shap_sample : int or None, default 500
        Held-out units explained per fold (seeded sample); None explains all, 0 skips SHAP.
    n_boot : int, default 1000
        Student-bootstrap replicates of the partial correlation's interval.
    random_state : int, optional
        Seeds splits, models, features, bootstrap and SHAP samples; the same value gives the same
        ``to_dict()``, and the splits and model seeds of :func:`~rulefeat.evaluate.incremental_value`.
    n_jobs : int, optional
        Parallel fold workers, as in :func:`~rulefeat.evaluate.incremental_value`.
    verbose : int, default 0
        1 or more prints fold progress on stderr.

    Returns
    -------
    RuleDiagnostics

    Examples
    --------
    >>> import warnings
    >>> from rulefeat import EventLog, Rule
    >>> from rulefeat.simulate import tutor_logs
    >>> data = tutor_logs(40, seed=0, n_skills=2)
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")
    ...     log = EventLog(data.events)
    >>> skim = Rule("skim", when="action == 'hint' and gap < 3s", report=["rate", "any"])
    >>> windows = data.windows[["student", "start", "end"]]
    >>> diag = diagnose(log, windows, data.windows["label"], [skim], mined={"families": ["correctness"]},
    ...                 cv=2, outcomes=data.outcomes, shap_sample=50, n_boot=100, random_state=0)
    >>> diag.table()[["rule", "primary"]].to_dict("records")
    [{'rule': 'skim', 'primary': 'rate'}]
    """
    t0 = time.perf_counter()
    settings = check_settings(cv, shap_sample, n_boot, random_state, n_jobs, verbose)
    inputs = prepare_units(log, units, y, population, unit)
    notes = list(inputs.notes)
    series = _outcome_per_student(outcomes, outcome, inputs, notes)
    rules_tf, ruleset = rules_transformer(rules, log, unit)
    seeds = Seeds(settings["random_state"], 1, WHERE)  # the tree of incremental_value: same splits and models
    folds = student_folds(inputs.y, inputs.students, settings["cv"], 1, seeds.splits, "classification", where=WHERE)
    classifier, regressor, workers, threads = _models(model, folds, seeds, n_jobs, notes)
    reason = _shap_reason(model, settings["shap_sample"])
    if reason:
        notes.append(reason)
    job = FoldJob(inputs.X, inputs.y, log, mined_transformer(mined, log, unit, seeds.features), rules_tf,
                  classifier, regressor, settings["shap_sample"], reason is None, threads if workers > 1 else None)
    t1 = time.perf_counter()
    results = run_folds(job, folds, seeds.shap(len(folds)), workers,
                        settings["verbose"])
    t2 = time.perf_counter()
    _emit(results, notes)
    pooled = pool(results, len(inputs.y))
    students = dstats.students_table(inputs, pooled)
    outcome_values = None if series is None else series.reindex(students.labels).to_numpy(dtype=float)
    ctx = _Context(inputs, pooled, students, outcome_values, settings["n_boot"], seeds.boot)
    shap = pool_shap(results) if reason is None else None
    block = _settings_block(settings, folds, unit, inputs, outcome, classifier, regressor)
    result = _assemble(ctx, ruleset, block, shap, reason or "no fold could fit the combined model", notes)
    timing = {"prepare": t1 - t0, "folds": t2 - t1, "statistics": time.perf_counter() - t2,
              "total": time.perf_counter() - t0}
    values, features, rows = (None, None, None) if shap is None else shap[:3]
    return RuleDiagnostics(result, shap_values=values, shap_features=features, shap_rows=rows, timing=timing,
                           units=unit_table(inputs, pooled),
                           students=student_table(inputs, students, outcome_values, pooled.rules))
