"""Figures of an incremental-value evaluation, drawn on plain tables.

Each ``plot_*`` function takes the plain data an :class:`~rulefeat.report.value.IncrementalValueReport`
computes (a DataFrame or a dict of curves) and returns a :class:`matplotlib.figure.Figure` attached to an
Agg canvas.  Nothing here goes through :mod:`matplotlib.pyplot`, so drawing a report never opens a window,
never changes pyplot's list of open figures and works on machines without a display.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from .._text import did_you_mean
from ..errors import EvaluationError
from .safe import plot_text

__all__ = [
    "roc_points",
    "roc_curves",
    "plot_roc",
    "plot_rule_effects",
    "plot_learning_curve",
    "plot_transfer",
    "VARIANT_COLORS",
]

# One colour per variant, the same in every figure, so a reader matches them at a glance.
VARIANT_COLORS = {"mined": "#4c72b0", "rules": "#dd8452", "combined": "#55a868"}

_LABELS = {"auc": "AUC", "kappa": "Cohen's kappa", "average_precision": "average precision",
           "log_loss": "log loss", "brier": "Brier score", "r2": "R²", "rmse": "RMSE"}


def _label(metric: str) -> str:
    return plot_text(_LABELS.get(metric, metric))


def _new_figure(width: float, height: float, ncols: int = 1) -> tuple[Figure, list]:
    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)  # explicit Agg canvas: savefig never consults pyplot's backend
    axes = fig.subplots(1, ncols, squeeze=False)[0]
    return fig, list(axes)


def _empty(message: str, title: str) -> Figure:
    """A small figure that says why there is nothing to draw (instead of an error)."""
    fig, (ax,) = _new_figure(5.0, 2.0)
    ax.set_axis_off()
    ax.set_title(plot_text(title))
    ax.text(0.5, 0.5, plot_text(message), ha="center", va="center", wrap=True, transform=ax.transAxes)
    return fig


# -- ROC ---------------------------------------------------------------------------------------
def roc_points(y_true, score) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """False- and true-positive rates at every distinct score threshold.

    The greater of the two labels is positive (as in scikit-learn).  The first point is
    (0, 0) at threshold ``+inf``; every distinct score adds one point, so the trapezoid
    area under the curve equals the Mann-Whitney AUC with ties counted as one half.

    Parameters
    ----------
    y_true : array-like of shape (n,)
        Two distinct labels.
    score : array-like of shape (n,)
        Higher means more likely positive; no missing values.

    Returns
    -------
    fpr, tpr, thresholds : ndarray
        ``thresholds`` decrease; row ``i`` counts scores ``>= thresholds[i]`` as positive.

    Examples
    --------
    >>> fpr, tpr, _ = roc_points([0, 0, 1, 1], [0.1, 0.4, 0.35, 0.8])
    >>> fpr.tolist(), tpr.tolist()
    ([0.0, 0.0, 0.5, 0.5, 1.0], [0.0, 0.5, 0.5, 1.0, 1.0])
    """
    y = np.asarray(y_true).ravel()
    s = np.asarray(score, dtype=np.float64).ravel()
    if y.shape != s.shape or not len(y):
        raise EvaluationError(f"roc_points: y_true and score must be non-empty and of the same length; "
                              f"got {y.shape[0]} and {s.shape[0]}.")
    if np.isnan(s).any():
        raise EvaluationError(f"roc_points: score has {int(np.isnan(s).sum())} missing values; "
                              "drop those rows.")
    classes = pd.unique(y)
    if len(classes) != 2:
        raise EvaluationError(f"roc_points: a ROC curve needs exactly two classes in y_true; got "
                              f"{len(classes)} ({sorted(classes.tolist())[:5]!r}).")
    positive = y == np.max(classes)
    order = np.argsort(-s, kind="mergesort")
    s, positive = s[order], positive[order]
    last_of_tie = np.r_[np.flatnonzero(np.diff(s)), len(s) - 1]
    tps = np.cumsum(positive)[last_of_tie]
    fps = last_of_tie + 1 - tps
    fpr = np.r_[0.0, fps / fps[-1]]
    tpr = np.r_[0.0, tps / tps[-1]]
    return fpr, tpr, np.r_[np.inf, s[last_of_tie]]


def _trapezoid(x: np.ndarray, y: np.ndarray) -> float:
    return float(np.sum(np.diff(x) * (y[1:] + y[:-1]) / 2.0))


def roc_curves(oof: pd.DataFrame, variants: Sequence[str] = ("mined", "rules", "combined"),
               repeat: int = 0) -> dict[str, dict]:
    """Pooled out-of-fold ROC curve of each variant in one repeat.

    Parameters
    ----------
    oof : DataFrame
        Out-of-fold predictions with columns ``repeat``, ``y`` and one column per variant.
    variants : sequence of str
        Prediction columns to draw, e.g. ``("mined", "combined", "without:skimmed_hint")``.
    repeat : int
        Which cross-validation repeat to pool (every unit is predicted once per repeat).

    Returns
    -------
    dict
        ``{variant: {"fpr": ndarray, "tpr": ndarray, "thresholds": ndarray, "auc": float}}``.
    """
    where = "roc_curves"
    if isinstance(variants, str):
        variants = (variants,)
    if not len(oof):
        raise EvaluationError(f"{where}: there are no out-of-fold predictions (a report read back from JSON "
                              "keeps none); draw the ROC from the report returned by incremental_value.")
    for name in [*variants, "repeat", "y"]:
        if name not in oof.columns:
            raise EvaluationError(f"{where}: the out-of-fold table has no column {name!r}."
                                  f"{did_you_mean(name, oof.columns)} Columns: {list(oof.columns)}.")
    rows = oof["repeat"].to_numpy() == repeat
    if not rows.any():
        raise EvaluationError(f"{where}: no out-of-fold rows for repeat {repeat!r}; repeats present: "
                              f"{sorted(pd.unique(oof['repeat']).tolist())}.")
    y = oof["y"].to_numpy()[rows]
    curves = {}
    for name in variants:
        fpr, tpr, thresholds = roc_points(y, oof[name].to_numpy(dtype=np.float64)[rows])
        curves[name] = {"fpr": fpr, "tpr": tpr, "thresholds": thresholds, "auc": _trapezoid(fpr, tpr)}
    return curves


def plot_roc(curves: Mapping[str, Mapping], title: str = "Pooled out-of-fold ROC (repeat 0)") -> Figure:
    """ROC curves with each variant's AUC in the legend; ``curves`` as returned by :func:`roc_curves`."""
    fig, (ax,) = _new_figure(5.2, 4.8)
    ax.plot([0, 1], [0, 1], color="0.6", linestyle=":", linewidth=1, label="chance (AUC 0.500)")
    for name, curve in curves.items():
        ax.plot(curve["fpr"], curve["tpr"], drawstyle="default", linewidth=1.8,
                color=VARIANT_COLORS.get(name), label=f"{plot_text(name)} (AUC {curve['auc']:.3f})")
    ax.set(xlim=(0, 1), ylim=(0, 1.01), xlabel="false-positive rate", ylabel="true-positive rate",
           title=title)
    ax.set_aspect("equal")
    ax.legend(loc="lower right", fontsize="small")
    return fig


