"""Turning fold outcomes into the results dict and the out-of-fold tables (schema: the report's contract)."""

from __future__ import annotations

import hashlib
import platform
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..._version import __version__
from ...stats import inference as stats
from .. import guards
from ..inputs import population_summary
from ..metrics import PRIMARY, metric_names, score_predictions
from . import compare

__all__ = ["Context", "results", "hash_text", "MIN_TEST_STUDENTS", "clean"]

# A test part needs this many students for its scores to mean anything; common practice, no source.
MIN_TEST_STUDENTS = 3
_MAX_FOLD_NOTES = 10
_MAX_WARNINGS = 10
MAIN_VARIANTS = ("mined", "rules", "combined")
SUBJECTS = {"combined": "Adding the rules to the mined features",
            "rules": "Using the rules instead of the mined features"}


@dataclass(frozen=True, eq=False)
class Context:
    inputs: object
    settings: dict
    seeds: object
    model: object
    rule_info: list
    rules_hash: str
    ablation_rules: list
    data: dict
    notes: list
    command: str | None


def hash_text(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def clean(value):
    """Plain Python types all the way down (numpy scalars become int/float/bool; NaN stays a float)."""
    if isinstance(value, dict):
        return {str(k): clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean(v) for v in value]
    if isinstance(value, np.ndarray):
        return [clean(v) for v in value.tolist()]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value)
    return value


def _ablation_rules(ctx: Context, cv) -> list[str]:
    """Rules that produced features (helper rules with an empty report, or rules left out by select, did not)."""
    if not ctx.settings["ablation"]:
        return []
    return [r for r in ctx.ablation_rules if cv[0].counts["per_rule"].get(r, 0) > 0]


def _variants(rules: list[str]) -> list[str]:
    return [*MAIN_VARIANTS, *(f"{kind}:{r}" for r in rules for kind in ("without", "plus"))]


def _fold_problem(ctx: Context, o, where: str) -> str | None:
    """Why a fold's test scores cannot be used (None when they can)."""
    y = ctx.inputs.y[o.fold.test]
    if o.issues:
        return o.issues[0]
    if ctx.inputs.task == "classification" and len(np.unique(y)) < 2:
        return f"the test part of {where} has only one class ({len(y)} units of {o.n_test_students} students)"
    if ctx.inputs.task == "regression" and np.ptp(y) == 0:
        return f"the target is constant in the test part of {where}"
    if o.n_test_students < MIN_TEST_STUDENTS:
        return f"the test part of {where} has only {o.n_test_students} students (fewer than {MIN_TEST_STUDENTS})"
    return None


def _threshold(value) -> float:
    return float("nan") if value is None else float(value)


def _fold_rows(ctx, cv, variants, notes) -> tuple[list, dict]:
    """``results["folds"]`` and, per variant and metric, the array of fold scores (NaN for unusable folds)."""
    names = metric_names(ctx.inputs.task)
    rows, scores = [], {v: {m: np.full(len(cv), np.nan) for m in names} for v in variants}
    problems = []
    for i, o in enumerate(cv):
        problem = _fold_problem(ctx, o, f"repeat {o.fold.repeat}, fold {o.fold.fold}")
        if problem:
            problems.append(problem)
        y = ctx.inputs.y[o.fold.test]
        for v in variants:
            thr = o.thresholds[v]
            values = score_predictions(ctx.inputs.task, y, o.preds[v], thr)
            if problem:
                values = dict.fromkeys(names, float("nan"))
            for m in names:
                scores[v][m][i] = values[m]
            rows.append({"repeat": o.fold.repeat, "fold": o.fold.fold, "variant": v, "n_train": len(o.fold.train),
                         "n_test": len(o.fold.test), "n_train_students": o.n_train_students,
                         "n_test_students": o.n_test_students,
                         "threshold": None if thr is None else float(thr), **values})
    _fold_notes(problems, len(cv), notes)
    return rows, scores


def _fold_notes(problems: list, n_folds: int, notes: list) -> None:
    if not problems:
        return
    notes.append(f"{len(problems)} of {n_folds} cross-validation folds could not be scored and are left out of "
                 "the fold statistics and paired tests (their metrics are NaN):")
    notes.extend(f"- {p}." for p in problems[:_MAX_FOLD_NOTES])
    if len(problems) > _MAX_FOLD_NOTES:
        notes.append(f"- ... and {len(problems) - _MAX_FOLD_NOTES} more.")


