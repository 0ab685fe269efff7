"""One self-contained HTML page of an incremental-value report, optionally with rule diagnostics.

Rendering has two steps, as for the Markdown report: :func:`html_view` computes a plain dict of
display strings, tables and figures (PNG bytes as base64 ``data:`` URIs), and :func:`render_html`
fills the packaged Jinja2 template ``rulefeat/report/templates/report.html.j2`` with it.  The template
escapes every value (autoescape on), so rule text, rule names and population names may hold
``<``, ``&`` or quotes; the page has inline CSS, no scripts and no links to the network, so it
opens the same offline, in an e-mail attachment or in an archive years later.

Numbers use the Markdown report's formatting helpers plus :func:`p_value_text` and
:func:`format_value`: three decimals, signed differences, p-values below 0.001 as ``"< 0.001"``,
missing values as ``"n/a"``; number columns are right-aligned.
"""

from __future__ import annotations

import base64
import io
import math
import re
import sys
from collections.abc import Mapping, Sequence
from importlib import resources
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import EvaluationError
from .safe import visible
from .tables import CAUTIONS, NA, count, interval, metric_label, number, tables
from .writing import write_file

__all__ = ["save_html", "html_view", "render_html", "format_value", "p_value_text"]

TEMPLATE = "report.html.j2"
_DPI = 110
# Figure names a diagnostics object returns, in reading order, with their captions.
_DIAGNOSTIC_CAPTIONS = {"shap_share": "Share of total |SHAP| carried by rule features and by mined features",
                        "shap_per_rule": "Mean |SHAP| per rule"}
_DIAGNOSTIC_METHODS = ("table", "per_population", "shap_summary", "hierarchical", "notes", "figures")


# -- formatting ----------------------------------------------------------------------------------
def _missing(x) -> bool:
    if x is None or x is pd.NA or x is pd.NaT:
        return True
    return isinstance(x, (float, np.floating)) and not math.isfinite(float(x))


def p_value_text(p) -> str:
    """A p-value for reading: three decimals, ``"< 0.001"`` when smaller.

    Examples
    --------
    >>> p_value_text(0.0321), p_value_text(2e-7), p_value_text(None)
    ('0.032', '< 0.001', 'n/a')
    """
    return NA if _missing(p) else ("< 0.001" if p < 0.001 else f"{p:.3f}")


def _is_p_column(name) -> bool:
    words = re.split(r"[^a-z0-9]+", str(name).lower())
    return "p" in words or "pvalue" in words or "p-value" in str(name).lower()


def format_value(value, p: bool = False) -> str:
    """One table cell as text: numbers with three decimals (integers with separators), booleans as yes/no.

    Examples
    --------
    >>> format_value(0.12345), format_value(12000), format_value(True), format_value(float("nan"))
    ('0.123', '12,000', 'yes', 'n/a')
    >>> format_value(0.0004, p=True)
    '< 0.001'
    """
    if _missing(value):
        return NA
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return f"{int(value):,}"
    if isinstance(value, (float, np.floating)):
        return p_value_text(float(value)) if p else number(float(value))
    return str(value)


# -- tables: a dict of header, column kinds and rows of strings (the report's own come from tables.py) --------
def _table(columns: Sequence[str], rows: Sequence[Sequence[str]], kinds: Sequence[str]) -> dict:
    """``kinds`` per column: ``"text"``, ``"key"`` (text on one line), ``"num"`` (right-aligned), ``"code"`` or
    ``"name"`` (code on one line)."""
    return {"columns": [str(c) for c in columns], "kinds": list(kinds),
            "rows": [[str(cell) for cell in row] for row in rows]}


# -- figures ---------------------------------------------------------------------------------------
def _png_uri(figure, where: str) -> str:
    """A figure as a base64 PNG data URI; pyplot-managed figures are closed afterwards."""
    if not callable(getattr(figure, "savefig", None)):
        raise EvaluationError(f"save_html: {where} must be a matplotlib Figure; got {type(figure).__name__}.")
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=_DPI, metadata={"Software": None})  # no version: stable bytes
    if "matplotlib.pyplot" in sys.modules:  # a figure drawn through pyplot would otherwise stay open
        sys.modules["matplotlib.pyplot"].close(figure)
    return "data:image/png;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def _figure(figure, caption: str, where: str) -> dict:
    return {"caption": caption, "src": _png_uri(figure, where)}


