"""``RuleDiagnostics``: the results of :func:`~rulefeat.evaluate.diagnose.diagnose` as tables, figures, Markdown.

The diagnostics are a plain JSON-ready dict (schema in :mod:`rulefeat.evaluate.diagnose.engine`); this module only reads
it, plus the pooled SHAP tables for dependence plots, and never recomputes a statistic.
"""

from __future__ import annotations

import copy
import json
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import EvaluationError
from ..limits import check_depth
from .markdown import markdown_table
from .plain import to_plain
from .safe import code_span, json_text, markdown_text
from .shape import DIAGNOSTICS_SHAPE, check_shape
from .tables import CAUTIONS, interval, number, p_text, signed
from .tables import count as count_text
from .writing import new_folder

__all__ = ["RuleDiagnostics"]

_WHERE = "RuleDiagnostics"
_REQUIRED = ("kind", "settings", "data", "rules", "per_rule", "per_population", "hierarchical", "shap", "notes")

# table() column -> (block of a per-rule entry, key in it)
_TABLE = {
    "firing_rate": ("firing", "rate"), "share_students_any": ("firing", "share_students_any"),
    "auc": ("association", "auc"), "kappa": ("association", "kappa"), "precision": ("association", "precision"),
    "recall": ("association", "recall"), "lift": ("association", "lift"),
    "support_rate": ("association", "support_rate"),
    "redundancy_r2": ("redundancy", "r2"), "redundancy_any_auc": ("redundancy", "any_auc"),
    "partial_r": ("unique", "r"), "partial_ci_low": ("unique", "ci_low"), "partial_ci_high": ("unique", "ci_high"),
    "partial_p": ("unique", "p_value"), "partial_ci_low_student": ("unique", "ci_low_student"),
    "partial_ci_high_student": ("unique", "ci_high_student"),
    "partial_features_r": ("unique_features", "r"), "partial_features_ci_low": ("unique_features", "ci_low"),
    "partial_features_ci_high": ("unique_features", "ci_high"), "partial_features_p": ("unique_features", "p_value"),
    "external_r": ("external", "r"), "external_ci_low": ("external", "ci_low"),
    "external_ci_high": ("external", "ci_high"), "external_p": ("external", "p_value"),
    "external_n": ("external", "n_students"),
}


def _plain(value, path: str = "results"):
    """A JSON-ready copy (the evaluation report's own conversion, named for diagnostics)."""
    return to_plain(value, path, where=_WHERE)


def _check(results) -> dict:
    if not isinstance(results, Mapping) or results.get("kind") != "rule_diagnostics":
        raise EvaluationError(f"{_WHERE}: 'results' must be the dict computed by rulefeat.evaluate.diagnose "
                              f"(kind 'rule_diagnostics'); got {type(results).__name__}.")
    missing = [k for k in _REQUIRED if k not in results]
    if missing:
        raise EvaluationError(f"{_WHERE}: 'results' lacks the keys {missing}; it must follow the schema in "
                              "rulefeat.evaluate.diagnose.")
    return _plain(results)


# The schema's column order, which JSON (written with sorted keys) does not keep.
_PER_POPULATION = ("rule", "population", "n_students", "n_events", "firings", "rate", "share_students_any",
                   "n_units", "n_positive", "auc")
_HIERARCHICAL = ("available", "reason", "kind", "test", "statistic", "df1", "df2", "p_value", "r2_base", "r2_full",
                 "delta_r2", "aic_base", "aic_full", "delta_aic", "nobs", "n_dropped", "base", "extra", "r2_name")
_SHAP_SUMMARY = ("group", "n_features", "total_abs", "share", "mean_abs", "mean_abs_net")


def _float_frame(rows: list, first: list) -> pd.DataFrame:
    frame = pd.DataFrame(rows, columns=first) if not rows else pd.DataFrame(rows)
    for column in frame.columns:
        if column not in ("rule", "primary", "population", "group"):
            frame[column] = pd.to_numeric(frame[column].astype(object).where(frame[column].notna(), np.nan))
    first = [c for c in first if c in frame.columns]
    return frame[[*first, *[c for c in frame.columns if c not in first]]]