def _oof(ctx, outcomes, variants, column: str, values) -> pd.DataFrame:
    """One row per (outcome, test unit): position, student, repeat (or population), fold, y, predictions."""
    parts = []
    for o, value in zip(outcomes, values, strict=True):
        test = o.fold.test
        part = {"row": test, "student": ctx.inputs.student_labels[test], column: np.repeat(value, len(test)),
                "fold": np.full(len(test), o.fold.fold), "y": ctx.inputs.y[test]}
        part.update({v: o.preds[v] for v in variants})
        parts.append(pd.DataFrame(part))
    if not parts:
        return pd.DataFrame(columns=["row", "student", column, "fold", "y", *variants])
    return pd.concat(parts, ignore_index=True)


def _pooled(ctx, cv, variants) -> compare.Pooled:
    first = [o for o in cv if o.fold.repeat == cv[0].fold.repeat]
    test = np.concatenate([o.fold.test for o in first])
    preds = {v: np.concatenate([o.preds[v] for o in first]) for v in variants}
    thresholds = {v: np.concatenate([np.full(len(o.fold.test), _threshold(o.thresholds[v])) for o in first])
                  for v in variants}
    return compare.Pooled(ctx.inputs.y[test], ctx.inputs.students[test], preds, thresholds)


def _pooled_scores(ctx, pooled: compare.Pooled, v: str) -> dict:
    keep = np.isfinite(pooled.preds[v])
    return score_predictions(ctx.inputs.task, pooled.y[keep], pooled.preds[v][keep], pooled.thresholds[v][keep])


def _summary_stats(values: np.ndarray) -> dict:
    valid = values[~np.isnan(values)]
    return {"mean": float(valid.mean()) if len(valid) else float("nan"),
            "sd": float(valid.std(ddof=1)) if len(valid) > 1 else float("nan")}


def _sizes(cv) -> tuple[float, float]:
    return float(np.mean([len(o.fold.train) for o in cv])), float(np.mean([len(o.fold.test) for o in cv]))


def _learning_curve(ctx, cv, scores, sizes) -> list:
    metric = PRIMARY[ctx.inputs.task]
    rows = []
    for f in ctx.settings["fractions"]:
        if f >= 1.0:
            mined, combined = scores["mined"][metric], scores["combined"][metric]
        else:
            pairs = [_curve_scores(ctx, o, f, metric) for o in cv]
            mined, combined = np.array([p[0] for p in pairs]), np.array([p[1] for p in pairs])
        d = combined - mined
        valid = d[~np.isnan(d)]
        low = high = float("nan")
        if len(valid) >= 2:
            level = compare.interval_level(ctx.settings["alternative"])
            r = stats.corrected_resampled_ttest(valid, f * sizes[0], sizes[1], alpha=1.0 - level)
            low, high = r.ci_low, r.ci_high
        rows.append({"fraction": f, "mined": _summary_stats(mined)["mean"],
                     "combined": _summary_stats(combined)["mean"],
                     "delta": float(valid.mean()) if len(valid) else float("nan"), "ci_low": low, "ci_high": high})
    return rows


def _curve_scores(ctx, o, fraction, metric) -> tuple[float, float]:
    if _fold_problem(ctx, o, "") or fraction not in o.curve:
        return float("nan"), float("nan")
    y = ctx.inputs.y[o.fold.test]
    out = []
    for v in ("mined", "combined"):
        # Kappa needs a threshold but the curve reports the primary metric only, which needs none.
        out.append(score_predictions(ctx.inputs.task, y, o.curve[fraction][v], None)[metric])
    return out[0], out[1]


def _transfer(ctx, tr, pop_folds, notes) -> tuple[dict, pd.DataFrame]:
    names = ctx.inputs.population_names
    if not ctx.settings["transfer"]:
        return {"available": False, "reason": "Not requested (transfer=False).", "rows": [], "deltas": []}, None
    if not names:
        reason = ("No population information: pass population=<column of units> or give the log a 'population' "
                  "field (e.g. the school).")
        return {"available": False, "reason": reason, "rows": [], "deltas": []}, None
    if not pop_folds:
        reason = (f"The units come from only one population ({names[0]!r}); leave-one-population-out needs at "
                  "least two." if len(names) < 2 else "Fewer than two populations have units to hold out.")
        return {"available": False, "reason": reason, "rows": [], "deltas": []}, None
    rows, deltas, problems = [], [], []
    primary = PRIMARY[ctx.inputs.task]
    for o in tr:
        pop = names[o.fold.fold]
        problem = _fold_problem(ctx, o, f"the transfer fold holding out population {pop!r}")
        if problem:
            problems.append(problem)
        y = ctx.inputs.y[o.fold.test]
        values = {}
        for v in MAIN_VARIANTS:
            values[v] = score_predictions(ctx.inputs.task, y, o.preds[v], o.thresholds[v])
            if problem:
                values[v] = dict.fromkeys(values[v], float("nan"))
            rows.append({"population": pop, "variant": v, "n_test": len(o.fold.test),
                         "n_test_students": o.n_test_students, **values[v]})
        deltas.append({"population": pop, "metric": primary,
                       "delta": values["combined"][primary] - values["mined"][primary]})
    if problems:
        notes.append("Some held-out populations could not be scored (metrics NaN): " + "; ".join(problems) + ".")
    frame = _oof(ctx, tr, MAIN_VARIANTS, "population", [names[o.fold.fold] for o in tr])
    return {"available": True, "reason": None, "rows": rows, "deltas": deltas}, frame