def _report_figures(report) -> dict[str, dict]:
    results = report.to_dict()
    draw = {}
    if report.task == "classification" and len(report.oof_predictions()):
        draw["roc"] = (report.plot_roc, "Pooled out-of-fold ROC curves of the three variants")
    if results["per_rule"]:
        draw["rule_effects"] = (report.plot_rule_effects, "Per-rule Δ with corrected-t intervals (forest plot)")
    if results["learning_curve"]:
        draw["learning_curve"] = (report.plot_learning_curve, "Learning curve by share of training students")
    if results["transfer"].get("available") and results["transfer"].get("rows"):
        draw["transfer"] = (report.plot_transfer, "Score on each held-out population by variant")
    return {name: _figure(plot(), caption, f"the {name} figure") for name, (plot, caption) in draw.items()}


# -- sections of the report ----------------------------------------------------------------------
def _facts(pairs: Sequence[tuple[str, str]]) -> list[dict]:
    return [{"term": term, "value": value} for term, value in pairs]


def _data_view(results: dict, t: dict) -> dict:
    data, settings, counts = results["data"], results["settings"], results.get("feature_counts") or {}
    log = data.get("log") or {}
    actions = ", ".join(f"{k} {count(v)}" for k, v in sorted((log.get("actions") or {}).items()))
    facts = [("units", f"{count(data.get('n_units'))} ({settings.get('unit')})"),
             ("students", count(data.get("n_students"))), ("events", count(data.get("n_events"))),
             ("positive rate", number(data.get("positive_rate"))),
             ("log input rows", count(log.get("input_rows"))), ("rows dropped from the log", count(log.get("dropped_rows"))),
             ("sessions", count(log.get("sessions"))), ("actions", actions or NA),
             ("features", f"{count(counts.get('mined'))} mined, {count(counts.get('rules'))} from rules")]
    populations = data.get("populations") or {}
    dropped = 0 if _missing(log.get("dropped_rows")) else int(log.get("dropped_rows") or 0)
    return {"facts": _facts(facts), "issues": [str(i) for i in log.get("issues") or []],
            "dropped": dropped, "dropped_text": count(dropped),
            "population_column": settings.get("population_column"),
            "populations": t["populations"].view() if populations else None}


def _settings_facts(settings: dict) -> list[dict]:
    cv = (f"{settings.get('n_splits')}-fold cross-validation grouped by student × "
          f"{settings.get('repeats')} repeat(s)")
    return _facts([("evaluation", cv), ("random_state", str(settings.get("random_state"))),
                   ("alternative", str(settings.get("alternative"))), ("α", str(settings.get("alpha"))),
                   ("bootstrap resamples", count(settings.get("n_boot")))])


def _headline_sentence(report, results: dict) -> str:
    settings = results["settings"]
    n_folds = (settings.get("n_splits") or 0) * (settings.get("repeats") or 1)
    sided = ("one-sided (the alternative is that the rules improve the detector)"
             if settings.get("alternative") == "greater" else "two-sided")
    return (f"The headline interval and p-value both come from the corrected resampled t-test (Nadeau & Bengio "
            f"2003) on the {n_folds} per-fold differences in {metric_label(report.primary_metric)} between "
            f"combined and mined, {sided}; it widens the plain fold t-test's variance because training sets "
            "overlap between folds.")


def _effect(report) -> str:
    try:
        return report.effect()
    except EvaluationError:
        return "The results hold no combined − mined comparison of the primary metric."


def _value_view(report, results: dict, t: dict) -> dict:
    comp = next((c for c in results["comparisons"] if (c["variant"], c["baseline"], c["metric"])
                 == ("combined", "mined", report.primary_metric)), {})
    return {"headline": _headline_sentence(report, results),
            "ci_method": f"{comp.get('ci_method') or NA}; secondary: {comp.get('boot_method') or NA}",
            "primary": t["primary"].view(), "metrics": t["metrics"].view(),
            "comparisons": t["comparisons"].view()}