class RuleDiagnostics:
    """Per-rule validity diagnostics: tables, figures, JSON and Markdown.

    Returned by :func:`~rulefeat.evaluate.diagnose.diagnose`.  It reads the plain results dict (schema in
    :mod:`rulefeat.evaluate.diagnose.engine` and docs/diagnostics.md) and, for dependence plots, the pooled SHAP
    tables; it never recomputes a statistic.

    Parameters
    ----------
    results : dict
        The results dict (``kind == "rule_diagnostics"``).
    shap_values, shap_features : DataFrame, optional
        Pooled SHAP values and the feature values they explain (same index and columns).
    shap_rows : DataFrame, optional
        Per explained row: ``row`` (position in units), ``fold``, ``expected_value``, ``raw_score``.
    timing : dict, optional
        Seconds per stage (not part of ``to_dict``).
    units, students : DataFrame, optional
        The out-of-fold unit table and the held-out student table (see :meth:`units` and :meth:`students`).

    Examples
    --------
    >>> diag = rulefeat.evaluate.diagnose(log, windows, "label", rules, random_state=0)  # doctest: +SKIP
    >>> diag.table()                                                                    # doctest: +SKIP
    >>> diag.save("diagnostics/")                                                       # doctest: +SKIP
    """

    def __init__(self, results: dict, *, shap_values: pd.DataFrame | None = None,
                 shap_features: pd.DataFrame | None = None, shap_rows: pd.DataFrame | None = None,
                 timing: dict | None = None, units: pd.DataFrame | None = None,
                 students: pd.DataFrame | None = None):
        self._results = _check(results)
        self._shap = (shap_values, shap_features, shap_rows)
        self._timing = dict(timing or {})
        self._units, self._students = units, students

    # -- dict and tables ---------------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """The results as plain Python values (NaN as None); equal seeds give equal dicts."""
        return copy.deepcopy(self._results)

    def to_json(self, indent: int | None = 2) -> str:
        """The results as JSON with sorted keys (byte-stable for equal results)."""
        return json_text(json.dumps(self._results, indent=indent, sort_keys=True, allow_nan=False,
                                    ensure_ascii=False))

    @classmethod
    def from_json(cls, text: str) -> RuleDiagnostics:
        """Rebuild diagnostics from :meth:`to_json` text (the pooled SHAP tables are not kept in JSON)."""
        if isinstance(text, str):
            check_depth(text, "json", f"{_WHERE}.from_json", EvaluationError)
        try:
            results = json.loads(text)
        except (TypeError, json.JSONDecodeError) as exc:
            raise EvaluationError(f"{_WHERE}.from_json: the text is not valid JSON ({exc}); pass the text "
                                  "written by to_json, e.g. Path('diagnostics.json').read_text().") from exc
        if isinstance(results, dict):  # anything else gets the constructor's message
            check_shape(results, DIAGNOSTICS_SHAPE, f"{_WHERE}.from_json")
        return cls(results)

    @property
    def rules(self) -> list[str]:
        """The diagnosed rules, in rule order."""
        return [r["rule"] for r in self._results["per_rule"]]

    def table(self) -> pd.DataFrame:
        """One row per rule: unit value, firing, association, redundancy, unique contribution, stability, SHAP."""
        shap = {r["rule"]: r for r in self._results["shap"].get("per_rule", [])}
        rows = []
        for entry in self._results["per_rule"]:
            row = {"rule": entry["rule"], "primary": entry["primary"]}
            for name, (block, key) in _TABLE.items():
                row[name] = (entry.get(block) or {}).get(key)
            stability = entry.get("stability") or {}
            for what, prefix in (("firing_rate", "rate"), ("auc", "auc")):
                part = stability.get(what) or {}
                row[f"{prefix}_range"], row[f"{prefix}_sd"] = part.get("range"), part.get("sd")
            row["shap_mean_abs"] = shap.get(entry["rule"], {}).get("mean_abs")
            row["shap_share"] = shap.get(entry["rule"], {}).get("share")
            rows.append(row)
        return _float_frame(rows, ["rule", "primary"])

    def per_population(self) -> pd.DataFrame:
        """One row per (rule, population): students, events, firings, firing rate, units, standalone AUC."""
        return _float_frame(self._results["per_population"], list(_PER_POPULATION))

    def shap_summary(self) -> pd.DataFrame:
        """One row per rule plus the mined group: features, total / mean ``|SHAP|`` and share of the total."""
        shap = self._results["shap"]
        if not shap.get("available"):
            frame = pd.DataFrame(columns=list(_SHAP_SUMMARY))
            frame.attrs["reason"] = shap.get("reason")
            return frame
        rows = [{"group": r["rule"], **{k: v for k, v in r.items() if k != "rule"}} for r in shap["per_rule"]]
        rows.append({"group": shap["mined_group"], **(shap.get("mined") or {})})
        return _float_frame(rows, list(_SHAP_SUMMARY))

    def hierarchical(self) -> dict:
        """The student-level hierarchical regression (``available`` False with a ``reason`` when not run)."""
        block = copy.deepcopy(self._results["hierarchical"])
        order = [k for k in _HIERARCHICAL if k in block]
        return {k: block[k] for k in [*order, *[k for k in block if k not in order]]}

    def notes(self) -> list[str]:
        """Plain-words notes: statistics not computed and why, warnings from the folds, skipped parts."""
        return list(self._results["notes"])

    def timing(self) -> dict:
        """Seconds per stage (not part of :meth:`to_dict`)."""
        return dict(self._timing)

    def units(self) -> pd.DataFrame | None:
        """Out-of-fold values per unit: ``row``, ``student``, ``fold`` (-1 if never held out), ``y``,
        ``mined_score`` and per rule ``value:<rule>``, ``firings:<rule>``, ``predicted:<rule>`` (the mined
        features' prediction of the value) and ``predicted_any:<rule>``; None when rebuilt from JSON."""
        return self._units

    def students(self) -> pd.DataFrame | None:
        """Per held-out student: ``student``, ``population``, ``n_events``, ``firings:<rule>``, ``rate:<rule>``,
        ``mined_score_mean`` (mean out-of-fold logit) and ``outcome`` (NaN without outcomes)."""
        return self._students

    def shap_values(self) -> pd.DataFrame | None:
        """Pooled SHAP values (log-odds), one row per explained held-out unit; None without SHAP."""
        return self._shap[0]

    def shap_features(self) -> pd.DataFrame | None:
        """The feature values the pooled SHAP values explain (same index and columns)."""
        return self._shap[1]

    def shap_rows(self) -> pd.DataFrame | None:
        """Per explained row: ``row`` (position in units), ``fold``, ``expected_value``, ``raw_score``."""
        return self._shap[2]

    # -- figures -----------------------------------------------------------------------------------------
    def figures(self) -> dict:
        """Figures by name: ``shap_share``, ``shap_per_rule`` and ``dependence:<rule>`` for the top 3 rules.

        Empty when SHAP was not computed; dependence plots need the pooled SHAP tables (not kept in JSON).
        """
        from .diagnose_figures import plot_dependence_of, plot_shap_per_rule, plot_shap_share

        shap = self._results["shap"]
        if not shap.get("available"):
            return {}
        out = {"shap_share": plot_shap_share(shap), "shap_per_rule": plot_shap_per_rule(shap)}
        values, features, _ = self._shap
        if values is not None and features is not None:
            columns = {r["rule"]: r["column"] for r in self._results["per_rule"]}
            for rule in shap["top_rules"]:
                out[f"dependence:{rule}"] = plot_dependence_of(values, features, columns[rule], rule)
        return out

    # -- rendering -------------------------------------------------------------------------------------
    def to_markdown(self, images: Mapping[str, str] | None = None) -> str:
        """The diagnostics as Markdown; ``images`` maps a figure name to a file to link."""
        return _markdown(self, dict(images or {}))

    def save(self, folder: str | Path, *, overwrite: bool = False) -> Path:
        """Write ``diagnostics.md``, ``diagnostics.json`` and a PNG per figure into ``folder``.

        All or nothing, as :meth:`IncrementalValueReport.save`: an existing non-empty ``folder`` is refused
        unless ``overwrite`` is true.
        """
        with new_folder(folder, overwrite=overwrite, where=f"{_WHERE}.save") as work:
            images = {}
            for name, fig in self.figures().items():
                file = name.replace(":", "_") + ".png"
                fig.savefig(work / file, dpi=110)
                images[name] = file
            (work / "diagnostics.json").write_text(self.to_json() + "\n", encoding="utf-8")
            (work / "diagnostics.md").write_text(self.to_markdown(images), encoding="utf-8")
        return Path(folder)

    def __repr__(self) -> str:
        data = self._results["data"]
        shap = self._results["shap"]
        share = f", rules carry {shap['rule_share']:.1%} of |SHAP|" if shap.get("available") else ""
        return (f"RuleDiagnostics({len(self.rules)} rules, {data['n_units']} units, {data['n_students']} "
                f"students{share})")


