"""The report of an incremental-value evaluation: tables, figures, JSON and Markdown.

The evaluation engine computes a plain, JSON-ready ``results`` dict (its keys are fixed by the
engine/report contract) plus the out-of-fold predictions.  This module only reads them: every
table is computed from the dict first (numeric DataFrames, then display strings in
:meth:`IncrementalValueReport.tables`) and rendered afterwards, so the Markdown here and an
HTML page elsewhere show the same numbers.
"""

from __future__ import annotations

import copy
import json
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from .._text import did_you_mean
from ..errors import EvaluationError
from ..limits import check_depth
from .markdown import render_markdown
from .plain import to_plain
from .safe import csv_frame, json_text
from .shape import REPORT_SHAPE, check_shape
from .tables import LOWER_IS_BETTER, METRIC_LABELS, metric_order, signed, tables
from .writing import new_folder

__all__ = ["IncrementalValueReport"]

VARIANTS = ("mined", "rules", "combined")
_REQUIRED = ("task", "primary_metric", "settings", "data", "rules", "rules_hash", "feature_counts",
             "variants", "comparisons", "per_rule", "folds", "transfer", "learning_curve", "guards", "notes",
             "reproducibility")
_OOF_COLUMNS = ("row", "student", "repeat", "fold", "y")
_PER_RULE_COLUMNS = ("rule", "drop_delta", "drop_ci_low", "drop_ci_high", "drop_p", "drop_p_holm",
                     "add_delta", "add_ci_low", "add_ci_high", "add_p", "add_p_holm")
_FOLD_COLUMNS = ("repeat", "fold", "variant", "n_train", "n_test", "n_train_students", "n_test_students",
                 "threshold")
_CURVE_COLUMNS = ("fraction", "mined", "combined", "delta", "ci_low", "ci_high")
_COMPARISON_COLUMNS = ("variant", "baseline", "metric", "delta", "ci_low", "ci_high", "ci_level", "ci_method", "se",
                       "t", "df", "p_value", "p_naive", "pooled_delta", "boot_ci_low", "boot_ci_high",
                       "boot_method", "delong_z", "delong_p", "effect")
_FIGURES = {"roc": "roc.png", "rule_effects": "rule_effects.png", "learning_curve": "learning_curve.png",
            "transfer": "transfer.png"}


# -- checks ------------------------------------------------------------------------------------
def _check_results(results) -> dict:
    where = "IncrementalValueReport"
    if not isinstance(results, Mapping):
        raise EvaluationError(f"{where}: 'results' must be the dict computed by rulefeat.incremental_value; "
                              f"got {type(results).__name__}.")
    missing = [key for key in _REQUIRED if key not in results]
    if missing:
        raise EvaluationError(f"{where}: 'results' lacks the keys {missing}; it must follow the results "
                              "schema written by rulefeat.incremental_value.")
    if results["task"] not in ("classification", "regression"):
        raise EvaluationError(f"{where}: results['task'] must be 'classification' or 'regression'; "
                              f"got {results['task']!r}.")
    absent = [v for v in VARIANTS if v not in results["variants"]]
    if absent:
        raise EvaluationError(f"{where}: results['variants'] lacks {absent}; "
                              f"it has {list(results['variants'])}.")
    metrics, primary = results["variants"]["mined"]["folds"], results["primary_metric"]
    if primary not in metrics:
        raise EvaluationError(f"{where}: the primary metric {primary!r} is not among the evaluated metrics "
                              f"{list(metrics)}.{did_you_mean(primary, metrics)}")
    return dict(results)


def _check_oof(oof, name: str, columns: Sequence[str]) -> pd.DataFrame:
    if not isinstance(oof, pd.DataFrame):
        raise EvaluationError(f"IncrementalValueReport: {name!r} must be a pandas DataFrame of out-of-fold "
                              f"predictions; got {type(oof).__name__}.")
    missing = [c for c in columns if c not in oof.columns]
    if missing:
        raise EvaluationError(f"IncrementalValueReport: {name!r} lacks the columns {missing}; it has "
                              f"{list(oof.columns)}.")
    return oof