def _transfer_view(report, t: dict) -> dict:
    if not len(t["transfer"]):
        return {"table": None, "reason": str(report.transfer().attrs.get("reason") or "no transfer results.")}
    return {"table": t["transfer"].view(), "reason": None}


def _cautions() -> list[dict]:
    items = []
    for text in CAUTIONS:  # shared with the Markdown report, where the title is written **bold**
        match = re.fullmatch(r"\*\*(.+?)\*\*\s*(.*)", text, flags=re.S)
        items.append({"title": match[1], "text": match[2]} if match else {"title": "", "text": text})
    return items


# -- rule diagnostics (RuleDiagnostics of rulefeat.diagnose, read through its methods only) -------------------
# Readable headers for the diagnostics' column and key names; names not listed are shown as they are.
_DIAGNOSTIC_LABELS = {
    "primary": "unit value", "firing_rate": "firing rate", "share_students_any": "students with a firing",
    "auc": "AUC", "support_rate": "units with a firing", "redundancy_r2": "out-of-fold R² of the unit value",
    "redundancy_any_auc": "out-of-fold AUC of any firing", "partial_r": "partial r",
    "partial_ci_low": "95% CI (Fisher z)", "partial_p": "p", "partial_ci_low_student": "95% CI (student bootstrap)",
    "partial_features_r": "r beyond the mined features", "partial_features_ci_low": "95% CI",
    "partial_features_p": "p (beyond features)",
    "external_r": "Spearman r with outcome", "external_ci_low": "95% CI (outcome)", "external_p": "p (outcome)",
    "external_n": "students (outcome)", "rate_range": "firing-rate range", "rate_sd": "firing-rate sd",
    "auc_range": "AUC range", "auc_sd": "AUC sd", "shap_mean_abs": "mean |SHAP|", "shap_share": "share of |SHAP|",
    "n_students": "students", "n_events": "events", "rate": "firing rate", "n_units": "units",
    "n_positive": "positive units", "n_features": "features", "total_abs": "total |SHAP|", "share": "share of |SHAP|",
    "mean_abs": "mean |SHAP| per unit", "mean_abs_net": "mean |net SHAP| per unit", "statistic": "test statistic",
    "df1": "df", "df2": "df (residual)", "p_value": "p", "delta_r2": "Δ {r2}", "r2_base": "{r2}, mined only",
    "r2_full": "{r2}, mined + rules", "aic_base": "AIC, mined only", "aic_full": "AIC, mined + rules",
    "delta_aic": "ΔAIC", "nobs": "students", "n_dropped": "students left out", "base": "base predictors",
    "extra": "added predictors"}
_SHAP_COLUMNS = ("shap_mean_abs", "shap_share")
_DIAGNOSTIC_GROUPS = (
    ("Firing and standalone association with the label",
     ("primary", "firing_rate", "share_students_any", "auc", "kappa", "precision", "recall", "lift", "support_rate")),
    ("Redundancy: how well the mined features predict the rule", ("redundancy_r2", "redundancy_any_auc")),
    ("Unique contribution: partial correlation with the label beyond the mined detector",
     ("partial_r", "partial_ci_low", "partial_ci_low_student", "partial_p", "partial_features_r",
      "partial_features_ci_low", "partial_features_p")),
    ("Stability across populations and external validity",
     ("rate_range", "rate_sd", "auc_range", "auc_sd", "external_r", "external_ci_low", "external_p", "external_n")),
    ("SHAP attributions per rule", _SHAP_COLUMNS),
)
_HIDDEN_KEYS = ("available", "reason", "kind", "r2_name")
_COUNT_NAME = re.compile(r"^n_|_n$|^n$|^nobs$|firings|students|events|units|features")


def _high_of(name) -> str | None:
    return str(name).replace("ci_low", "ci_high") if "ci_low" in str(name) else None