# -- Markdown ----------------------------------------------------------------------------------------------
def _rules_md(diag: RuleDiagnostics) -> pd.DataFrame:
    t = diag.table()
    return pd.DataFrame({
        "rule": t["rule"], "unit value": t["primary"],
        "firing rate": [number(v, 4) for v in t["firing_rate"]],
        "students firing": [number(v, 2) for v in t["share_students_any"]],
        "AUC": [number(v) for v in t["auc"]], "kappa (any)": [number(v) for v in t["kappa"]],
        "precision": [number(v) for v in t["precision"]], "recall": [number(v) for v in t["recall"]],
        "lift": [number(v, 2) for v in t["lift"]],
        "R² from mined": [number(v) for v in t["redundancy_r2"]],
        "partial r [CI]": [f"{signed(r)} {interval(lo, hi)}" for r, lo, hi in
                           zip(t["partial_r"], t["partial_ci_low"], t["partial_ci_high"], strict=True)],
        "student CI": [interval(lo, hi) for lo, hi in
                       zip(t["partial_ci_low_student"], t["partial_ci_high_student"], strict=True)],
        "p": [p_text(v) for v in t["partial_p"]],
        "partial r beyond features [CI]": [f"{signed(r)} {interval(lo, hi)}" for r, lo, hi in zip(
            t["partial_features_r"], t["partial_features_ci_low"], t["partial_features_ci_high"], strict=True)],
    })