def _guards(ctx, cv, cv_folds) -> list:
    found = guards.merge_findings([o.findings for o in cv], ctx.inputs.task)
    label = guards.label_guard(ctx.inputs.y, ctx.inputs.students)
    by_repeat = {}
    for f in cv_folds:
        by_repeat.setdefault(f.repeat, []).append(len(f.test))
    balance = guards.fold_balance_guard([np.array(s) for s in by_repeat.values()])
    return found + [g for g in (label, balance) if g]


def _method_notes(ctx, notes) -> None:
    s = ctx.settings
    side = ("one-sided (H1: the variant is better than its baseline; for log loss, Brier and RMSE better means "
            "lower)" if s["alternative"] == "greater" else "two-sided")
    level = compare.interval_level(s["alternative"])
    notes.append(f"Δ is variant − baseline in each metric's own units, the mean over all folds and repeats of the "
                 f"per-fold difference on the fold's test students. Its {level:.0%} interval and the headline "
                 f"p-value both come from the corrected repeated cross-validation t-test (Nadeau & Bengio 2003; "
                 f"Bouckaert & Frank 2004), {side}, so the interval lies on the side of an improvement exactly "
                 f"when p < {compare.ALPHA:g}. It estimates the expected Δ of detectors trained on training sets "
                 "of the folds' size, not the accuracy of one detector fitted on every student. p_naive is the "
                 "plain t-test of the same differences, which ignores that training sets overlap and is too "
                 "optimistic (shown for comparison only). The secondary column (pooled_delta, boot_ci_low, "
                 f"boot_ci_high) is Δ on the pooled out-of-fold predictions of repeat 0 with a 95% bootstrap over "
                 f"students (n_boot={s['n_boot']}); it holds the trained models fixed and so ignores training-set "
                 "variability. Per-rule rows use the corrected t procedure too, then Holm within each family.")
    if ctx.inputs.task == "classification":
        notes.append("DeLong's test (delong_z, delong_p) compares pooled out-of-fold AUCs of repeat 0 as if units "
                     "were independent; units of one student are not, so it is optimistic when students have many "
                     "units. Prefer the bootstrap interval and the corrected t-test.")
        notes.append("Cohen's kappa uses, in each fold, the threshold that maximised kappa on that fold's training "
                     "predictions.")
    if s["fractions"]:
        notes.append("Learning curve: in each fold the model saw a random share of the training students (the same "
                     "students for both variants; the feature transformers stayed fitted on the whole training "
                     f"fold); the interval is the {level:.0%} corrected resampled t interval of the per-fold Δ.")


def _emit_caught(outcomes, notes) -> None:
    """Re-raise, once each, the warnings the folds raised (workers' warnings would otherwise be lost)."""
    seen = {}
    for o in outcomes:
        for key in dict.fromkeys(o.caught):  # count folds, not calls (fit and transform may both warn)
            seen[key] = seen.get(key, 0) + 1
    for (category, message), count in list(seen.items())[:_MAX_WARNINGS]:
        warnings.warn(message, category, stacklevel=5)
        notes.append(f"Warning raised in {count} fold(s): {message}")
    if len(seen) > _MAX_WARNINGS:
        notes.append(f"... and {len(seen) - _MAX_WARNINGS} more distinct warnings from the folds.")


def _versions(ctx) -> dict:
    import lightgbm
    import sklearn


    return {"rulefeat": __version__, "python": platform.python_version(), "numpy": np.__version__,
            "pandas": pd.__version__, "scikit-learn": sklearn.__version__, "lightgbm": lightgbm.__version__,
            "random_state": ctx.settings["random_state"],
            "rules_hash": ctx.rules_hash, "command": ctx.command}