def _paired_high(name, columns) -> bool:
    """A ``…ci_high…`` column shown inside its ``…ci_low…`` partner's interval."""
    return "ci_high" in str(name) and str(name).replace("ci_high", "ci_low") in columns


def _column(frame: pd.DataFrame, name: str, labels: Mapping[str, str]) -> tuple[str, str, list[str]]:
    """(header, kind, cells) of one column; a ``*ci_low`` column with its ``*ci_high`` becomes one interval."""
    values, label = frame[name].tolist(), labels.get(name, name)
    high = _high_of(name)
    if high in frame.columns:
        return label, "num", [interval(a, b) for a, b in zip(values, frame[high], strict=True)]
    present = [v for v in values if not _missing(v)]
    if not all(isinstance(v, (int, float, np.number)) and not isinstance(v, bool) for v in present):
        return label, "text", [format_value(v) for v in values]
    if present and _COUNT_NAME.search(str(name)) and all(float(v).is_integer() for v in present):
        return label, "num", [count(v) for v in values]
    return label, "num", [format_value(v, p=_is_p_column(name)) for v in values]


def _frame_table(frame: pd.DataFrame, names: Sequence[str] | None = None, keys: Sequence[str] = ("rule",),
                 labels: Mapping[str, str] | None = None) -> dict:
    """Columns of a DataFrame as a display table: ``keys`` first (rule names in code), numbers right-aligned."""
    keys = [k for k in keys if k in frame.columns]
    names = [n for n in (frame.columns if names is None else names)
             if n in frame.columns and n not in keys and not _paired_high(n, frame.columns)]
    columns = [_column(frame, n, labels or {}) for n in [*keys, *names]]
    kinds = [("name" if n == "rule" else "key" if n in keys else kind)
             for n, (_, kind, _) in zip([*keys, *names], columns, strict=True)]
    rows = list(zip(*[cells for _, _, cells in columns], strict=True)) if columns else []
    return _table([label for label, _, _ in columns], rows, kinds)


def _rule_tables(frame: pd.DataFrame) -> list[dict]:
    """The per-rule diagnostics split into readable groups of columns; unknown columns go to a last group."""
    grouped = {n for _, names in _DIAGNOSTIC_GROUPS for n in names} | {"rule"}
    rest = [c for c in frame.columns if c not in grouped and not _paired_high(c, frame.columns)]
    groups = [*_DIAGNOSTIC_GROUPS, ("Other diagnostics", tuple(rest))]
    return [{"title": title, "table": _frame_table(frame, names, labels=_DIAGNOSTIC_LABELS)}
            for title, names in groups if any(n in frame.columns for n in names)]


def _hierarchical_view(info: Mapping) -> dict:
    """The hierarchical regression as rows of quantity and value (lists as sentences), or why it was not run."""
    if info.get("available") is False:
        return {"table": None, "caption": None, "lists": [], "reason": str(info.get("reason") or "not computed.")}
    r2 = str(info.get("r2_name") or "R²")
    rows, lists = [], []

    def walk(prefix: str, value) -> None:
        label = _DIAGNOSTIC_LABELS.get(prefix, prefix).replace("{r2}", r2)
        if isinstance(value, Mapping) and value:
            for key, inner in value.items():
                walk(f"{prefix}.{key}" if prefix else str(key), inner)
        elif isinstance(value, (list, tuple, np.ndarray)):
            lists.append({"term": label, "value": ", ".join(format_value(v) for v in value) or NA})
        elif isinstance(value, (int, np.integer)) and not isinstance(value, (bool, np.bool_)):
            rows.append((label, count(value)))
        else:
            name = prefix.rsplit(".", 1)[-1]
            rows.append((label, format_value(value, p=_is_p_column(name) or name == "p_value")))

    walk("", {k: v for k, v in info.items() if k not in (*_HIDDEN_KEYS, "test")})
    kind, test = info.get("kind"), info.get("test")
    caption = ", ".join(str(x) for x in (f"{kind} outcome" if kind else None, test) if x) or None
    return {"table": _table(["quantity", "value"], rows, ["text", "num"]), "caption": caption, "lists": lists,
            "reason": None}