# -- per-rule forest plot ------------------------------------------------------------------------
def _error_bars(frame: pd.DataFrame, prefix: str) -> np.ndarray:
    """Non-negative [below, above] error lengths; missing bounds draw no bar."""
    delta = frame[f"{prefix}_delta"].to_numpy(dtype=np.float64)
    low = delta - frame[f"{prefix}_ci_low"].to_numpy(dtype=np.float64)
    high = frame[f"{prefix}_ci_high"].to_numpy(dtype=np.float64) - delta
    return np.clip(np.nan_to_num(np.vstack([low, high])), 0.0, None)


def plot_rule_effects(per_rule: pd.DataFrame, metric: str = "auc") -> Figure:
    """Forest plot of each rule's Δ with its CI: dropped from combined, and added to mined.

    ``per_rule`` is :meth:`IncrementalValueReport.per_rule`; rules are drawn top to bottom in
    its row order.  An empty table gives a figure saying that no ablation was run.
    """
    title = f"Per-rule change in {_label(metric)}"
    if per_rule is None or not len(per_rule):
        return _empty("No per-rule results: the ablation was not run.", title)
    n = len(per_rule)
    fig, (ax,) = _new_figure(6.4, max(2.8, 0.55 * n + 1.8))
    position = np.arange(n)[::-1].astype(float)
    looks = (("drop", "dropped from combined", "o", VARIANT_COLORS["combined"], 0.14),
             ("add", "added to mined", "s", VARIANT_COLORS["mined"], -0.14))
    for prefix, text, marker, color, shift in looks:
        ax.errorbar(per_rule[f"{prefix}_delta"].to_numpy(dtype=np.float64), position + shift,
                    xerr=_error_bars(per_rule, prefix), fmt=marker, color=color, capsize=3,
                    label=f"Δ when {text}")
    ax.axvline(0.0, color="0.3", linewidth=1)
    ax.set_yticks(position, [plot_text(r) for r in per_rule["rule"]])
    ax.set(xlabel=f"Δ {_label(metric)} (corrected-t interval of the headline test)", title=title, ylim=(-0.7, n - 0.3))
    fig.legend(loc="outside lower center", ncols=2, fontsize="small")
    return fig