def _plots():
    """The figures module, imported on first use: matplotlib is slow to import and tables do not need it."""
    from . import figures as plots

    return plots


# -- frames --------------------------------------------------------------------------------------
def _frame(rows: Sequence[Mapping], first: Sequence[str]) -> pd.DataFrame:
    """Rows as a DataFrame, the contract's columns first; JSON nulls become NaN in number columns."""
    frame = pd.DataFrame(list(rows))
    for column in first:
        if column not in frame.columns:
            frame[column] = np.nan
    frame = frame[[*first, *[c for c in frame.columns if c not in first]]]
    for column in frame.columns:
        values = frame[column]
        if values.dtype == object and values.map(lambda v: v is None or isinstance(v, (int, float))).all() \
                and not values.map(lambda v: isinstance(v, bool)).any():
            frame[column] = values.astype("float64")
    return frame


class IncrementalValueReport:
    """What the expert rules add over mined log features, as tables, figures, JSON and Markdown.

    Returned by :func:`rulefeat.incremental_value`; it reads the plain ``results`` dict and the
    out-of-fold predictions and never recomputes statistics.

    Parameters
    ----------
    results : dict
        The results dict of an evaluation (keys fixed by the engine/report contract).
    oof : DataFrame
        Out-of-fold predictions: ``row``, ``student``, ``repeat``, ``fold``, ``y`` and one column
        per variant (``mined``, ``rules``, ``combined``, ``without:<rule>``, ``plus:<rule>``).
    oof_transfer : DataFrame, optional
        Leave-one-population-out predictions, with ``population`` instead of ``repeat``.

    Examples
    --------
    >>> report = rulefeat.incremental_value(log, windows, "label", rules, random_state=0)  # doctest: +SKIP
    >>> report.summary()                                                                    # doctest: +SKIP
    >>> report.save("report/")                                                              # doctest: +SKIP
    """

    def __init__(self, results: dict, oof: pd.DataFrame, oof_transfer: pd.DataFrame | None = None):
        self._results = _check_results(results)
        self._oof = _check_oof(oof, "oof", _OOF_COLUMNS)
        self._oof_transfer = None if oof_transfer is None else _check_oof(
            oof_transfer, "oof_transfer", ("row", "student", "population", "y"))

    # -- basic facts -----------------------------------------------------------------------------
    @property
    def task(self) -> str:
        """``"classification"`` or ``"regression"``."""
        return self._results["task"]

    @property
    def primary_metric(self) -> str:
        """The metric of the headline test (``"auc"`` or ``"r2"``)."""
        return self._results["primary_metric"]

    @property
    def metrics(self) -> list[str]:
        """The evaluated metrics, in reading order (the primary one first)."""
        return metric_order(self._results["variants"]["mined"]["folds"])

    def _variant_names(self) -> list[str]:
        names = list(self._results["variants"])
        return [v for v in VARIANTS if v in names] + sorted(v for v in names if v not in VARIANTS)

    def _comparison(self, variant: str, metric: str, baseline: str = "mined") -> dict | None:
        for row in self._results["comparisons"]:
            if (row["variant"], row["baseline"], row["metric"]) == (variant, baseline, metric):
                return row
        return None

    # -- tables ----------------------------------------------------------------------------------
    def summary(self) -> pd.DataFrame:
        """One row per variant (mined, rules, combined) with every metric and the Δ vs mined.

        For each metric ``m``: ``m`` and ``m_sd`` (mean and sd over folds), ``m_pooled`` (on the
        pooled out-of-fold predictions), and for rules/combined ``m_delta`` (variant − mined, in
        the metric's own units, so lower is better for log loss, Brier and RMSE: the mean over folds), its
        interval ``m_ci_low``/``m_ci_high`` and ``m_p`` (one corrected resampled t-test, the headline),
        ``m_p_naive`` (naive fold t-test) and the secondary student-bootstrap interval of repeat 0's pooled
        predictions ``m_boot_ci_low``/``m_boot_ci_high``; for AUC also ``auc_delong_p``.
        """
        rows = []
        for name in self._variant_names():
            variant, row = self._results["variants"][name], {"variant": name}
            for m in self.metrics:
                fold = variant["folds"].get(m, {})
                row.update({m: fold.get("mean"), f"{m}_sd": fold.get("sd"),
                            f"{m}_pooled": variant.get("pooled", {}).get(m)})
                comp = self._comparison(name, m) or {}
                row.update({f"{m}_delta": comp.get("delta"), f"{m}_ci_low": comp.get("ci_low"),
                            f"{m}_ci_high": comp.get("ci_high"), f"{m}_p": comp.get("p_value"),
                            f"{m}_p_naive": comp.get("p_naive"), f"{m}_boot_ci_low": comp.get("boot_ci_low"),
                            f"{m}_boot_ci_high": comp.get("boot_ci_high")})
                if m == "auc":
                    row["auc_delong_p"] = comp.get("delong_p")
            rows.append(row)
        frame = _frame(rows, ["variant"])
        return frame.astype({c: "float64" for c in frame.columns if c != "variant"})

    def comparisons(self) -> pd.DataFrame:
        """Every comparison (rules/combined − mined, per metric) with its test statistics."""
        return _frame(self._results["comparisons"], _COMPARISON_COLUMNS)

    def per_rule(self) -> pd.DataFrame:
        """Per-rule ablation: Δ when dropped from combined and when added to mined, with CIs and Holm p.

        Sorted by the drop Δ, largest first (the rule the combined detector leans on most on top);
        an empty table with the same columns when no ablation was run.
        """
        frame = _frame(self._results["per_rule"], _PER_RULE_COLUMNS)
        if not len(frame):
            return frame
        return frame.sort_values(["drop_delta", "rule"], ascending=[False, True], na_position="last",
                                 kind="mergesort").reset_index(drop=True)

    def folds(self) -> pd.DataFrame:
        """One row per (repeat, fold, variant): sizes, kappa threshold and every metric."""
        return _frame(self._results["folds"], list(_FOLD_COLUMNS) + self.metrics)

    def transfer(self) -> pd.DataFrame:
        """Leave-one-population-out scores, one row per (population, variant), plus ``delta``.

        ``delta`` is the variant's primary metric minus mined's on the same held-out population
        (for combined it is results["transfer"]["deltas"]); NaN for mined.  When transfer was not
        available the table is empty and ``.attrs["reason"]`` says why.
        """
        info = self._results["transfer"]
        columns = ["population", "variant", "n_test", "n_test_students", *self.metrics]
        if not info.get("available") or not info.get("rows"):
            empty = pd.DataFrame(columns=[*columns, "delta"])
            empty.attrs["reason"] = info.get("reason") or "no transfer rows were computed."
            return empty
        frame = _frame(info["rows"], columns)
        m = self.primary_metric
        baseline = frame.loc[frame["variant"] == "mined"].set_index("population")[m]
        frame["delta"] = frame[m] - frame["population"].map(baseline).astype("float64")
        frame.loc[frame["variant"] == "mined", "delta"] = np.nan
        return frame

    def learning_curve(self) -> pd.DataFrame:
        """Δ (combined − mined) of the primary metric by share of training students, with CI."""
        frame = _frame(self._results["learning_curve"], _CURVE_COLUMNS)
        return frame.sort_values("fraction", kind="mergesort").reset_index(drop=True)

    def guards(self) -> list[dict]:
        """Leakage and design warnings raised during the evaluation (``kind``, ``message``)."""
        return copy.deepcopy(list(self._results["guards"]))

    def notes(self) -> list[str]:
        """Plain-words notes (folds with one class, too-small populations, caveats of tests)."""
        return list(self._results["notes"])

    def timing(self) -> dict:
        """Seconds spent per stage (not part of the JSON, so equal seeds give equal JSON)."""
        return dict(self._results.get("timing", {}))

    def oof_predictions(self) -> pd.DataFrame:
        """The out-of-fold predictions (one row per repeat and unit)."""
        return self._oof

    def transfer_predictions(self) -> pd.DataFrame | None:
        """The leave-one-population-out predictions, or None."""
        return self._oof_transfer

    def effect(self) -> str:
        """The plain-words sentence for the primary metric (combined vs mined)."""
        comp = self._comparison("combined", self.primary_metric)
        if comp is None:
            raise EvaluationError(f"IncrementalValueReport.effect: results['comparisons'] has no "
                                  f"combined − mined row for {self.primary_metric!r}.")
        return comp["effect"]

    def tables(self) -> dict[str, pd.DataFrame]:
        """Display-ready tables (strings), as the Markdown and HTML renderings show them."""
        return {name: table.frame() for name, table in tables(self).items()}

    # -- figures ---------------------------------------------------------------------------------
    def plot_roc(self, variants: Sequence[str] = VARIANTS, repeat: int = 0):
        """Pooled out-of-fold ROC curves of one repeat, AUCs in the legend (classification only)."""
        if self.task != "classification":
            raise EvaluationError(f"IncrementalValueReport.plot_roc: ROC curves are for classification; this "
                                  f"report is a {self.task} (primary metric {self.primary_metric!r}). Use "
                                  "plot_learning_curve() or folds() instead.")
        plots = _plots()
        curves = plots.roc_curves(self._oof, variants, repeat)
        return plots.plot_roc(curves, title=f"Pooled out-of-fold ROC (repeat {repeat})")

    def plot_rule_effects(self):
        """Forest plot of per-rule Δ of the primary metric (drop and add) with CIs."""
        return _plots().plot_rule_effects(self.per_rule(), self.primary_metric)

    def plot_learning_curve(self):
        """Mined/combined score and their Δ by share of training students."""
        return _plots().plot_learning_curve(self.learning_curve(), self.primary_metric)

    def plot_transfer(self):
        """Held-out population score by variant."""
        return _plots().plot_transfer(self.transfer(), self.primary_metric)

    def _available_figures(self) -> dict[str, object]:
        draw = {}
        if self.task == "classification" and len(self._oof):
            draw["roc"] = self.plot_roc
        if self._results["per_rule"]:
            draw["rule_effects"] = self.plot_rule_effects
        if self._results["learning_curve"]:
            draw["learning_curve"] = self.plot_learning_curve
        if self._results["transfer"].get("available") and self._results["transfer"].get("rows"):
            draw["transfer"] = self.plot_transfer
        return draw

    # -- serialisation ---------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """A deep copy of the results without ``timing``."""
        return copy.deepcopy({k: v for k, v in self._results.items() if k != "timing"})

    def to_json(self, indent: int | None = 2) -> str:
        """The results (without ``timing``) as JSON: sorted keys, NaN as null, byte-stable for equal results.

        Parameters
        ----------
        indent : int or None
            Spaces per level; None writes one line.
        """
        return json_text(json.dumps(to_plain(self.to_dict()), indent=indent, sort_keys=True, allow_nan=False,
                                    ensure_ascii=False))

    @classmethod
    def from_json(cls, text: str, oof: pd.DataFrame | None = None,
                  oof_transfer: pd.DataFrame | None = None) -> IncrementalValueReport:
        """Rebuild a report from :meth:`to_json` text.

        The JSON holds no predictions: pass ``oof`` (e.g. read from ``oof.csv``) to draw the ROC again.
        """
        if isinstance(text, str):
            check_depth(text, "json", "IncrementalValueReport.from_json", EvaluationError)
        try:
            results = json.loads(text)
        except (TypeError, json.JSONDecodeError) as exc:
            raise EvaluationError(f"IncrementalValueReport.from_json: the text is not valid JSON ({exc}); "
                                  "pass the text written by to_json, e.g. Path('report.json').read_text()."
                                  ) from exc
        if oof is None:
            oof = pd.DataFrame({c: pd.Series(dtype="float64") for c in _OOF_COLUMNS})
        if isinstance(results, dict):  # anything else gets the constructor's message
            check_shape(results, REPORT_SHAPE, "IncrementalValueReport.from_json")
        return cls(results, oof, oof_transfer)

    def with_inputs(self, inputs: Mapping[str, Mapping]) -> IncrementalValueReport:
        """A copy whose ``reproducibility`` block also lists the input files: ``{role: {"name", "sha256",
        "bytes"}}``, file names and content hashes only, never a folder of the machine that ran it."""
        for role, record in inputs.items():
            if not isinstance(record, Mapping) or "/" in str(record.get("name", "")) or "\\" in str(
                    record.get("name", "")):
                raise EvaluationError(f"IncrementalValueReport.with_inputs: inputs[{role!r}] must be a dict with "
                                      f"a file 'name' (no folders) and its 'sha256'; got {record!r}.")
        results = copy.deepcopy(self._results)
        sorted_inputs = json.loads(json.dumps(dict(inputs), sort_keys=True))  # as from_json will read it back
        results["reproducibility"] = {**results["reproducibility"], "inputs": sorted_inputs}
        return type(self)(results, self._oof, self._oof_transfer)

    def to_markdown(self, images: Mapping[str, str] | None = None) -> str:
        """The report as Markdown; ``images`` maps a figure name (``roc``, ...) to a file to link."""
        return render_markdown(self, tables(self), dict(images or {}))

    def save(self, folder: str | Path, *, overwrite: bool = False) -> Path:
        """Write ``report.md``, ``report.json``, ``oof.csv`` and the available PNG figures into ``folder``.

        All or nothing: the files are written into a temporary folder beside ``folder``, which replaces it
        at the end.  An existing non-empty ``folder`` is refused unless ``overwrite`` is true.  Text cells of
        the CSV files that a spreadsheet would run as a formula start with ``'`` (see ``report/safe.py``).
        """
        with new_folder(folder, overwrite=overwrite, where="IncrementalValueReport.save") as work:
            images = {}
            for name, draw in self._available_figures().items():
                draw().savefig(work / _FIGURES[name], dpi=110)
                images[name] = _FIGURES[name]
            (work / "report.json").write_text(self.to_json() + "\n", encoding="utf-8")
            (work / "report.md").write_text(self.to_markdown(images), encoding="utf-8")
            csv_frame(self._oof).to_csv(work / "oof.csv", index=False)
            if self._oof_transfer is not None:
                csv_frame(self._oof_transfer).to_csv(work / "oof_transfer.csv", index=False)
        return Path(folder)

    def save_html(self, path: str | Path, diagnostics=None) -> Path:
        """Write one self-contained HTML page (figures embedded); see :func:`rulefeat.report.html.save_html`."""
        from .html import save_html

        return save_html(self, path, diagnostics=diagnostics)

    def __repr__(self) -> str:
        m = self.primary_metric
        comp = self._comparison("combined", m)
        if comp is None:
            return f"IncrementalValueReport({self.task}, {m}: no combined − mined comparison)"
        lower = " (lower is better)" if m in LOWER_IS_BETTER else ""
        p = comp.get("p_value")
        p_text = "p = n/a" if p is None or p != p else ("p < 0.001" if p < 0.001 else f"p = {p:.3f}")
        return (f"IncrementalValueReport({METRIC_LABELS.get(m, m)} combined − mined = "
                f"{signed(comp.get('delta'))}{lower}, {p_text}; {len(self._results['rules'])} rules, "
                f"{self._results['data'].get('n_students')} students)")
