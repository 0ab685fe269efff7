"""The timing family: how long actions take, relative to what is typical, and pauses.

Fit learns, from the training students' events only (contract 2), the median
duration (and median log-duration) of every step and every skill, the overall
medians used for keys never seen in training, and the gap quantiles that define
a pause.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .._aggregate import sort_pairs
from . import _events as ev
from ._events import Settings, TrainingEvents, UnitView

STATS = (("mean", "mean"), ("median", "median"), ("max", "max"), ("sd", "std"))
NORM_KEYS = ("step", "skill")


@dataclass(frozen=True)
class KeyNorm:
    """Typical value per key code; the last entry is the overall value used for unseen keys."""

    table: np.ndarray
    n_events: np.ndarray

    def lookup(self, codes: np.ndarray) -> np.ndarray:
        n_keys = len(self.table) - 1
        idx = np.where((codes >= 0) & (codes < n_keys), codes, n_keys)
        return self.table[idx]


@dataclass(frozen=True)
class TimingState:
    """Fitted norms ``{(base, key): KeyNorm}``, pause thresholds ``{quantile: seconds}`` and the labels
    ``{key: Index}`` the norms' codes stand for (another log's codes are translated by label)."""

    norms: dict
    pause_seconds: dict
    labels: dict = field(default_factory=dict)


def pause_name(q: float) -> str:
    """'pauses_over_q90' for 0.9; dots become underscores ('q99_5')."""
    return "pauses_over_q" + f"{q * 100:g}".replace(".", "_")


def fit(train: TrainingEvents, settings: Settings) -> TimingState:
    return fit_gathered(gather(train, settings), settings)


def gather(train: TrainingEvents, settings: Settings) -> dict:
    """What the norms learn from: known durations with their step/skill codes, and known gaps.

    Every statistic fitted from it is a median or quantile, which does not depend on the order of
    the values, so pieces gathered from logs of disjoint students (codes put on shared labels and
    concatenated) fit the same state as the combined log (:mod:`rulefeat.scale`).
    """
    log = train.log
    durations = train.values("duration")
    known = ~np.isnan(durations)
    gap = train.values("gap")
    return {"duration": durations[known], "gap": gap[~np.isnan(gap)],
            "codes": {key: train.take(ev.codes(log, key))[known] for key in NORM_KEYS},
            "labels": {key: ev.fitted_labels(log, key) for key in NORM_KEYS}}


def fit_gathered(pieces: dict, settings: Settings) -> TimingState:
    """The timing state from :func:`gather`'s pieces (codes of ``pieces["labels"]``)."""
    durations, labels = pieces["duration"], pieces["labels"]
    norms = {}
    for key in NORM_KEYS:
        n_keys = 0 if labels[key] is None else len(labels[key])
        ranked, counts = sort_by_key(pieces["codes"][key], durations, n_keys)
        # log(1 + d) is increasing in d, so one sort by (key, duration) serves both bases.
        for base, scale in (("duration", None), ("log_duration", ev.log_of_duration)):
            values = durations if scale is None else scale(durations)
            medians = key_medians(ranked if scale is None else scale(ranked), counts)
            norms[(base, key)] = _norm(medians, counts, values, settings.min_norm_events)
    gap = pieces["gap"]
    pauses = {float(q): float(np.quantile(gap, q)) if len(gap) else np.nan
              for q in settings.pause_quantiles}
    return TimingState(norms=norms, pause_seconds=pauses, labels=dict(labels))


def _norm(medians, counts, values, min_events: int) -> KeyNorm:
    """Keys with fewer than ``min_events`` values or a median <= 0 use the overall median."""
    overall = float(np.median(values)) if len(values) else np.nan
    usable = (counts >= min_events) & (medians > 0)
    table = np.append(np.where(usable, medians, overall), overall)
    table.flags.writeable = False
    return KeyNorm(table=table, n_events=counts)


def sort_by_key(codes: np.ndarray, values: np.ndarray, n_codes: int) -> tuple[np.ndarray, np.ndarray]:
    """Values of codes in ``[0, n_codes)`` sorted by (code, value), and the count of each code."""
    keep = codes >= 0
    codes, values = codes[keep], values[keep]
    counts = np.bincount(codes, minlength=n_codes)[:n_codes] if len(codes) else np.zeros(n_codes, np.int64)
    return sort_pairs(codes, values), counts


def key_medians(ranked: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Median of each code's block of ``ranked`` (as laid out by :func:`sort_by_key`); NaN when empty."""
    lo = np.cumsum(counts) - counts
    has = counts > 0
    medians = np.full(len(counts), np.nan)
    medians[has] = (ranked[lo[has] + (counts[has] - 1) // 2] + ranked[lo[has] + counts[has] // 2]) / 2.0
    return medians


def compute(view: UnitView, state: TimingState) -> dict[str, np.ndarray]:
    log, agg = view.log, view.agg
    out = {}
    raw = {"duration": log.values("duration"), "log_duration": ev.log_duration(log)}
    for base, values in raw.items():
        variants = {"": values}
        for key in NORM_KEYS:
            typical = state.norms[(base, key)].lookup(ev.codes_as_fitted(log, key, state.labels.get(key)))
            variants[f"_norm_{key}"] = _normalise(base, values, typical)
        for suffix, per_event in variants.items():
            stats = agg.describe(per_event, [how for _, how in STATS])
            out.update({f"{base}_{name}{suffix}": stats[how] for name, how in STATS})
    gap = log.values("gap")
    for q, seconds in state.pause_seconds.items():
        with np.errstate(invalid="ignore"):
            out[pause_name(q)] = agg.count(gap > seconds)
    elapsed = ev.session_elapsed(log)
    out["session_elapsed_at_start"] = agg.first_value(elapsed)
    out["session_elapsed_at_end"] = agg.last_value(elapsed)
    return out


def _normalise(base: str, values: np.ndarray, typical: np.ndarray) -> np.ndarray:
    """Durations as a ratio to the typical one; log-durations as a difference (the log of that ratio)."""
    if base == "log_duration":
        return values - typical
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(typical > 0, values / np.where(typical > 0, typical, 1.0), np.nan)
