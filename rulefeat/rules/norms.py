"""Fitted norms: per-key quantiles and z-score moments learned from training events only.

State is stored per category code of the ``per`` field.  Sub-logs share their
parent's categories, so a code means the same key in the training log and in
any log evaluated later.  Keys with fewer than ``min_count`` training values,
keys never seen in training and events whose key is missing use the overall
training statistic (only the training students' events are learned from; "Contracts" in DEVELOPERS.md).
"""

from __future__ import annotations

import numpy as np

from . import scan

__all__ = ["grouped_quantile", "fit_typical", "fit_zscore", "apply_typical", "apply_zscore"]


def _lerp(a: np.ndarray, b: np.ndarray, t: np.ndarray) -> np.ndarray:
    # numpy's own linear interpolation (numpy.quantile, method='linear'), so results agree to the bit.
    diff = b - a
    out = a + diff * t
    return np.where(t >= 0.5, b - diff * (1 - t), out)


def grouped_quantile(values: np.ndarray, keys: np.ndarray, n_keys: int, q: float,
                     among: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(count, q-quantile) of the non-NaN ``values`` for every key ``0..n_keys-1`` and, last, overall.

    Same definition as ``numpy.quantile(..., method='linear')`` (Hyndman & Fan type 7), with
    numpy's own interpolation so results agree to the bit.  Keys < 0 count only overall;
    ``among`` (bool) keeps only those events.  The two order statistics each key needs are
    found by selection inside the key's bucket (:func:`rulefeat.rules.scan.quantile_order_statistics`),
    not by sorting the field.  NaN where a key has no values.
    """
    use = among is not None
    values = np.ascontiguousarray(values, dtype=np.float64)
    count, low, high = scan.quantile_order_statistics(
        values, np.ascontiguousarray(keys), np.ascontiguousarray(among) if use else np.zeros(1, dtype=bool),
        use, n_keys, float(q), np.empty(len(values), dtype=np.float64))
    virtual = np.maximum(count - 1, 0) * q
    top = np.maximum(count - 1, 0)
    with np.errstate(invalid="ignore"):  # infinite values: inf - inf, as in numpy's own interpolation
        lerp = _lerp(low, high, virtual - np.floor(virtual))
    # A key at its top rank takes its largest value; the overall value is numpy.quantile's own
    # arithmetic throughout (which differs only for infinite values).
    out = np.where(virtual >= top, low, lerp)
    out[n_keys] = lerp[n_keys]
    return count, np.where(count > 0, out, np.nan)


def _grouped_moments(values: np.ndarray, keys: np.ndarray, n_keys: int):
    # bincount adds in input order, a plain sequential sum (documented so references can match it).
    count = np.bincount(keys, minlength=n_keys)[:n_keys].astype(np.int64)
    total = np.bincount(keys, weights=values, minlength=n_keys)[:n_keys]
    with np.errstate(all="ignore"):
        mean = total / count
        dev = values - mean[keys]
        sq = np.bincount(keys, weights=dev * dev, minlength=n_keys)[:n_keys]
        sd = np.sqrt(sq / (count - 1))
    sd = np.where(count > 1, sd, np.nan)
    return count, np.where(count > 0, mean, np.nan), sd


def _training(values: np.ndarray, keys: np.ndarray, among: np.ndarray | None):
    use = ~np.isnan(values)
    if among is not None:
        use &= among
    keyed = use & (keys >= 0)
    return values[use], values[keyed], keys[keyed].astype(np.int64)


def fit_typical(values: np.ndarray, keys: np.ndarray, n_keys: int, *, q: float, min_count: int,
                among: np.ndarray | None = None) -> dict:
    """The q-quantile of ``values`` per key, with the overall quantile where a key has < ``min_count`` values."""
    count, quantile = grouped_quantile(values, keys, n_keys, q, among)
    overall = float(quantile[n_keys])
    value = np.where(count[:n_keys] >= min_count, quantile[:n_keys], overall)
    return {"count": count[:n_keys], "value": value, "overall": overall}


def fit_zscore(values: np.ndarray, keys: np.ndarray, n_keys: int, *, min_count: int,
               among: np.ndarray | None = None) -> dict:
    """Mean and sample sd (ddof=1) per key; overall moments for rare keys, overall sd where a key's sd is 0."""
    every, v, k = _training(values, keys, among)
    _, (overall_mean,), (overall_sd,) = _grouped_moments(every, np.zeros(len(every), dtype=np.int64), 1)
    count, mean, sd = _grouped_moments(v, k, n_keys)
    enough = count >= min_count
    mean = np.where(enough, mean, overall_mean)
    sd = np.where(enough & (sd > 0), sd, overall_sd)
    return {"count": count, "mean": mean, "sd": sd,
            "overall_mean": float(overall_mean), "overall_sd": float(overall_sd)}


def _by_key(per_key: np.ndarray, overall: float, keys: np.ndarray) -> np.ndarray:
    keys = np.ascontiguousarray(keys)
    if not len(per_key):
        return np.full(len(keys), overall, dtype=np.float64)
    if len(keys) and keys.max() >= len(per_key):  # the compiled lookup does not check bounds itself
        raise IndexError(f"norm key {int(keys.max())} out of range for {len(per_key)} fitted keys")
    return scan.by_key(np.ascontiguousarray(per_key, dtype=np.float64), keys, float(overall),
                       np.empty(len(keys), dtype=np.float64))


def apply_typical(state: dict, keys: np.ndarray) -> np.ndarray:
    return _by_key(state["value"], state["overall"], keys)


def apply_zscore(state: dict, values: np.ndarray, keys: np.ndarray) -> np.ndarray:
    mean = _by_key(state["mean"], state["overall_mean"], keys)
    sd = _by_key(state["sd"], state["overall_sd"], keys)
    with np.errstate(all="ignore"):
        z = (values - mean) / sd
    # A zero or undefined overall sd leaves nothing to scale by: the z-score is missing.
    return np.where(np.isfinite(z), z, np.nan)