def _diagnostic_figures(figures: Mapping) -> list[dict]:
    names = [n for n in _DIAGNOSTIC_CAPTIONS if n in figures] + [n for n in figures if n not in _DIAGNOSTIC_CAPTIONS]
    out = []
    for name in names:
        caption = _DIAGNOSTIC_CAPTIONS.get(name) or (
            f"SHAP dependence of {name.split(':', 1)[1]}" if str(name).startswith("dependence:") else str(name))
        out.append(_figure(figures[name], caption, f"diagnostics figure {name!r}"))
    return out


def _call_frame(diagnostics, method: str) -> pd.DataFrame | None:
    frame = getattr(diagnostics, method)() if hasattr(diagnostics, method) else None
    if frame is not None and not isinstance(frame, pd.DataFrame):
        raise EvaluationError(f"save_html: diagnostics.{method}() must return a pandas DataFrame; got "
                              f"{type(frame).__name__}.")
    return frame


def _diagnostics_view(diagnostics) -> dict | None:
    if diagnostics is None:
        return None
    if not any(hasattr(diagnostics, m) for m in _DIAGNOSTIC_METHODS):
        raise EvaluationError(f"save_html: 'diagnostics' must be the RuleDiagnostics returned by "
                              f"rulefeat.diagnose (with {', '.join(m + '()' for m in _DIAGNOSTIC_METHODS)}); "
                              f"got {type(diagnostics).__name__}. Pass diagnostics=None to leave them out.")
    table, populations = _call_frame(diagnostics, "table"), _call_frame(diagnostics, "per_population")
    shap = _call_frame(diagnostics, "shap_summary")
    if table is not None and shap is not None and len(shap):  # the SHAP table already has these numbers
        table = table.drop(columns=[c for c in _SHAP_COLUMNS if c in table.columns])
    hierarchical = diagnostics.hierarchical() if hasattr(diagnostics, "hierarchical") else None
    shap_reason = None if shap is None or len(shap) else shap.attrs.get("reason")
    return {"tables": _rule_tables(table) if table is not None and len(table) else [],
            "per_population": _frame_table(populations, keys=("rule", "population"), labels=_DIAGNOSTIC_LABELS)
            if populations is not None and len(populations) else None,
            "shap": _frame_table(shap, keys=("group",), labels=_DIAGNOSTIC_LABELS)
            if shap is not None and len(shap) else None,
            "shap_reason": str(shap_reason) if shap_reason else None,
            "hierarchical": _hierarchical_view(hierarchical)
            if isinstance(hierarchical, Mapping) and hierarchical else None,
            "notes": [str(n) for n in (diagnostics.notes() if hasattr(diagnostics, "notes") else [])],
            "figures": _diagnostic_figures((diagnostics.figures() if hasattr(diagnostics, "figures") else None) or {})}


def _contents(diagnostics: dict | None) -> list[dict]:
    sections = [("data", "Data"), ("rules", "Rules as written"), ("value", "Incremental value"),
                ("per-rule", "Per-rule effects"), ("diagnostics", "Rule diagnostics"),
                ("transfer", "Transfer to unseen populations"), ("learning-curve", "Learning curve"),
                ("guards", "Guards and notes"), ("reproducibility", "Reproducibility"), ("cautions", "Cautions")]
    return [{"id": i, "title": t} for i, t in sections if i != "diagnostics" or diagnostics is not None]


def _check_report(report) -> None:
    needed = ("to_dict", "summary", "per_rule", "transfer", "learning_curve", "comparisons", "effect")
    absent = [name for name in needed if not hasattr(report, name)]
    if absent:
        raise EvaluationError(f"save_html: 'report' must be the IncrementalValueReport returned by "
                              f"rulefeat.incremental_value; got {type(report).__name__} (it has no "
                              f"{', '.join(absent)}).")