# -- learning curve ------------------------------------------------------------------------------
def plot_learning_curve(curve: pd.DataFrame, metric: str = "auc") -> Figure:
    """Mined and combined scores (left) and their Δ with CI (right) by share of training students."""
    title = f"Learning curve ({_label(metric)})"
    if curve is None or not len(curve):
        return _empty("No learning curve: it was not computed.", title)
    fig, (left, right) = _new_figure(9.0, 3.6, ncols=2)

    def col(name: str) -> np.ndarray:
        return curve[name].to_numpy(dtype=np.float64)

    x = col("fraction")
    for name in ("mined", "combined"):
        left.plot(x, col(name), marker="o", color=VARIANT_COLORS[name], label=name)
    left.set(xlabel="share of training students", ylabel=_label(metric), title=title)
    left.legend(fontsize="small")
    right.fill_between(x, col("ci_low"), col("ci_high"), color=VARIANT_COLORS["combined"], alpha=0.25,
                       label="corrected-t interval")
    right.plot(x, col("delta"), marker="o", color=VARIANT_COLORS["combined"], label="combined − mined")
    right.axhline(0.0, color="0.3", linewidth=1)
    right.set(xlabel="share of training students", ylabel=f"Δ {_label(metric)}",
              title="Added value of the rules")
    right.legend(fontsize="small")
    return fig


# -- transfer ------------------------------------------------------------------------------------
def _annotate_deltas(ax, transfer: pd.DataFrame, populations, base: np.ndarray, metric: str) -> None:
    """Write combined − mined above each population's bars (the number a reader looks for)."""
    if "delta" not in transfer.columns:
        return
    combined = transfer[transfer["variant"] == "combined"].set_index("population")
    top = transfer.groupby("population")[metric].max()
    for x, population in zip(base, populations, strict=True):
        delta = combined["delta"].get(population, np.nan)
        if np.isfinite(delta) and np.isfinite(top[population]):
            ax.annotate(f"Δ {delta:+.3f}", (x, top[population]), xytext=(0, 4), textcoords="offset points",
                        ha="center", fontsize="small")


def plot_transfer(transfer: pd.DataFrame, metric: str = "auc") -> Figure:
    """Grouped bars: each held-out population's score, one bar per variant.

    ``transfer`` is :meth:`IncrementalValueReport.transfer`; when it is empty the figure shows
    ``transfer.attrs["reason"]``.
    """
    title = f"Held-out population {_label(metric)} by variant"
    if transfer is None or not len(transfer):
        reason = (transfer.attrs.get("reason") if transfer is not None else None) or "no transfer results."
        return _empty(f"Transfer not available: {reason}", title)
    if metric not in transfer.columns:
        raise EvaluationError(f"plot_transfer: the transfer table has no {metric!r} column."
                              f"{did_you_mean(metric, transfer.columns)} Columns: {list(transfer.columns)}.")
    table = transfer.pivot(index="population", columns="variant", values=metric)
    table = table.loc[pd.unique(transfer["population"])]  # populations in the engine's order
    names = [v for v in VARIANT_COLORS if v in table.columns]
    names += [v for v in table.columns if v not in VARIANT_COLORS]
    fig, (ax,) = _new_figure(max(4.5, 1.2 * len(table) + 2.0), 4.2)
    width = 0.8 / len(names)
    base = np.arange(len(table), dtype=float)
    for i, name in enumerate(names):
        ax.bar(base + (i - (len(names) - 1) / 2) * width, table[name].to_numpy(dtype=np.float64), width,
               color=VARIANT_COLORS.get(name), label=plot_text(name))
    if metric == "auc":
        ax.axhline(0.5, color="0.6", linestyle=":", linewidth=1, label="chance")
    _annotate_deltas(ax, transfer, table.index, base, metric)
    ax.set_xticks(base, [plot_text(p, limit=40) for p in table.index])
    ax.set(xlabel="held-out population", ylabel=_label(metric), title=title)
    ax.margins(y=0.12)
    fig.legend(loc="outside lower center", ncols=len(names) + 1, fontsize="small")
    return fig
