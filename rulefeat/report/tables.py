"""The one table layer of the incremental-value report: every display table is built here, once.

:func:`tables` turns the report's numeric tables into :class:`Table` records of display strings (the one
place numbers are formatted), each column with a kind (``key``, ``name``, ``text``, ``code``, ``num``) for
alignment.  The Markdown report (``markdown.py``), the HTML page (``html.py``) and
``IncrementalValueReport.tables()`` only render these records.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass

import pandas as pd

from .safe import code_span

__all__ = ["METRIC_LABELS", "LOWER_IS_BETTER", "NA", "CAUTIONS", "Table", "metric_order", "metric_label", "tables",
           "number", "signed", "p_text", "interval", "count", "code_span", "is_missing"]

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
def is_missing(x) -> bool:
    return x is None or (isinstance(x, float) and x != x)


def number(x, digits: int = 3) -> str:
    return NA if is_missing(x) else f"{x:.{digits}f}"


def signed(x, digits: int = 3) -> str:
    return NA if is_missing(x) else f"{x:+.{digits}f}"


def p_text(p) -> str:
    return NA if is_missing(p) else ("<0.001" if p < 0.001 else f"{p:.3f}")


def interval(low, high) -> str:
    return NA if is_missing(low) or is_missing(high) else f"[{low:+.3f}, {high:+.3f}]"


def count(n) -> str:
    return NA if is_missing(n) else f"{int(n):,}"


def metric_order(metrics: Iterable[str]) -> list[str]:
    """Known metrics in a fixed reading order, then any others alphabetically."""
    metrics = list(metrics)
    known = [m for m in METRIC_ORDER if m in metrics]
    return known + sorted(m for m in metrics if m not in METRIC_ORDER)


def metric_label(metric: str) -> str:
    return METRIC_LABELS.get(metric, metric)


@dataclass(frozen=True)
class Table:
    """A display table: column headers, a kind per column, rows of strings.

    Examples
    --------
    >>> t = Table.of(pd.DataFrame({"rule": ["skim"], "when": ["gap < 3s"]}), ["name", "code"])
    >>> t.frame()["when"].tolist(), t.view()["kinds"]
    (['`gap < 3s`'], ['name', 'code'])
    """

    columns: tuple[str, ...]
    kinds: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]

    @classmethod
    def of(cls, frame: pd.DataFrame, kinds: Sequence[str]) -> Table:
        rows = tuple(tuple(str(v) for v in row) for row in frame.itertuples(index=False, name=None))
        return cls(tuple(str(c) for c in frame.columns), tuple(kinds), rows)

    def __len__(self) -> int:
        return len(self.rows)

    def frame(self) -> pd.DataFrame:
        """The table as a DataFrame of strings, ``code`` columns as Markdown code spans."""
        rows = [[code_span(v) if kind == "code" else v for v, kind in zip(row, self.kinds, strict=True)]
                for row in self.rows]
        return pd.DataFrame(rows, columns=list(self.columns))

    def view(self) -> dict:
        """The table for the HTML template: ``columns``, ``kinds`` and ``rows``."""
        return {"columns": list(self.columns), "kinds": list(self.kinds), "rows": [list(r) for r in self.rows]}


# -- display tables ------------------------------------------------------------------------------
def _ci(frame: pd.DataFrame, low: str, high: str) -> list[str]:
    return [interval(a, b) for a, b in zip(frame[low], frame[high], strict=True)]


def _mean_sd(frame: pd.DataFrame, m: str) -> list[str]:
    return [f"{number(a)} ± {number(b)}" for a, b in zip(frame[m], frame[f"{m}_sd"], strict=True)]


def _level(level: float) -> str:
    return f"{level:.0%}"


def _primary_table(summary: pd.DataFrame, m: str, level: float) -> pd.DataFrame:
    label = metric_label(m)
    table = pd.DataFrame({
        "variant": summary["variant"],
        f"{label} (folds, mean ± sd)": _mean_sd(summary, m),
        f"{label} (pooled)": summary[f"{m}_pooled"].map(number),
        "Δ vs mined": summary[f"{m}_delta"].map(signed),
        f"{_level(level)} CI (corrected t)": _ci(summary, f"{m}_ci_low", f"{m}_ci_high"),
        "p (corrected t)": summary[f"{m}_p"].map(p_text),
        "95% CI (student bootstrap, secondary)": _ci(summary, f"{m}_boot_ci_low", f"{m}_boot_ci_high"),
        "p (naive t)": summary[f"{m}_p_naive"].map(p_text),
    })
    if m == "auc":
        table["p (DeLong)"] = summary["auc_delong_p"].map(p_text)
    return Table.of(table, ["key"] + ["num"] * (len(table.columns) - 1))


def _metrics_table(summary: pd.DataFrame, metrics: list[str]) -> pd.DataFrame:
    table = pd.DataFrame({"variant": summary["variant"]})
    for m in metrics:
        pooled = summary[f"{m}_pooled"].map(number)
        table[metric_label(m)] = [f"{t} (pooled {p})" for t, p in zip(_mean_sd(summary, m), pooled, strict=True)]
    return Table.of(table, ["key"] + ["num"] * len(metrics))


def _t_text(t, df) -> str:
    return NA if is_missing(t) else f"{t:.2f} ({count(df)})"


def _comparisons_table(comparisons: pd.DataFrame, metrics: list[str], level: float) -> pd.DataFrame:
    rank = {m: i for i, m in enumerate(metrics)}
    frame = comparisons.assign(_rank=comparisons["metric"].map(rank)).sort_values(
        ["_rank", "variant"], kind="mergesort")
    table = pd.DataFrame({
        "comparison": [f"{v} − {b}" for v, b in zip(frame["variant"], frame["baseline"], strict=True)],
        "metric": [metric_label(m) + (" (lower is better)" * (m in LOWER_IS_BETTER)) for m in frame["metric"]],
        "Δ": frame["delta"].map(signed),
        f"{_level(level)} CI (corrected t)": _ci(frame, "ci_low", "ci_high"),
        "t (df)": [_t_text(t, df) for t, df in zip(frame["t"], frame["df"], strict=True)],
        "p (corrected t)": frame["p_value"].map(p_text),
        "p (naive t)": frame["p_naive"].map(p_text),
        "95% CI (student bootstrap, secondary)": _ci(frame, "boot_ci_low", "boot_ci_high"),
    })
    return Table.of(table, ["key", "text", "num", "num", "num", "num", "num", "num"])


def _per_rule_table(per_rule: pd.DataFrame, means: Mapping[str, str]) -> pd.DataFrame:
    table = pd.DataFrame({
        "rule": per_rule["rule"],
        "means": per_rule["rule"].map(lambda r: means.get(r) or ""),
        "Δ when dropped": per_rule["drop_delta"].map(signed),
        "CI (dropped, corrected t)": _ci(per_rule, "drop_ci_low", "drop_ci_high"),
        "Holm p (dropped)": per_rule["drop_p_holm"].map(p_text),
        "Δ when added": per_rule["add_delta"].map(signed),
        "CI (added, corrected t)": _ci(per_rule, "add_ci_low", "add_ci_high"),
        "Holm p (added)": per_rule["add_p_holm"].map(p_text),
    })
    return Table.of(table, ["name", "text"] + ["num"] * 6)


def _transfer_table(transfer: pd.DataFrame, metrics: list[str], m: str) -> pd.DataFrame:
    table = pd.DataFrame({"held-out population": transfer["population"], "variant": transfer["variant"],
                          "units": transfer["n_test"].map(count),
                          "students": transfer["n_test_students"].map(count)})
    for metric in metrics:
        table[metric_label(metric)] = transfer[metric].map(number)
    table[f"Δ {metric_label(m)} vs mined"] = transfer["delta"].map(signed)
    return Table.of(table, ["key", "key"] + ["num"] * (len(table.columns) - 2))


def _curve_table(curve: pd.DataFrame, m: str, level: float) -> pd.DataFrame:
    table = pd.DataFrame({
        "share of training students": curve["fraction"].map(lambda f: NA if is_missing(f) else f"{f:.0%}"),
        f"mined {metric_label(m)}": curve["mined"].map(number),
        f"combined {metric_label(m)}": curve["combined"].map(number),
        "Δ": curve["delta"].map(signed),
        f"{_level(level)} CI (corrected t)": _ci(curve, "ci_low", "ci_high"),
    })
    return Table.of(table, ["num"] * 5)


def _rules_table(rules: list[dict]) -> pd.DataFrame:
    columns = ["rule", "means", "why", "when", "report"]
    rows = [{"rule": r.get("name", ""), "means": r.get("means") or "", "why": r.get("why") or "",
             "when": str(r.get("when", "")), "report": ", ".join(r.get("report") or [])} for r in rules]
    table = pd.DataFrame(rows, columns=columns)
    return Table.of(table, ["name", "text", "text", "code", "text"])


def _populations_table(populations: Mapping[str, Mapping]) -> pd.DataFrame:
    rows = [{"population": name, "units": count(p.get("n_units")), "students": count(p.get("n_students")),
             "positive rate": number(p.get("positive_rate"))} for name, p in sorted(populations.items())]
    table = pd.DataFrame(rows, columns=["population", "units", "students", "positive rate"])
    return Table.of(table, ["key", "num", "num", "num"])


def tables(report) -> dict[str, Table]:
    """The display tables of a report, keyed by section (each built once, for every rendering)."""
    results, m, metrics = report.to_dict(), report.primary_metric, report.metrics
    summary = report.summary()
    means = {r.get("name"): r.get("means") for r in results["rules"]}
    transfer = report.transfer()
    alpha = results["settings"].get("alpha", 0.05)  # the headline interval's level, as the evaluation chose it
    level = 1 - 2 * alpha if results["settings"].get("alternative") == "greater" else 1 - alpha
    return {
        "primary": _primary_table(summary, m, level),
        "metrics": _metrics_table(summary, metrics),
        "comparisons": _comparisons_table(report.comparisons(), metrics, level),
        "per_rule": _per_rule_table(report.per_rule(), means),
        "transfer": _transfer_table(transfer, metrics, m) if len(transfer) else Table((), (), ()),
        "learning_curve": _curve_table(report.learning_curve(), m, level),
        "rules": _rules_table(results["rules"]),
        "populations": _populations_table(results["data"].get("populations") or {}),
    }
