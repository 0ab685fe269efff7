"""The Markdown rendering of an incremental-value report, from the tables of ``tables.py``.

A minimal GitHub-flavoured Markdown table writer of our own (``DataFrame.to_markdown`` needs an extra
dependency) lays out the display tables built once in ``tables.py``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import pandas as pd

from .safe import code_span, fenced, markdown_text, visible
from .tables import CAUTIONS, NA, Table, count, is_missing, number

__all__ = ["markdown_table", "render_markdown"]


# -- Markdown table writer -----------------------------------------------------------------------
def _cell(value, kind: str = "text") -> str:
    """One table cell: our own numbers as they are, code as a code span, every other text escaped."""
    if is_missing(value):
        return NA
    if kind == "code":
        text = code_span(value)
    elif kind == "num":
        text = visible(str(value), breaks=True)
    else:
        text = markdown_text(value)
    return text.replace("|", "\\|") if kind in ("code", "num") else text  # markdown_text escapes its own


def markdown_table(table: Table | pd.DataFrame, kinds: Sequence[str] | None = None) -> str:
    """A GitHub-flavoured Markdown table of a :class:`Table` (its kinds) or a DataFrame (the index is not
    written); ``kinds`` per column as in ``tables.py``, default every column user text (escaped).

    Examples
    --------
    >>> print(markdown_table(pd.DataFrame({"rule": ["a|b <i>"], "Δ": ["+0.010"]}), ["text", "num"]))
    | rule | Δ |
    | --- | --- |
    | a\\|b &lt;i&gt; | +0.010 |
    """
    if isinstance(table, Table):
        columns, kinds, rows = table.columns, table.kinds, table.rows
    else:
        columns, rows = table.columns, list(table.itertuples(index=False, name=None))
        kinds = list(kinds) if kinds is not None else ["text"] * len(columns)
    head = "| " + " | ".join(_cell(c, "num") for c in columns) + " |"
    rule = "| " + " | ".join("---" for _ in columns) + " |"
    body = ["| " + " | ".join(_cell(v, k) for v, k in zip(row, kinds, strict=True)) + " |" for row in rows]
    return "\n".join([head, rule, *body])


# -- Markdown sections ---------------------------------------------------------------------------
def _image(images: Mapping[str, str], name: str, alt: str) -> list[str]:
    return [f"![{alt}]({images[name]})", ""] if name in images else []


def _data_section(results: dict, t: dict) -> list[str]:
    data, settings = results["data"], results["settings"]
    log = data.get("log") or {}
    actions = ", ".join(f"{markdown_text(k)} {count(v)}" for k, v in sorted((log.get("actions") or {}).items()))
    rate = data.get("positive_rate")
    lines = ["## Data", "",
             f"- Units: {count(data.get('n_units'))} ({settings.get('unit')}), students: "
             f"{count(data.get('n_students'))}, events: {count(data.get('n_events'))}"
             + ("." if is_missing(rate) else f", positive rate {number(rate)}."),
             f"- Log: {count(log.get('input_rows'))} input rows, {count(log.get('dropped_rows'))} dropped, "
             f"{count(log.get('sessions'))} sessions; actions: {actions or NA}.",
             f"- Evaluation: {settings.get('n_splits')}-fold cross-validation grouped by student × "
             f"{settings.get('repeats')} repeats, random_state {settings.get('random_state')}, "
             f"alternative {settings.get('alternative')!r}, α = {settings.get('alpha')}, "
             f"bootstrap n = {settings.get('n_boot')}; model {code_span(settings.get('model'))}."]
    lines += [f"- Log issue: {markdown_text(issue)}" for issue in log.get("issues") or []]
    if len(t["populations"]):
        lines += ["", f"Populations (column {code_span(settings.get('population_column'))}):", "",
                  markdown_table(t["populations"])]
    return [*lines, ""]


def _rules_section(results: dict, t: dict) -> list[str]:
    counts = results.get("feature_counts") or {}
    return ["## Rules", "",
            f"{len(results['rules'])} rules (text hash {code_span(results.get('rules_hash'))}); features: "
            f"{count(counts.get('mined'))} mined, {count(counts.get('rules'))} from rules.", "",
            markdown_table(t["rules"]), ""]


def _value_section(report, results: dict, t: dict, images: Mapping[str, str]) -> list[str]:
    m = report.primary_metric
    comp = next((c for c in results["comparisons"]
                 if (c["variant"], c["baseline"], c["metric"]) == ("combined", "mined", m)), {})
    alternative = results["settings"].get("alternative")
    return ["## Incremental value", "", f"**{markdown_text(report.effect())}**", "",
            markdown_table(t["primary"]), "",
            f"Δ is the variant minus mined in the metric's own units, the mean over every fold and repeat. "
            f"The headline interval and p come from one procedure: {markdown_text(comp.get('ci_method') or NA)}, "
            f"alternative {alternative!r}; the naive fold t-test ignores the overlap of training sets and is shown "
            f"only beside it. Secondary column: {markdown_text(comp.get('boot_method') or NA)}, which ignores "
            f"training-set variability.", "",
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
        return [*head, f"Not available: {markdown_text(report.transfer().attrs.get('reason'))}", ""]
    return [*head, "Each population in turn is held out; the detectors are trained on the others.", "",
            markdown_table(t["transfer"]), "", *_image(images, "transfer", "Transfer by population")]


def _curve_section(t: dict, images: Mapping[str, str]) -> list[str]:
    head = ["## Learning curve", ""]
    if not len(t["learning_curve"]):
        return [*head, "The learning curve was not computed.", ""]
    return [*head, "Training folds subsampled by student; the CI reflects the spread over folds.", "",
            markdown_table(t["learning_curve"]), "", *_image(images, "learning_curve", "Learning curve")]


def _guards_section(results: dict) -> list[str]:
    guards = [f"- **{markdown_text(g.get('kind'))}**: {markdown_text(g.get('message'))}" for g in results["guards"]]
    notes = [f"- {markdown_text(n)}" for n in results["notes"]]
    return ["## Guards and notes", "", "### Guards", "", *(guards or ["No guard fired."]), "",
            "### Notes", "", *(notes or ["No notes."]), ""]


def _reproducibility_section(results: dict) -> list[str]:
    repro = results["reproducibility"]
    lines = [f"{key}: {'null' if value is None else value}" for key, value in sorted(repro.items())]
    return ["## Reproducibility", "", *fenced(lines), ""]


def render_markdown(report, t: dict[str, Table], images: Mapping[str, str]) -> str:
    """The full Markdown report; ``images`` maps figure names to files to link."""
    results = report.to_dict()
    parts = ["# Incremental value of the expert rules", "",
             *_data_section(results, t), *_rules_section(results, t),
             *_value_section(report, results, t, images), *_per_rule_section(t, images),
             *_transfer_section(report, t, images), *_curve_section(t, images),
             *_guards_section(results), *_reproducibility_section(results),
             "## Cautions", "", *[f"- {c}" for c in CAUTIONS], ""]
    return "\n".join(parts)
