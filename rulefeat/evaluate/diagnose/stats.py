"""The statistics of the rule diagnostics, computed on the pooled out-of-fold values.

Every function returns plain dicts (the schema is in :mod:`rulefeat.evaluate.diagnose.engine`); a statistic that cannot
be computed (one class in a population, a rule that never fires, separation in a regression) becomes None with
a note saying why, never an exception after the folds have run.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import special as ssp

from ...errors import EvaluationError
from ...stats.inference import auc
from ...stats.validity import (
    correlation_ci,
    hierarchical_regression,
    partial_correlation,
    spread,
    standalone_association,
)

__all__ = ["Students", "students_table", "rule_block", "per_population_rows", "hierarchical_block", "logit"]

# Mined scores are clipped to [EPS, 1 - EPS] before the logit, so a model saying 0 or 1 gives a finite control.
EPS = 1e-6


def logit(p: np.ndarray) -> np.ndarray:
    return ssp.logit(np.clip(p, EPS, 1.0 - EPS))


def _safe(compute, notes: list, what: str):
    """The statistic, or None with a note when it is undefined on these data."""
    try:
        return compute()
    except EvaluationError as exc:
        notes.append(f"{what}: not computed - {exc}")
        return None


@dataclass(frozen=True, eq=False)
class Students:
    """One row per held-out student: label, population code, events, firings per rule, mean mined logit."""

    labels: np.ndarray
    populations: np.ndarray
    events: np.ndarray
    firings: dict
    mean_logit: np.ndarray


def students_table(inputs, pooled) -> Students:
    """Per held-out student: the population and label of its first unit, and its mean out-of-fold mined logit."""
    _, first = np.unique(inputs.log_codes, return_index=True)
    by_code = pd.Series(first, index=inputs.log_codes[first])
    unit = by_code.reindex(pooled.student_codes).to_numpy()
    tested = pooled.fold_of_unit >= 0
    sums = pd.Series(logit(pooled.mined_score[tested])).groupby(inputs.log_codes[tested]).mean()
    return Students(inputs.student_labels[unit], inputs.populations[unit], pooled.student_events,
                    pooled.student_firings, sums.reindex(pooled.student_codes).to_numpy(dtype=float))


# -- per rule ----------------------------------------------------------------------------------------------
def _firing(events: np.ndarray, firings: np.ndarray) -> dict:
    n_events, n_firings = int(events.sum()), int(firings.sum())
    return {"n_students": int(len(events)), "n_events": n_events, "firings": n_firings,
            "rate": n_firings / n_events if n_events else None,
            "share_students_any": float(np.mean(firings > 0)) if len(events) else None}


def _association(y, value, fired, notes, rule) -> dict:
    by_value = _safe(lambda: standalone_association(y, value), notes, f"AUC of rule {rule!r}")
    by_flag = _safe(lambda: standalone_association(y, (fired > 0).astype(float)), notes,
                    f"any-firing association of rule {rule!r}")
    out = {"auc": None if by_value is None else by_value.auc,
           "n_used": None if by_value is None else by_value.n_used,
           "n_missing": None if by_value is None else by_value.n_missing}
    for key in ("kappa", "precision", "recall", "lift", "support_rate", "base_rate"):
        out[key] = None if by_flag is None else by_flag[key]
    return out


def _r2(value: np.ndarray, predicted: np.ndarray) -> tuple[float | None, int]:
    ok = np.isfinite(value) & np.isfinite(predicted)
    tss = float(np.sum((value[ok] - value[ok].mean()) ** 2)) if ok.any() else 0.0
    if ok.sum() < 2 or tss <= 0:
        return None, int(ok.sum())
    return 1.0 - float(np.sum((value[ok] - predicted[ok]) ** 2)) / tss, int(ok.sum())


def _redundancy(pooled, rule, tested, notes) -> dict:
    r2, n = _r2(pooled.value[rule][tested], pooled.predicted_value[rule][tested])
    if r2 is None:
        notes.append(f"Redundancy R² of rule {rule!r}: not computed - its unit value has no spread.")
    fired = pooled.fired[rule][tested] > 0
    pred = pooled.predicted_any[rule][tested]
    ok = np.isfinite(pred)
    any_auc = auc(fired[ok], pred[ok]) if ok.any() and 0 < fired[ok].sum() < ok.sum() else None
    if pooled.any_missing_folds[rule]:
        notes.append(f"Redundancy AUC of rule {rule!r} firing: {pooled.any_missing_folds[rule]} fold(s) had "
                     "training units that all fired or none did, so their units are left out.")
    return {"r2": r2, "r2_folds": [None if f != f else f for f in pooled.r2_folds[rule]], "n_used": n,
            "any_auc": any_auc}


def _residual_bootstrap(x, y, controls, groups, n_boot, seed):
    """Student-bootstrap CI of the partial r: residuals from the full-sample fits, resampled by student."""
    design = np.column_stack([np.ones(len(x)), controls])
    both = np.column_stack([x, y])
    resid = both - design @ np.linalg.lstsq(design, both, rcond=None)[0]
    return correlation_ci(resid[:, 0], resid[:, 1], groups=groups, n_boot=n_boot, random_state=seed)


def _partial(y, value, controls, groups, ctx, notes, what) -> dict | None:
    """Partial r of the unit value and the label given ``controls`` (2-D), Fisher-z and student-bootstrap CIs."""
    ok = np.isfinite(value) & np.isfinite(controls).all(axis=1)
    pc = _safe(lambda: partial_correlation(value[ok], y[ok], controls[ok]), notes, what)
    if pc is None:
        return None
    boot = _safe(lambda: _residual_bootstrap(value[ok], y[ok], controls[ok], groups[ok], ctx.n_boot, ctx.boot_seed),
                 notes, f"Student-bootstrap interval of the {what[0].lower()}{what[1:]}")
    out = {k: pc[k] for k in ("r", "ci_low", "ci_high", "p_value", "df")}
    out.update({"nobs": pc.nobs, "n_dropped": int((~ok).sum()),
                "ci_low_student": None if boot is None else boot.ci_low,
                "ci_high_student": None if boot is None else boot.ci_high,
                "p_student": None if boot is None else boot.p_value})
    return out


def _unique(ctx, rule, tested, notes) -> tuple[dict | None, dict | None]:
    """Partial r given the mined detector's logit score; and given that score plus the mined features' own
    out-of-fold prediction of the rule's value (what the features know about the rule, however well the
    detector uses it)."""
    pooled, inputs = ctx.pooled, ctx.inputs
    y, value, groups = inputs.y[tested], pooled.value[rule][tested], inputs.students[tested]
    score = logit(pooled.mined_score[tested])[:, None]
    both = np.column_stack([score, pooled.predicted_value[rule][tested]])
    return (_partial(y, value, score, groups, ctx, notes, f"Partial correlation of rule {rule!r}"),
            _partial(y, value, both, groups, ctx, notes,
                     f"Partial correlation of rule {rule!r} beyond the mined features"))


def _population_auc(y, value, rows) -> float | None:
    ok = rows & np.isfinite(value)
    if not ok.any() or len(np.unique(y[ok])) < 2:
        return None
    return auc(y[ok], value[ok])


def per_population_rows(inputs, pooled, students) -> list[dict]:
    """One row per (rule, population): firing among the population's held-out students and standalone AUC."""
    rows = []
    tested = pooled.fold_of_unit >= 0
    for rule in pooled.rules:
        for k, name in enumerate(inputs.population_names):
            mine = students.populations == k
            units = tested & (inputs.populations == k)
            row = {"rule": rule, "population": name, **_firing(students.events[mine], students.firings[rule][mine])}
            row.update({"n_units": int(units.sum()), "n_positive": int(inputs.y[units].sum()),
                        "auc": _population_auc(inputs.y, pooled.value[rule], units)})
            rows.append(row)
    return rows


