"""Vectorized per-unit aggregations over a :class:`~rulefeat.units.UnitIndex`.

Shared by the rule features and the mined log features, so both aggregate to
units in exactly one way.  Every function takes per-event arrays in log order
and returns one value per unit.  Empty units give 0 for counts and NaN for
everything else.
"""

from __future__ import annotations

import numpy as np

from .units import UnitIndex


class Aggregator:
    """Aggregations over one unit index; per-unit bookkeeping is computed once."""

    def __init__(self, index: UnitIndex, time: np.ndarray):
        self.index = index
        self.sizes = index.sizes
        self.nonempty = self.sizes > 0
        self.starts = index.indptr[:-1][self.nonempty]
        self.unit_of = index.unit_of_event()
        self.position = np.arange(len(index.events)) - np.repeat(index.indptr[:-1], self.sizes)
        self.time = time[index.events]

    def take(self, values: np.ndarray) -> np.ndarray:
        """Per-event values laid out unit by unit."""
        return values[self.index.events]

    def _reduce(self, ufunc, laid: np.ndarray, fill: float) -> np.ndarray:
        out = np.full(self.index.n_units, fill, dtype=np.float64)
        if len(self.starts):
            out[self.nonempty] = ufunc.reduceat(laid, self.starts)
        return out

    # -- counts -------------------------------------------------------------
    def count(self, mask: np.ndarray) -> np.ndarray:
        laid = self.take(mask).astype(np.float64)
        return self._reduce(np.add, laid, 0.0)

    def size(self) -> np.ndarray:
        return self.sizes.astype(np.float64)

    def rate(self, mask: np.ndarray, of: np.ndarray | None = None) -> np.ndarray:
        """Share of the unit's events (or of those in ``of``) where ``mask`` holds; NaN when none."""
        num = self.count(mask if of is None else mask & of)
        den = self.size() if of is None else self.count(of)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(den > 0, num / np.where(den > 0, den, 1), np.nan)

    def any(self, mask: np.ndarray) -> np.ndarray:
        return (self.count(mask) > 0).astype(np.float64)

    def nunique(self, codes: np.ndarray, mask: np.ndarray | None = None) -> np.ndarray:
        """Distinct non-missing codes per unit (among the events where ``mask`` holds, if given)."""
        units, _ = self.distinct(codes, mask)
        return np.bincount(units, minlength=self.index.n_units).astype(np.float64)

    def distinct(self, codes: np.ndarray, mask: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """``(unit, code)`` of every distinct non-missing code of each unit, sorted by unit then code."""
        units, codes, _, _ = self.code_spans(codes, mask)
        return units, codes

    def code_spans(self, codes: np.ndarray, mask: np.ndarray | None = None):
        """For every distinct ``(unit, code)``: unit, code, and laid positions of its first and last event.

        Codes below 0 count as missing and are skipped.  Laid positions index
        arrays returned by :meth:`take`, so callers can read per-pair values.
        """
        laid = self.take(codes).astype(np.int64)
        ok = laid >= 0
        if mask is not None:
            ok &= self.take(mask).astype(bool)
        sel = np.flatnonzero(ok)
        width = int(laid.max(initial=0)) + 1
        key = self.unit_of[sel] * width + laid[sel]
        # Units are laid in order, so a stable sort keeps each pair's events in unit order.
        order = np.argsort(key, kind="stable")
        key = key[order]
        change = key[1:] != key[:-1]
        first = np.concatenate([[True], change]) if len(key) else np.zeros(0, dtype=bool)
        last = np.concatenate([change, [True]]) if len(key) else np.zeros(0, dtype=bool)
        return key[first] // width, key[first] % width, sel[order[first]], sel[order[last]]

    def unit_mean(self, units: np.ndarray, values: np.ndarray) -> np.ndarray:
        """NaN-skipping mean per unit of values given for (unit, ...) pairs; NaN when a unit has none."""
        ok = ~np.isnan(values)
        n = np.bincount(units[ok], minlength=self.index.n_units)
        total = np.bincount(units[ok], weights=values[ok], minlength=self.index.n_units)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(n > 0, total / np.where(n > 0, n, 1), np.nan)

    def pair_counts(self, tokens: np.ndarray, n_tokens: int) -> np.ndarray:
        """Counts of consecutive event pairs per unit, shape ``(n_units, n_tokens ** 2)``.

        A pair is two events of the unit that follow each other directly in the
        student's stream (adjacent in log order); column ``a * n_tokens + b``
        counts pairs whose first event has token ``a`` and second token ``b``.
        ``tokens`` holds integers in ``[0, n_tokens)`` per event.
        """
        ev = self.index.events
        j = np.flatnonzero(self.position > 0)
        j = j[ev[j] == ev[j - 1] + 1]
        laid = self.take(tokens).astype(np.int64)
        width = n_tokens * n_tokens
        flat = np.bincount(self.unit_of[j] * width + laid[j - 1] * n_tokens + laid[j],
                           minlength=self.index.n_units * width)
        return flat.reshape(self.index.n_units, width).astype(np.float64)

    # -- values ---------------------------------------------------------------
    def stat(self, values: np.ndarray, how: str, mask: np.ndarray | None = None) -> np.ndarray:
        """NaN-skipping ``sum, mean, min, max, std, median`` of a number field (optionally masked)."""
        return self.describe(values, (how,), mask)[how]

    def describe(self, values: np.ndarray, hows, mask: np.ndarray | None = None) -> dict:
        """Several :meth:`stat` statistics of one field at once, laying it out only once."""
        laid = self.take(values).astype(np.float64)
        if mask is not None:
            laid = np.where(self.take(mask), laid, np.nan)
        ok = ~np.isnan(laid)
        n = self._reduce(np.add, ok.astype(np.float64), 0.0)
        moments = {}
        return {how: self._one_stat(how, laid, ok, n, moments) for how in hows}

    def _one_stat(self, how, laid, ok, n, moments) -> np.ndarray:
        if how == "median":
            return self._median(laid, ok, n)
        if how in ("min", "max"):
            fill = -np.inf if how == "max" else np.inf
            ufunc = np.maximum if how == "max" else np.minimum
            out = self._reduce(ufunc, np.where(ok, laid, fill), np.nan)
            return np.where(n > 0, out, np.nan)
        if "total" not in moments:
            moments["total"] = self._reduce(np.add, np.where(ok, laid, 0.0), np.nan)
        total = moments["total"]
        with np.errstate(invalid="ignore", divide="ignore"):
            if how == "sum":
                return np.where(self.nonempty, total, 0.0)
            mean = np.where(n > 0, total / np.where(n > 0, n, 1), np.nan)
            if how == "mean":
                return mean
            if how == "std":
                dev = np.where(ok, laid - np.repeat(mean, self.sizes), 0.0)
                ss = self._reduce(np.add, dev * dev, np.nan)
                return np.where(n > 1, np.sqrt(ss / np.where(n > 1, n - 1, 1)), np.nan)
        raise ValueError(f"Aggregator.stat: unknown statistic {how!r}; use one of "
                         "['sum', 'mean', 'min', 'max', 'std', 'median'].")

    def _median(self, laid, ok, n) -> np.ndarray:
        ranked = sort_pairs(self.unit_of, np.where(ok, laid, np.inf))
        first = self.index.indptr[:-1]
        lo = first + np.maximum((n.astype(np.int64) - 1) // 2, 0)
        hi = first + np.maximum(n.astype(np.int64) // 2, 0)
        out = np.full(self.index.n_units, np.nan)
        has = n > 0
        out[has] = (ranked[lo[has]] + ranked[hi[has]]) / 2.0
        return out

    # -- sequence -----------------------------------------------------------------
    def longest_run(self, mask: np.ndarray, among: np.ndarray | None = None) -> np.ndarray:
        """Longest run of consecutive unit events where ``mask`` holds (0 when none).

        With ``among``, only events where ``among`` holds take part: the others
        neither extend nor break a run (e.g. errors in a row, hints skipped).
        """
        laid = self.take(mask).astype(bool)
        if among is None:
            run = run_lengths(laid, self.position == 0)
            return self._reduce(np.maximum, run.astype(np.float64), 0.0)
        keep = np.flatnonzero(self.take(among))
        units = self.unit_of[keep]
        resets = np.ones(len(keep), dtype=bool)
        resets[1:] = units[1:] != units[:-1]
        run = run_lengths(laid[keep], resets).astype(np.float64)
        out = np.zeros(self.index.n_units)
        starts = np.flatnonzero(resets)
        if len(starts):
            out[units[starts]] = np.maximum.reduceat(run, starts)
        return out

    def first_position(self, mask: np.ndarray) -> np.ndarray:
        """1-based position in the unit of the first event where ``mask`` holds; NaN when none."""
        laid = self.take(mask).astype(bool)
        big = np.iinfo(np.int64).max
        pos = np.where(laid, self.position, big)
        out = self._reduce(np.minimum, pos.astype(np.float64), np.nan)
        return np.where(out < big, out + 1, np.nan)

    def first_seconds(self, mask: np.ndarray) -> np.ndarray:
        """Seconds from the unit's start to the first event where ``mask`` holds; NaN when none."""
        laid = self.take(mask).astype(bool)
        t = np.where(laid, self.time, np.inf)
        first = self._reduce(np.minimum, t, np.nan)
        return np.where(np.isfinite(first), first - self.index.start_time, np.nan)

    def first_value(self, values: np.ndarray) -> np.ndarray:
        laid = self.take(values).astype(np.float64)
        out = np.full(self.index.n_units, np.nan)
        out[self.nonempty] = laid[self.starts]
        return out

    def last_value(self, values: np.ndarray) -> np.ndarray:
        laid = self.take(values).astype(np.float64)
        out = np.full(self.index.n_units, np.nan)
        out[self.nonempty] = laid[self.index.indptr[1:][self.nonempty] - 1]
        return out


def run_lengths(flags: np.ndarray, resets: np.ndarray) -> np.ndarray:
    """Length of the run of True ending at each position; runs restart where ``resets`` is True."""
    idx = np.arange(len(flags))
    marker = np.where(~flags, idx, np.where(resets, idx - 1, -1))
    last_break = np.maximum.accumulate(marker) if len(flags) else marker
    return np.where(flags, idx - last_break, 0)


def sort_pairs(keys: np.ndarray, values: np.ndarray) -> np.ndarray:
    """``values`` sorted by (key, value), returned as values only.

    The pairs are packed into complex numbers, which numpy sorts by real then
    imaginary part: one in-place sort, several times faster than ``lexsort``
    on two keys.  Keys must be exact as float64 (integers below 2**53).
    """
    packed = np.empty(len(values), dtype=np.complex128)
    packed.real = keys
    packed.imag = values
    packed.sort()
    return packed.imag.copy()