def html_view(report, diagnostics=None) -> dict:
    """Everything the HTML page shows, as a plain dict of strings, tables and PNG data URIs.

    Parameters
    ----------
    report : IncrementalValueReport
        The evaluation report.
    diagnostics : RuleDiagnostics, optional
        Per-rule validity diagnostics (:func:`rulefeat.diagnose`); any of its ``table()``,
        ``per_population()``, ``shap_summary()``, ``hierarchical()``, ``notes()`` and ``figures()``
        that it has are shown.

    Returns
    -------
    dict
        Keys ``title``, ``effect``, ``contents``, ``data``, ``settings``, ``model``, ``rules``, ``rules_hash``,
        ``value``, ``per_rule``, ``diagnostics``, ``transfer``, ``learning_curve``, ``figures``,
        ``guards``, ``notes``, ``reproducibility``, ``cautions``.
    """
    _check_report(report)
    results, t = report.to_dict(), tables(report)
    diagnostics_view = _diagnostics_view(diagnostics)
    repro = sorted((results.get("reproducibility") or {}).items())
    return {
        "title": "Incremental value of the expert rules", "effect": _effect(report),
        "contents": _contents(diagnostics_view), "data": _data_view(results, t),
        "settings": _settings_facts(results["settings"]),
        "model": " ".join(str(results["settings"].get("model")).split()), "rules": t["rules"].view(),
        "rules_hash": str(results.get("rules_hash") or NA), "value": _value_view(report, results, t),
        "per_rule": t["per_rule"].view() if len(t["per_rule"]) else None,
        "diagnostics": diagnostics_view, "transfer": _transfer_view(report, t),
        "learning_curve": t["learning_curve"].view() if len(t["learning_curve"]) else None,
        "figures": _report_figures(report),
        "guards": [{"kind": str(g.get("kind")), "message": str(g.get("message"))} for g in results["guards"]],
        "notes": [str(n) for n in results["notes"]],
        "reproducibility": _table(["item", "value"], [(k, "null" if v is None else v) for k, v in repro],
                                  ["text", "code"]),
        "cautions": _cautions(),
    }


# -- rendering -----------------------------------------------------------------------------------
def render_html(view: Mapping) -> str:
    """Fill the packaged template with a view from :func:`html_view` (every value autoescaped)."""
    import jinja2  # imported on first use: only the HTML page needs it

    source = resources.files("rulefeat.report").joinpath("templates", TEMPLATE).read_text(encoding="utf-8")
    environment = jinja2.Environment(autoescape=True, undefined=jinja2.StrictUndefined, trim_blocks=True,
                                     lstrip_blocks=True, finalize=_shown)
    return environment.from_string(source).render(**view)


def _shown(value):
    """Every value the template prints: hidden characters (controls, bidi overrides) written visibly.

    Markup the template built itself (``__html__``) is left as it is: it holds no user text unescaped."""
    return visible(value) if isinstance(value, str) and not hasattr(value, "__html__") else value


def _target(path) -> Path:
    try:
        target = Path(path)
    except TypeError as exc:
        raise EvaluationError(f"save_html: 'path' must be a file path such as 'report.html'; got "
                              f"{type(path).__name__} ({path!r}).") from exc
    if target.is_dir():
        raise EvaluationError(f"save_html: {str(target)!r} is a folder; pass a file path inside it, e.g. "
                              f"{str(target / 'report.html')!r}.")
    return target


def save_html(report, path: str | Path, diagnostics=None) -> Path:
    """Write the report as one self-contained HTML file: figures embedded, CSS inline, no scripts or links.

    Parameters
    ----------
    report : IncrementalValueReport
        The evaluation report (:func:`rulefeat.incremental_value`).
    path : str or Path
        The file to write (its folder is created when missing); UTF-8.  It is written to a temporary
        file beside it and moved into place, so an existing page is replaced whole or not at all.
    diagnostics : RuleDiagnostics, optional
        Per-rule validity diagnostics from :func:`rulefeat.diagnose`, shown in their own section.

    Returns
    -------
    Path
        The file written.

    Examples
    --------
    >>> report.save_html("report.html")                      # doctest: +SKIP
    >>> report.save_html("report.html", diagnostics=diag)    # doctest: +SKIP
    """
    target = _target(path)
    return write_file(target, render_html(html_view(report, diagnostics)), where="save_html")
