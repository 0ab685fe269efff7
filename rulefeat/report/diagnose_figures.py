"""Figures of the rule diagnostics, drawn from the results dict on an Agg canvas (no pyplot, no window)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from .. import _frame
from ..evaluate.diagnose.attribution import dependence_data
from .safe import plot_text

__all__ = ["plot_shap_share", "plot_shap_per_rule", "plot_dependence", "plot_dependence_of"]

_RULES, _MINED = "#dd8452", "#4c72b0"  # the rule and mined colours of the evaluation's figures


def _figure(width: float, height: float):
    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig, fig.subplots()


def plot_shap_share(shap: dict) -> Figure:
    """One bar: the share of total |SHAP| carried by rule features and by mined features."""
    fig, ax = _figure(6.0, 1.9)
    rules, mined = float(shap["rule_share"]), float(shap["mined_share"])
    ax.barh([0], [rules], color=_RULES)
    ax.barh([0], [mined], left=[rules], color=_MINED)
    ax.set_xlim(0, 1)
    ax.set_yticks([])
    ax.set_xlabel("share of total |SHAP| (held-out units, pooled over folds)")
    ax.set_title(f"rule features {rules:.1%}  |  mined features {mined:.1%}", fontsize=10)
    for left, width, text in ((0.0, rules, "rules"), (rules, mined, "mined")):
        if width > 0.08:  # a label only where it fits
            ax.text(left + width / 2, 0, text, ha="center", va="center", color="white", fontsize=10)
    return fig


def plot_shap_per_rule(shap: dict) -> Figure:
    """Mean |SHAP| per held-out unit of each rule (all its summaries together), largest on top."""
    rows = sorted(shap["per_rule"], key=lambda r: (r["mean_abs"], r["rule"]))
    fig, ax = _figure(6.0, 1.2 + 0.35 * max(len(rows), 1))
    positions = np.arange(len(rows))
    ax.barh(positions, [r["mean_abs"] for r in rows], color=_RULES)
    ax.set_yticks(positions, [plot_text(r["rule"]) for r in rows])
    if shap.get("mined"):
        ax.axvline(shap["mined"]["mean_abs"], color=_MINED, linestyle="--",
                   label=f"all mined features: {shap['mined']['mean_abs']:.3f}")
        ax.legend(loc="lower right", frameon=False)
    ax.set_xlabel("mean |SHAP| per unit (log-odds)")
    return fig


def plot_dependence_of(values: pd.DataFrame, features: pd.DataFrame, column: str, rule: str) -> Figure:
    """SHAP value of a rule's unit value against the value itself."""
    fig = plot_dependence(values, features, column)
    fig.axes[0].set_title(plot_text(f"{rule}: SHAP of {column} by its value"))
    return fig


def plot_dependence(values: pd.DataFrame, X: pd.DataFrame, feature: str, *, jitter: float = 0.25,
                    random_state: int | None = 0) -> Figure:
    """Scatter of a feature's SHAP value against its value (categories on a jittered axis).

    Returns a :class:`matplotlib.figure.Figure` on an Agg canvas (no pyplot, no window).  Categorical,
    boolean and text features are placed at one position per category, spread by a seeded horizontal
    ``jitter`` so overlapping points stay visible; missing values are left out and counted in the title.
    """
    data = dependence_data(values, X, feature)
    fig = Figure(figsize=(5.5, 3.8), layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.subplots()
    known = data["value"].notna().to_numpy()
    shown = data[known]
    numeric = _frame.is_number_dtype(shown["value"].dtype) and not _frame.is_bool_dtype(shown["value"].dtype)
    if numeric:
        ax.scatter(shown["value"].astype(float), shown["shap"], s=10, alpha=0.6, color="#4c72b0")
    else:
        codes, labels = _frame.factorize_values(shown["value"], sort=True)
        spread = np.random.default_rng(random_state).uniform(-jitter, jitter, len(codes))
        ax.scatter(codes + spread, shown["shap"], s=10, alpha=0.6, color="#4c72b0")
        ax.set_xticks(range(len(labels)), [plot_text(v) for v in labels])
    ax.axhline(0.0, color="grey", linewidth=0.8)
    ax.set_xlabel(plot_text(feature))
    ax.set_ylabel("SHAP value")
    note = f" ({int((~known).sum())} missing not shown)" if (~known).any() else ""
    ax.set_title(plot_text(f"Dependence of the model on {feature}{note}"))
    return fig