def _comparisons(ctx, cv, scores, sizes, pooled, pooled_values, notes) -> list:
    out = []
    usable = [o for o, value in zip(cv, scores["mined"][PRIMARY[ctx.inputs.task]], strict=True)
              if not np.isnan(value)]
    n_train_students = float(np.mean([o.n_train_students for o in usable])) if usable else float("nan")
    estimand = compare.estimand_sentence(len(usable), ctx.settings["repeats"], n_train_students,
                                         ctx.settings["alternative"])
    for m in metric_names(ctx.inputs.task):
        for v in ("combined", "rules"):
            d = scores[v][m] - scores["mined"][m]
            entry = compare.comparison(v, "mined", m, d, sizes, pooled, ctx.settings["n_boot"], ctx.seeds.boot,
                                       ctx.settings["alternative"], SUBJECTS[v], pooled_values["mined"][m], notes)
            if np.isfinite(entry["ci_low"]):
                entry["effect"] = f"{entry['effect']} {estimand}"
            out.append(entry)
    return out


def _data(ctx) -> dict:
    inputs = ctx.inputs
    return {"n_units": inputs.n_units, "n_students": int(len(np.unique(inputs.students))),
            "positive_rate": float(inputs.y.mean()) if inputs.task == "classification" else None,
            "n_events": ctx.data["n_events"], "log": ctx.data["log"], "populations": population_summary(inputs)}


def _feature_counts(cv, notes) -> dict:
    counts = {k: [o.counts[k] for o in cv] for k in ("mined", "rules")}
    for k, values in counts.items():
        if min(values) != max(values):
            notes.append(f"The number of {k} features kept varied between folds ({min(values)} to {max(values)}); "
                         "feature_counts shows the first fold's.")
    return {k: int(v[0]) for k, v in counts.items()}


def results(ctx: Context, outcomes: list, cv_folds: list, pop_folds: list):
    """Assemble ``(results, oof, oof_transfer)`` from the outcomes of every fold."""
    notes = list(ctx.notes)
    cv = [o for o in outcomes if o.kind == "cv"]
    tr = [o for o in outcomes if o.kind == "transfer"]
    ablation = _ablation_rules(ctx, cv)
    variants = _variants(ablation)
    task = ctx.inputs.task
    fold_rows, scores = _fold_rows(ctx, cv, variants, notes)
    pooled = _pooled(ctx, cv, variants)
    pooled_values = {v: _pooled_scores(ctx, pooled, v) for v in variants}
    sizes = _sizes(cv)
    comparisons = _comparisons(ctx, cv, scores, sizes, pooled, pooled_values, notes)
    per_rule = (compare.per_rule_rows(ablation, PRIMARY[task], scores, sizes, ctx.settings["alternative"])
                if ctx.settings["ablation"] else [])
    transfer, oof_transfer = _transfer(ctx, tr, pop_folds, notes)
    guard_list = _guards(ctx, cv, cv_folds)
    _method_notes(ctx, notes)
    _emit_caught(outcomes, notes)
    guards.emit(guard_list, stacklevel=5)
    res = {
        "task": task,
        "primary_metric": PRIMARY[task],
        "settings": _settings_block(ctx, cv_folds),
        "data": _data(ctx),
        "rules": ctx.rule_info,
        "rules_hash": ctx.rules_hash,
        "feature_counts": _feature_counts(cv, notes),
        "variants": {v: {"folds": {m: _summary_stats(scores[v][m]) for m in metric_names(task)},
                         "pooled": pooled_values[v]} for v in MAIN_VARIANTS},
        "comparisons": comparisons,
        "per_rule": per_rule,
        "folds": fold_rows,
        "transfer": transfer,
        "learning_curve": _learning_curve(ctx, cv, scores, sizes),
        "guards": guard_list,
        "notes": notes,
        "timing": {},  # filled in by the engine once the statistics are done
        "reproducibility": _versions(ctx),
    }
    oof = _oof(ctx, cv, variants, "repeat", [o.fold.repeat for o in cv])
    oof = oof[["row", "student", "repeat", "fold", "y", *variants]]
    return clean(res), oof, oof_transfer


def _settings_block(ctx, cv_folds) -> dict:
    s = ctx.settings
    first = cv_folds[0].repeat if cv_folds else 0
    return {"n_splits": sum(f.repeat == first for f in cv_folds), "repeats": s["repeats"],
            "random_state": s["random_state"], "model": repr(ctx.model), "unit": s["unit"],
            "alpha": compare.ALPHA, "alternative": s["alternative"], "n_boot": s["n_boot"],
            "learning_curve_fractions": list(s["fractions"]), "population_column": ctx.inputs.population_column}