def _spread(values: dict) -> dict | None:
    if all(v is None for v in values.values()):
        return None
    out = spread({k: float("nan") if v is None else float(v) for k, v in values.items()}).to_dict()
    out["values"] = dict(values)
    return out


def _stability(rule, population_rows, notes) -> dict | None:
    rows = [r for r in population_rows if r["rule"] == rule]
    if len(rows) < 2:
        return None
    out = {"firing_rate": _spread({r["population"]: r["rate"] for r in rows}),
           "auc": _spread({r["population"]: r["auc"] for r in rows})}
    if out["auc"] is not None and out["auc"]["n_missing"]:
        notes.append(f"Stability of rule {rule!r}: AUC undefined in {out['auc']['n_missing']} population(s) "
                     "(one class or no values there).")
    return out


def _external(students, rule, outcome, notes) -> dict | None:
    if outcome is None:
        return None
    rate = np.where(students.events > 0, students.firings[rule] / np.maximum(students.events, 1), np.nan)
    ok = np.isfinite(rate) & np.isfinite(outcome)
    corr = _safe(lambda: correlation_ci(rate[ok], outcome[ok], method="spearman"), notes,
                 f"External validity of rule {rule!r}")
    if corr is None:
        return None
    return {"r": corr.r, "ci_low": corr.ci_low, "ci_high": corr.ci_high, "p_value": corr.p_value,
            "method": "spearman", "ci_method": corr.ci_method, "n_students": corr.nobs}


