"""Display tables and the Markdown rendering of an incremental-value report.

:func:`tables` turns the report's numeric tables into small DataFrames of display strings (the
one place numbers are formatted); :func:`render_markdown` lays those out with a minimal
GitHub-flavoured Markdown table writer of our own (``DataFrame.to_markdown`` needs an extra
dependency).  An HTML rendering reuses :func:`tables` so both show the same text.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import pandas as pd

__all__ = ["METRIC_LABELS", "LOWER_IS_BETTER", "metric_order", "markdown_table", "tables", "render_markdown",
           "CAUTIONS"]

METRIC_ORDER = ("auc", "kappa", "average_precision", "log_loss", "brier", "r2", "rmse")
METRIC_LABELS = {"auc": "AUC", "kappa": "kappa", "average_precision": "average precision",
                 "log_loss": "log loss", "brier": "Brier", "r2": "R²", "rmse": "RMSE"}
LOWER_IS_BETTER = frozenset({"log_loss", "brier", "rmse"})
NA = "n/a"

CAUTIONS = (
    "**Student data.** Interaction logs are personal data about students, often minors. Use them only with "
    "the consent and under the data-protection terms that apply; pseudonymise student ids and keep logs, "
    "predictions and this report out of public places.",
    "**Subgroups.** An average over all students can hide a detector that works poorly for some groups "
    "(schools, classes, language or disability groups). Check performance per subgroup before any "
    "deployment.",
    "**Decisions.** A detector supports the decisions of teachers and designers; it should not make "
    "high-stakes decisions about a student (grades, placement, discipline) on its own.",
    "**Local rules.** Local law, school policy and your institutional review board take precedence over "
    "anything in this report; defer to them.",
)


# -- formatting ----------------------------------------------------------------------------------
def _missing(x) -> bool:
    return x is None or (isinstance(x, float) and x != x)


def number(x, digits: int = 3) -> str:
    return NA if _missing(x) else f"{x:.{digits}f}"


def signed(x, digits: int = 3) -> str:
    return NA if _missing(x) else f"{x:+.{digits}f}"


def p_text(p) -> str:
    return NA if _missing(p) else ("<0.001" if p < 0.001 else f"{p:.3f}")


def interval(low, high) -> str:
    return NA if _missing(low) or _missing(high) else f"[{low:+.3f}, {high:+.3f}]"


def count(n) -> str:
    return NA if _missing(n) else f"{int(n):,}"


def metric_order(metrics: Iterable[str]) -> list[str]:
    """Known metrics in a fixed reading order, then any others alphabetically."""
    metrics = list(metrics)
    known = [m for m in METRIC_ORDER if m in metrics]
    return known + sorted(m for m in metrics if m not in METRIC_ORDER)


def _label(metric: str) -> str:
    return METRIC_LABELS.get(metric, metric)


# -- Markdown table writer -----------------------------------------------------------------------
def _cell(value) -> str:
    text = NA if _missing(value) else str(value)
    return text.replace("\r", " ").replace("\n", " ").replace("|", "\\|")


def markdown_table(frame: pd.DataFrame) -> str:
    """A GitHub-flavoured Markdown table of a DataFrame's columns (the index is not written).

    Examples
    --------
    >>> print(markdown_table(pd.DataFrame({"rule": ["a|b"], "Δ": ["+0.010"]})))
    | rule | Δ |
    | --- | --- |
    | a\\|b | +0.010 |
    """
    head = "| " + " | ".join(_cell(c) for c in frame.columns) + " |"
    rule = "| " + " | ".join("---" for _ in frame.columns) + " |"
    rows = frame.itertuples(index=False, name=None)
    body = ["| " + " | ".join(_cell(v) for v in row) + " |" for row in rows]
    return "\n".join([head, rule, *body])


def _code(text: str) -> str:
    """An inline code span that survives backticks in the text."""
    text = " ".join(str(text).split())  # a model repr may span lines; a code span may not
    return f"`` {text} ``" if "`" in text else f"`{text}`"


# -- display tables ------------------------------------------------------------------------------
def _ci(frame: pd.DataFrame, low: str, high: str) -> list[str]:
    return [interval(a, b) for a, b in zip(frame[low], frame[high], strict=True)]


def _mean_sd(frame: pd.DataFrame, m: str) -> list[str]:
    return [f"{number(a)} ± {number(b)}" for a, b in zip(frame[m], frame[f"{m}_sd"], strict=True)]


def _primary_table(summary: pd.DataFrame, m: str) -> pd.DataFrame:
    label = _label(m)
    table = pd.DataFrame({
        "variant": summary["variant"],
        f"{label} (folds, mean ± sd)": _mean_sd(summary, m),
        f"{label} (pooled)": summary[f"{m}_pooled"].map(number),
        "Δ vs mined": summary[f"{m}_delta"].map(signed),
        "95% CI": _ci(summary, f"{m}_ci_low", f"{m}_ci_high"),
        "p (corrected t)": summary[f"{m}_p"].map(p_text),
        "p (naive t)": summary[f"{m}_p_naive"].map(p_text),
    })
    if m == "auc":
        table["p (DeLong)"] = summary["auc_delong_p"].map(p_text)
    return table


def _metrics_table(summary: pd.DataFrame, metrics: list[str]) -> pd.DataFrame:
    table = pd.DataFrame({"variant": summary["variant"]})
    for m in metrics:
        pooled = summary[f"{m}_pooled"].map(number)
        table[_label(m)] = [f"{t} (pooled {p})" for t, p in zip(_mean_sd(summary, m), pooled, strict=True)]
    return table


def _t_text(t, df) -> str:
    return NA if _missing(t) else f"{t:.2f} ({count(df)})"


def _comparisons_table(comparisons: pd.DataFrame, metrics: list[str]) -> pd.DataFrame:
    rank = {m: i for i, m in enumerate(metrics)}
    frame = comparisons.assign(_rank=comparisons["metric"].map(rank)).sort_values(
        ["_rank", "variant"], kind="mergesort")
    return pd.DataFrame({
        "comparison": [f"{v} − {b}" for v, b in zip(frame["variant"], frame["baseline"], strict=True)],
        "metric": [_label(m) + (" (lower is better)" * (m in LOWER_IS_BETTER)) for m in frame["metric"]],
        "Δ": frame["delta"].map(signed),
        "95% CI": _ci(frame, "ci_low", "ci_high"),
        "t (df)": [_t_text(t, df) for t, df in zip(frame["t"], frame["df"], strict=True)],
        "p (corrected t)": frame["p_value"].map(p_text),
        "p (naive t)": frame["p_naive"].map(p_text),
    })


def _per_rule_table(per_rule: pd.DataFrame, means: Mapping[str, str]) -> pd.DataFrame:
    return pd.DataFrame({
        "rule": per_rule["rule"],
        "means": per_rule["rule"].map(lambda r: means.get(r) or ""),
        "Δ when dropped": per_rule["drop_delta"].map(signed),
        "CI (dropped)": _ci(per_rule, "drop_ci_low", "drop_ci_high"),
        "Holm p (dropped)": per_rule["drop_p_holm"].map(p_text),
        "Δ when added": per_rule["add_delta"].map(signed),
        "CI (added)": _ci(per_rule, "add_ci_low", "add_ci_high"),
        "Holm p (added)": per_rule["add_p_holm"].map(p_text),
    })


def _transfer_table(transfer: pd.DataFrame, metrics: list[str], m: str) -> pd.DataFrame:
    table = pd.DataFrame({"held-out population": transfer["population"], "variant": transfer["variant"],
                          "units": transfer["n_test"].map(count),
                          "students": transfer["n_test_students"].map(count)})
    for metric in metrics:
        table[_label(metric)] = transfer[metric].map(number)
    table[f"Δ {_label(m)} vs mined"] = transfer["delta"].map(signed)
    return table


def _curve_table(curve: pd.DataFrame, m: str) -> pd.DataFrame:
    return pd.DataFrame({
        "share of training students": curve["fraction"].map(lambda f: NA if _missing(f) else f"{f:.0%}"),
        f"mined {_label(m)}": curve["mined"].map(number),
        f"combined {_label(m)}": curve["combined"].map(number),
        "Δ": curve["delta"].map(signed),
        "95% CI": _ci(curve, "ci_low", "ci_high"),
    })


def _rules_table(rules: list[dict]) -> pd.DataFrame:
    columns = ["rule", "means", "why", "when", "report"]
    rows = [{"rule": r.get("name", ""), "means": r.get("means") or "", "why": r.get("why") or "",
             "when": _code(r.get("when", "")), "report": ", ".join(r.get("report") or [])} for r in rules]
    return pd.DataFrame(rows, columns=columns)


def _populations_table(populations: Mapping[str, Mapping]) -> pd.DataFrame:
    rows = [{"population": name, "units": count(p.get("n_units")), "students": count(p.get("n_students")),
             "positive rate": number(p.get("positive_rate"))} for name, p in sorted(populations.items())]
    return pd.DataFrame(rows, columns=["population", "units", "students", "positive rate"])


def tables(report) -> dict[str, pd.DataFrame]:
    """Display tables (all cells strings) of a report, keyed by section."""
    results, m, metrics = report.to_dict(), report.primary_metric, report.metrics
    summary = report.summary()
    means = {r.get("name"): r.get("means") for r in results["rules"]}
    transfer = report.transfer()
    return {
        "primary": _primary_table(summary, m),
        "metrics": _metrics_table(summary, metrics),
        "comparisons": _comparisons_table(report.comparisons(), metrics),
        "per_rule": _per_rule_table(report.per_rule(), means),
        "transfer": _transfer_table(transfer, metrics, m) if len(transfer) else pd.DataFrame(),
        "learning_curve": _curve_table(report.learning_curve(), m),
        "rules": _rules_table(results["rules"]),
        "populations": _populations_table(results["data"].get("populations") or {}),
    }


# -- Markdown sections ---------------------------------------------------------------------------
def _image(images: Mapping[str, str], name: str, alt: str) -> list[str]:
    return [f"![{alt}]({images[name]})", ""] if name in images else []


def _data_section(results: dict, t: dict) -> list[str]:
    data, settings = results["data"], results["settings"]
    log = data.get("log") or {}
    actions = ", ".join(f"{k} {count(v)}" for k, v in sorted((log.get("actions") or {}).items()))
    rate = data.get("positive_rate")
    lines = ["## Data", "",
             f"- Units: {count(data.get('n_units'))} ({settings.get('unit')}), students: "
             f"{count(data.get('n_students'))}, events: {count(data.get('n_events'))}"
             + ("." if _missing(rate) else f", positive rate {number(rate)}."),
             f"- Log: {count(log.get('input_rows'))} input rows, {count(log.get('dropped_rows'))} dropped, "
             f"{count(log.get('sessions'))} sessions; actions: {actions or NA}.",
             f"- Evaluation: {settings.get('n_splits')}-fold cross-validation grouped by student × "
             f"{settings.get('repeats')} repeats, random_state {settings.get('random_state')}, "
             f"alternative {settings.get('alternative')!r}, α = {settings.get('alpha')}, "
             f"bootstrap n = {settings.get('n_boot')}; model {_code(settings.get('model'))}."]
    lines += [f"- Log issue: {issue}" for issue in log.get("issues") or []]
    if len(t["populations"]):
        lines += ["", f"Populations (column {_code(settings.get('population_column'))}):", "",
                  markdown_table(t["populations"])]
    return [*lines, ""]


def _rules_section(results: dict, t: dict) -> list[str]:
    counts = results.get("feature_counts") or {}
    return ["## Rules", "",
            f"{len(results['rules'])} rules (text hash {_code(results.get('rules_hash'))}); features: "
            f"{count(counts.get('mined'))} mined, {count(counts.get('rules'))} from rules.", "",
            markdown_table(t["rules"]), ""]


def _value_section(report, results: dict, t: dict, images: Mapping[str, str]) -> list[str]:
    m = report.primary_metric
    comp = next((c for c in results["comparisons"]
                 if (c["variant"], c["baseline"], c["metric"]) == ("combined", "mined", m)), {})
    alternative = results["settings"].get("alternative")
    return ["## Incremental value", "", f"**{report.effect()}**", "",
            markdown_table(t["primary"]), "",
            f"Δ is the variant minus mined in the metric's own units. The headline p is the corrected "
            f"resampled t-test over folds (Nadeau & Bengio 2003), alternative {alternative!r}; the naive "
            f"fold t-test ignores the overlap of training sets and is shown only beside it. CI: "
            f"{comp.get('ci_method') or NA}, on the pooled out-of-fold predictions.", "",
            *_image(images, "roc", "ROC curves"),
            "### All metrics", "", markdown_table(t["metrics"]), "",
            "### Differences on every metric", "", markdown_table(t["comparisons"]), ""]


def _per_rule_section(t: dict, images: Mapping[str, str]) -> list[str]:
    if not len(t["per_rule"]):
        return ["## Per-rule effects", "", "The per-rule ablation was not run.", ""]
    return ["## Per-rule effects", "",
            "Δ when dropped = combined − combined without the rule; "
            "Δ when added = mined plus the rule − mined. Holm's correction is applied separately to the "
            "dropped and the added family of tests.", "",
            markdown_table(t["per_rule"]), "", *_image(images, "rule_effects", "Per-rule effects")]


def _transfer_section(report, t: dict, images: Mapping[str, str]) -> list[str]:
    head = ["## Transfer to unseen populations", ""]
    if not len(t["transfer"]):
        return [*head, f"Not available: {report.transfer().attrs.get('reason')}", ""]
    return [*head, "Each population in turn is held out; the detectors are trained on the others.", "",
            markdown_table(t["transfer"]), "", *_image(images, "transfer", "Transfer by population")]


def _curve_section(t: dict, images: Mapping[str, str]) -> list[str]:
    head = ["## Learning curve", ""]
    if not len(t["learning_curve"]):
        return [*head, "The learning curve was not computed.", ""]
    return [*head, "Training folds subsampled by student; the CI reflects the spread over folds.", "",
            markdown_table(t["learning_curve"]), "", *_image(images, "learning_curve", "Learning curve")]


def _guards_section(results: dict) -> list[str]:
    guards = [f"- **{g.get('kind')}**: {_cell(g.get('message'))}" for g in results["guards"]]
    notes = [f"- {_cell(n)}" for n in results["notes"]]
    return ["## Guards and notes", "", "### Guards", "", *(guards or ["No guard fired."]), "",
            "### Notes", "", *(notes or ["No notes."]), ""]


def _reproducibility_section(results: dict) -> list[str]:
    repro = results["reproducibility"]
    lines = [f"{key}: {'null' if value is None else value}" for key, value in sorted(repro.items())]
    return ["## Reproducibility", "", "```text", *lines, "```", ""]


def render_markdown(report, t: dict[str, pd.DataFrame], images: Mapping[str, str]) -> str:
    """The full Markdown report; ``images`` maps figure names to files to link."""
    results = report.to_dict()
    parts = ["# Incremental value of the expert rules", "",
             *_data_section(results, t), *_rules_section(results, t),
             *_value_section(report, results, t, images), *_per_rule_section(t, images),
             *_transfer_section(report, t, images), *_curve_section(t, images),
             *_guards_section(results), *_reproducibility_section(results),
             "## Cautions", "", *[f"- {c}" for c in CAUTIONS], ""]
    return "\n".join(parts)
