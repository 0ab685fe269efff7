"""Pooling the folds of the rule diagnostics: out-of-fold unit values, held-out students' firings, SHAP tables."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..folds import rule_of_column
from .attribution import MINED, group_shap

__all__ = ["Pooled", "pool", "pool_shap", "shap_groups", "unit_table", "student_table"]


@dataclass(frozen=True, eq=False)
class Pooled:
    """Out-of-fold arrays over all units (NaN / -1 where a unit was never held out) and per held-out student.

    A unit (or student) held out by several folds (e.g. GroupShuffleSplit) takes the values of the first one.
    """

    rules: list
    columns: dict
    fold_of_unit: np.ndarray
    mined_score: np.ndarray
    value: dict
    fired: dict
    predicted_value: dict
    predicted_any: dict
    r2_folds: dict
    any_missing_folds: dict
    student_codes: np.ndarray
    student_events: np.ndarray
    student_firings: dict


def _fold_r2(value: np.ndarray, predicted: np.ndarray) -> float:
    ok = np.isfinite(value) & np.isfinite(predicted)
    if ok.sum() < 2:
        return float("nan")
    tss = float(np.sum((value[ok] - value[ok].mean()) ** 2))
    return 1.0 - float(np.sum((value[ok] - predicted[ok]) ** 2)) / tss if tss > 0 else float("nan")


def _students(results) -> tuple[np.ndarray, np.ndarray, dict]:
    codes = np.concatenate([res.students for res in results])
    _, first = np.unique(codes, return_index=True)  # the first fold holding each student out
    events = np.concatenate([res.student_events for res in results])[first]
    firings = {r: np.concatenate([res.student_firings[r] for res in results])[first] for r in results[0].rules}
    return codes[first], events, firings


def pool(results: list, n_units: int) -> Pooled:
    """Put every fold's held-out values back at their units' positions."""
    rules, columns = list(results[0].rules), dict(results[0].columns)
    fold_of = np.full(n_units, -1, dtype=np.int64)
    score = np.full(n_units, np.nan)
    arrays = {key: {r: np.full(n_units, np.nan) for r in rules}
              for key in ("value", "fired", "predicted_value", "predicted_any")}
    r2_folds = {r: [] for r in rules}
    any_missing = {r: 0 for r in rules}
    for res in results:
        new = fold_of[res.fold.test] < 0
        rows = res.fold.test[new]
        fold_of[rows] = res.fold.fold
        score[rows] = res.mined_score[new]
        for r in rules:
            arrays["value"][r][rows] = res.value[r][new]
            arrays["fired"][r][rows] = res.fired[r][new]
            arrays["predicted_value"][r][rows] = res.predicted_value[r][new]
            r2_folds[r].append(_fold_r2(res.value[r], res.predicted_value[r]))
            if res.predicted_any[r] is None:
                any_missing[r] += 1
            else:
                arrays["predicted_any"][r][rows] = res.predicted_any[r][new]
    codes, events, firings = _students(results)
    return Pooled(rules, columns, fold_of, score, arrays["value"], arrays["fired"], arrays["predicted_value"],
                  arrays["predicted_any"], r2_folds, any_missing, codes, events, firings)


def pool_shap(results: list) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame, list] | None:
    """Pooled SHAP values, the feature values they explain, per-row bookkeeping and the rule columns, or None.

    Folds may keep different mined features (pruning is learned in each fold): a feature a fold's model did not
    have gets SHAP 0 (it moved nothing) and a missing value in that fold's rows.
    """
    parts = [res for res in results if res.shap is not None]
    if not parts:
        return None
    values = pd.concat([p.shap["values"] for p in parts], ignore_index=True, sort=False).fillna(0.0)
    features = pd.concat([p.shap["features"] for p in parts], ignore_index=True, sort=False)
    meta = pd.DataFrame({
        "row": np.concatenate([p.fold.test[p.shap["rows"]] for p in parts]),
        "fold": np.concatenate([np.full(len(p.shap["rows"]), p.fold.fold) for p in parts]),
        "expected_value": np.concatenate([np.full(len(p.shap["rows"]), p.shap["expected"]) for p in parts]),
        "raw_score": np.concatenate([p.shap["raw"] for p in parts]),
    })
    rule_columns = list(dict.fromkeys(c for p in parts for c in p.shap["rule_columns"]))
    return values, features[list(values.columns)], meta, rule_columns


def shap_groups(values: pd.DataFrame, rules: list, rule_columns) -> tuple[pd.DataFrame, str]:
    """:func:`~rulefeat.evaluate.diagnose.attribution.group_shap` with one group per rule, the rest mined.

    Only the columns the rule transformer produced (``rule_columns``) can belong to a rule, so a mined feature
    whose name happens to start with a rule's name stays mined.  The mined group is called ``"mined"``, or
    ``"mined features"`` when a rule has that name.
    """
    rest = MINED if MINED not in rules else "mined features"
    groups = {r: [] for r in rules}
    produced = set(map(str, rule_columns))
    for col in map(str, values.columns):
        owner = rule_of_column(col, rules) if col in produced else None
        if owner is not None:
            groups[owner].append(col)
    return group_shap(values, {r: c for r, c in groups.items() if c}, rest=rest), rest


def unit_table(inputs, pooled) -> pd.DataFrame:
    """The out-of-fold values of every unit: fold, label, mined score and, per rule, value, firings, predictions."""
    columns = {"row": np.arange(len(inputs.y)), "student": inputs.student_labels, "fold": pooled.fold_of_unit,
               "y": inputs.y, "mined_score": pooled.mined_score}
    for r in pooled.rules:
        columns[f"value:{r}"] = pooled.value[r]
        columns[f"firings:{r}"] = pooled.fired[r]
        columns[f"predicted:{r}"] = pooled.predicted_value[r]
        columns[f"predicted_any:{r}"] = pooled.predicted_any[r]
    return pd.DataFrame(columns)


def student_table(inputs, students, outcome: np.ndarray | None, rules: list) -> pd.DataFrame:
    """One row per held-out student: population, events, firings and rate per rule, mean mined logit, outcome."""
    names = np.array([*inputs.population_names, None], dtype=object)
    columns = {"student": students.labels, "population": names[students.populations],
               "n_events": students.events}
    for r in rules:
        columns[f"firings:{r}"] = students.firings[r]
        columns[f"rate:{r}"] = np.where(students.events > 0, students.firings[r] / np.maximum(students.events, 1),
                                        np.nan)
    columns["mined_score_mean"] = students.mean_logit
    columns["outcome"] = np.full(len(students.labels), np.nan) if outcome is None else outcome
    return pd.DataFrame(columns)