def rule_block(ctx, rule, population_rows, notes) -> dict:
    """Every per-rule statistic (firing, association, redundancy, unique contribution, stability, external)."""
    pooled, inputs, students = ctx.pooled, ctx.inputs, ctx.students
    tested = pooled.fold_of_unit >= 0
    y, value, fired = inputs.y[tested], pooled.value[rule][tested], pooled.fired[rule][tested]
    column = pooled.columns[rule]
    block = {"rule": rule, "primary": column.removeprefix(f"{rule}__"), "column": column,
             "firing": _firing(students.events, students.firings[rule]),
             "association": _association(y, value, fired, notes, rule)}
    if block["firing"]["firings"] == 0:
        # Nothing varies: one note instead of one per undefined statistic.
        notes.append(f"Rule {rule!r} never fired on the held-out students' events, so its redundancy, unique "
                     "contribution, stability and external validity are not computed.")
        return {**block, "redundancy": {"r2": None, "r2_folds": [None] * len(pooled.r2_folds[rule]), "n_used": 0,
                                        "any_auc": None},
                "unique": None, "unique_features": None, "stability": None, "external": None}
    unique, unique_features = _unique(ctx, rule, tested, notes)
    return {**block, "redundancy": _redundancy(pooled, rule, tested, notes),
            "unique": unique, "unique_features": unique_features,
            "stability": _stability(rule, population_rows, notes),
            "external": _external(students, rule, ctx.outcome, notes)}


# -- student-level regression ------------------------------------------------------------------------------
def _rates(students, rules) -> pd.DataFrame:
    events = np.maximum(students.events, 1)
    return pd.DataFrame({r: students.firings[r] / events for r in rules})


def hierarchical_block(ctx, notes) -> dict:
    """Outcome ~ mean mined logit, then + every rule's student rate (rules that vary between students)."""
    if ctx.outcome is None:
        return {"available": False, "reason": "no outcomes were given"}
    rates = _rates(ctx.students, ctx.pooled.rules)
    varying = [r for r in rates.columns if rates[r].nunique() > 1]
    if len(varying) < len(rates.columns):
        notes.append(f"Hierarchical regression: rules {[r for r in rates.columns if r not in varying]!r} have the "
                     "same rate for every student and were left out.")
    if not varying:
        return {"available": False, "reason": "no rule's rate varies between students"}
    base = pd.DataFrame({"mined_score_mean": ctx.students.mean_logit})
    try:
        fit = hierarchical_regression(base, rates[varying], ctx.outcome, missing="drop")
    except EvaluationError as exc:
        notes.append(f"Hierarchical regression: not computed - {exc}")
        return {"available": False, "reason": str(exc)}
    out = {k: fit[k] for k in ("kind", "test", "statistic", "df1", "df2", "p_value", "r2_base", "r2_full",
                               "delta_r2", "aic_base", "aic_full", "delta_aic", "nobs", "n_dropped")}
    out.update({"available": True, "reason": None, "base": ["mined_score_mean"], "extra": varying,
                "r2_name": "McFadden R²" if fit.kind == "binary" else "R²"})
    return out