def _external_md(diag: RuleDiagnostics) -> pd.DataFrame:
    t = diag.table()
    return pd.DataFrame({
        "rule": t["rule"], "Spearman ρ [CI]": [f"{signed(r)} {interval(lo, hi)}" for r, lo, hi in
                                              zip(t["external_r"], t["external_ci_low"], t["external_ci_high"],
                                                  strict=True)],
        "p": [p_text(v) for v in t["external_p"]], "students": [count_text(v) for v in t["external_n"]],
        "rate range": [number(v, 4) for v in t["rate_range"]], "rate sd": [number(v, 4) for v in t["rate_sd"]],
        "AUC range": [number(v) for v in t["auc_range"]], "AUC sd": [number(v) for v in t["auc_sd"]],
    })


def _population_md(diag: RuleDiagnostics) -> pd.DataFrame:
    t = diag.per_population()
    if not len(t):
        return t
    return pd.DataFrame({"rule": t["rule"], "population": t["population"],
                         "students": [count_text(v) for v in t["n_students"]],
                         "firing rate": [number(v, 4) for v in t["rate"]],
                         "students firing": [number(v, 2) for v in t["share_students_any"]],
                         "units": [count_text(v) for v in t["n_units"]], "AUC": [number(v) for v in t["auc"]]})


def _p_phrase(p) -> str:
    text = p_text(p)
    return f"p {text}" if text.startswith("<") else f"p = {text}"


def _hierarchical_md(h: dict) -> list[str]:
    if not h.get("available"):
        return [f"Not computed: {markdown_text(h.get('reason'))}."]
    stat = f"F({h['df1']}, {h['df2']})" if h["kind"] == "continuous" else f"LR χ²({h['df1']})"
    return [f"Outcome ~ {markdown_text(', '.join(h['base']))}, then + the rate of "
            f"{markdown_text(', '.join(h['extra']))} "
            f"({h['nobs']} students, {h['kind']} outcome).", "",
            f"{h['r2_name']}: {number(h['r2_base'])} → {number(h['r2_full'])} (Δ {signed(h['delta_r2'])}); "
            f"{stat} = {number(h['statistic'], 2)}, {_p_phrase(h['p_value'])}; ΔAIC = {signed(h['delta_aic'], 1)}."]


def _shap_md(shap: dict, images: Mapping[str, str]) -> list[str]:
    if not shap.get("available"):
        return [f"Not computed: {markdown_text(shap.get('reason'))}"]
    lines = [f"{shap['n_rows']} held-out units explained over {shap['n_folds']} folds; rule features carry "
             f"{shap['rule_share']:.1%} of the total |SHAP| (mined features {shap['mined_share']:.1%}).", ""]
    for name, file in images.items():
        lines += [f"![{name}]({file})", ""]
    return lines


def _markdown(diag: RuleDiagnostics, images: Mapping[str, str]) -> str:
    r = diag._results
    d, s = r["data"], r["settings"]
    lines = ["# Rule diagnostics", "",
             f"{d['n_units']:,} units of {d['n_students']:,} students ({d['n_events']:,} events), positive rate "
             f"{d['positive_rate']:.3f}; {s['n_folds']} student-grouped folds (cv={markdown_text(s['cv'])}), model "
             f"{code_span(s['model'])}, "
             f"random_state={s['random_state']}.", "",
             "## Rules on held-out units", "", markdown_table(_rules_md(diag), ["name", "text"] + ["num"] * 12), "",
             "Firing rate: firings per event over all events of the units' students. AUC: the rule's unit value "
             "against the label. R² from mined: out-of-fold R² of the mined features predicting the unit value "
             "(high = redundant). Partial r: the unit value and the label, controlling for the mined detector's "
             "out-of-fold logit score; the student CI resamples students. Beyond features: also controlling for the mined "
             "features' out-of-fold prediction of the unit value.", "",
             "## Stability and external validity", "", markdown_table(_external_md(diag), ["name"] + ["num"] * 7), ""]
    pops = _population_md(diag)
    if len(pops):
        lines += ["## Per population", "", markdown_table(pops, ["name", "key"] + ["num"] * 5), ""]
    lines += ["## Hierarchical regression of the student outcome", "", *_hierarchical_md(r["hierarchical"]), "",
              "## SHAP attributions of the combined detector", "", *_shap_md(r["shap"], images)]
    if r["notes"]:
        lines += ["## Notes", "", *[f"- {markdown_text(n)}" for n in r["notes"]], ""]
    lines += ["## Cautions", "", *[f"- {c}" for c in CAUTIONS], ""]
    return "\n".join(lines)
