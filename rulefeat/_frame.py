"""The one layer that touches pandas internals.

Everything else in rulefeat works on plain numpy arrays produced here, which
keeps pandas-version differences (2.x vs 3.x, Copy-on-Write, the string
dtype, nullable dtypes) in a single module.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from pandas.api import types as ptypes

NS_PER_SECOND = 1_000_000_000

TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9, "min": 60.0, "h": 3600.0}


def is_datetime(series: pd.Series) -> bool:
    return ptypes.is_datetime64_any_dtype(series.dtype)


def is_numeric(series: pd.Series) -> bool:
    return ptypes.is_numeric_dtype(series.dtype) and not ptypes.is_bool_dtype(series.dtype)


def is_boolean(series: pd.Series) -> bool:
    return ptypes.is_bool_dtype(series.dtype)


def is_number_dtype(dtype) -> bool:
    """True for numeric dtypes, booleans included (pandas' own test)."""
    return ptypes.is_numeric_dtype(dtype)


def is_bool_dtype(dtype) -> bool:
    return ptypes.is_bool_dtype(dtype)


def is_float_dtype(dtype) -> bool:
    return ptypes.is_float_dtype(dtype)


def factorize_values(values, sort: bool) -> tuple[np.ndarray, pd.Index]:
    """pandas' factorize as is: codes (-1 for missing) and the distinct values, sorted or in order of appearance."""
    return pd.factorize(values, sort=sort)


def bool_codes(series: pd.Series) -> np.ndarray:
    """int8 1/0 with -1 for missing, from a numpy or nullable boolean column."""
    if isinstance(series.dtype, pd.BooleanDtype):
        return series.to_numpy(dtype=np.int8, na_value=-1)
    return series.to_numpy().astype(np.int8)


def category_parts(series: pd.Series) -> tuple[np.ndarray, pd.Index] | None:
    """(codes, categories) of a categorical column without copying (code -1: missing); None for other dtypes.

    Slices of one table share their categories object, so a caller can key a label lookup on it.
    """
    if not isinstance(series.dtype, pd.CategoricalDtype):
        return None
    values = series.array
    return np.asarray(values.codes), values.categories


def missing_mask(series: pd.Series) -> np.ndarray:
    return np.asarray(series.isna().to_numpy(), dtype=bool)


_NS = np.dtype("datetime64[ns]")

# an offset after a time of day ("T09:15:00+02:00", "09:15Z"), not the day of a date ("2026-03-02")
_OFFSET = r"[T\s]\d{2}(?::?\d{2}){0,2}(?:[.,]\d+)?\s*(?:[zZ]|[+-]\d{2}(?::?\d{2})?)\s*$"


def _utc_naive(series: pd.Series) -> pd.Series:
    if getattr(series.dt, "tz", None) is not None:
        return series.dt.tz_convert("UTC").dt.tz_localize(None)
    return series


def is_zone_aware(series: pd.Series) -> bool:
    """Whether a datetime column carries a time zone."""
    return getattr(series.dt, "tz", None) is not None


def datetimes_out_of_range(series: pd.Series) -> np.ndarray:
    """Rows of a datetime column outside what int64 nanoseconds hold (about the years 1678 to 2261)."""
    values = _utc_naive(series).to_numpy()
    if values.dtype == np.dtype("datetime64[ns]"):
        return np.zeros(len(values), dtype=bool)
    per_unit = int(np.timedelta64(1, np.datetime_data(values.dtype)[0]) // np.timedelta64(1, "ns"))
    limit = np.iinfo(np.int64).max // per_unit  # whole units that fit, both signs (NaT is the int64 minimum)
    raw = values.view("int64")
    return ~np.isnat(values) & ((raw < -limit) | (raw > limit))


def datetime_ns(series: pd.Series) -> np.ndarray:
    """Nanoseconds since the epoch as int64 (UTC for zone-aware input); NaT and times outside the
    nanosecond range (see :func:`datetimes_out_of_range`) become the int64 minimum."""
    if series.dtype == _NS:  # already zone-naive nanoseconds: every value fits, NaT is the int64 minimum
        return series.to_numpy().view("int64")
    series = _utc_naive(series)
    out_of_range = datetimes_out_of_range(series)
    if out_of_range.any():
        series = series.where(~out_of_range)
    return series.astype("datetime64[ns]").to_numpy().view("int64")


def offset_mask(series: pd.Series) -> np.ndarray:
    """Which entries of a text column of ISO 8601 times carry a UTC offset (``Z``, ``+02:00``); a regex scan,
    so :func:`parse_datetime_text` runs it only on a column pandas refuses to parse in one zone."""
    text = series.astype("string").str.strip()
    return text.str.contains(_OFFSET, regex=True).fillna(False).to_numpy(dtype=bool)


def parse_datetime_text(series: pd.Series) -> tuple[pd.Series, np.ndarray | None]:
    """Parse ISO 8601 text, and say whether entries with and without a UTC offset were mixed.

    Returns the parsed column (zone-aware when the text carries offsets, UTC when they differ) and, only when
    some present entries carry an offset and others do not, the boolean mask of those with one (else None).
    pandas parses one zone-consistent column in one pass; only a column it refuses is scanned entry by entry.
    """
    text = series.astype("string")
    try:
        parsed = pd.to_datetime(text, format="ISO8601", errors="coerce")
        if parsed.dtype != object:
            return parsed, None
    except (ValueError, TypeError):  # pandas 3: mixed zones (offsets against none, or several offsets)
        pass
    present = ~missing_mask(series)
    offset = offset_mask(text) & present
    mixed = offset if offset.any() and (present & ~offset).any() else None
    return pd.to_datetime(text, format="ISO8601", errors="coerce", utc=True), mixed


def to_float(series: pd.Series) -> np.ndarray:
    """float64 values, NaN where missing or not a number; may share memory with a float64 column."""
    if isinstance(series.dtype, np.dtype) and series.dtype.kind in "fiu":
        return np.asarray(series.to_numpy(), dtype=np.float64)
    if isinstance(series.dtype, pd.api.extensions.ExtensionDtype) and is_numeric(series):
        return series.to_numpy(dtype=np.float64, na_value=np.nan)
    return np.asarray(pd.to_numeric(series, errors="coerce").astype("float64").to_numpy(), dtype=np.float64)


def factorize(series: pd.Series) -> tuple[np.ndarray, pd.Index]:
    """Integer codes (int32, -1 for missing) and sorted categories of a column."""
    if isinstance(series.dtype, pd.CategoricalDtype):
        return _categorical_codes(series)
    try:
        codes, uniques = pd.factorize(series, sort=True)
    except TypeError:  # mixed, unorderable labels: order them as text
        codes, uniques = pd.factorize(series.astype("string"), sort=True)
    return codes.astype(np.int32), pd.Index(uniques)


def _categorical_codes(series: pd.Series) -> tuple[np.ndarray, pd.Index]:
    """Codes over the used categories only, in sorted label order; O(n) (no sort of the codes)."""
    cats = series.cat.categories
    codes = series.cat.codes.to_numpy()
    used = np.zeros(len(cats) + 1, dtype=bool)
    used[codes] = True  # a missing code (-1) marks the extra last slot
    used = used[:-1]
    if used.all() and _is_increasing(cats):  # the usual case: the codes are the answer already
        return codes.astype(np.int32), pd.Index(cats)
    kept = cats[used]
    order = _sorted_order(kept)
    remap = np.full(len(cats) + 1, -1, dtype=np.int32)
    remap[np.flatnonzero(used)[order]] = np.arange(len(kept), dtype=np.int32)
    return remap[np.where(codes >= 0, codes, len(cats))], pd.Index(kept[order])


def _is_increasing(cats: pd.Index) -> bool:
    try:
        return bool(cats.is_monotonic_increasing)
    except TypeError:  # mixed, unorderable labels: _sorted_order orders them as text
        return False


def _sorted_order(cats: pd.Index) -> np.ndarray:
    try:
        return np.asarray(cats.argsort(), dtype=np.int64)
    except TypeError:
        return np.asarray(cats.astype(str).argsort(), dtype=np.int64)


def codes_for(values, categories: pd.Index) -> np.ndarray:
    """Codes of ``values`` against known ``categories`` (-1 where absent)."""
    values = pd.Series(values)
    if isinstance(values.dtype, pd.CategoricalDtype):
        values = values.astype(values.cat.categories.dtype)
    idx = categories.get_indexer(pd.Index(values))
    if (idx < 0).any() and categories.dtype != object:
        as_text = categories.astype(str).get_indexer(pd.Index(values.astype(str)))
        idx = np.where(idx < 0, as_text, idx)
    return np.asarray(idx, dtype=np.int64)


def text_labels(categories: pd.Index) -> pd.Index:
    """The labels of a category field as text (rules name labels as strings), hash-indexed by pandas."""
    if categories.dtype == object and ptypes.infer_dtype(categories, skipna=False) == "string":
        return categories
    if ptypes.is_string_dtype(categories.dtype) and categories.dtype != object:
        return categories
    return pd.Index(categories.astype(str), dtype=object)


def text_codes(text: pd.Index, labels: list[str]) -> np.ndarray:
    """Code of each label among ``text`` (from :func:`text_labels`); -1 where absent, the last on repeats."""
    if text.is_unique:
        return np.asarray(text.get_indexer(pd.Index(labels, dtype=object)), dtype=np.int64)
    out = np.full(len(labels), -1, dtype=np.int64)
    for i, label in enumerate(labels):  # repeated text only where labels of mixed types print alike
        hits = np.flatnonzero(text == label)
        out[i] = hits[-1] if len(hits) else -1
    return out


def frame_from_arrays(columns: dict[str, object], index=None) -> pd.DataFrame:
    """A DataFrame that owns writable copies (the log's own arrays are read-only)."""
    return pd.DataFrame(columns, index=index, copy=True)


def categorical(codes: np.ndarray, categories: pd.Index) -> pd.Categorical:
    return pd.Categorical.from_codes(np.asarray(codes), categories=categories)


def as_pandas(data):
    """A pandas DataFrame from a pyarrow Table / RecordBatch, a polars DataFrame / LazyFrame or any object
    with the Arrow C stream interface (``__arrow_c_stream__``); anything else is returned unchanged.

    The conversion is columnar (Arrow buffers to pandas columns, no loop over rows).  pyarrow and polars
    are optional and only imported when such an object arrives.  Nullable Arrow booleans become pandas'
    nullable ``boolean`` (not object columns of True/False/None), as in the pandas path of the simulator.
    """
    if isinstance(data, pd.DataFrame):
        return data
    root = type(data).__module__.split(".")[0]
    if root == "polars":
        if not hasattr(data, "to_arrow") and hasattr(data, "collect"):  # a LazyFrame
            data = data.collect()
        if not hasattr(data, "to_arrow"):
            return data
        data = data.to_arrow()
    elif root != "pyarrow" and not hasattr(data, "__arrow_c_stream__"):
        return data
    import pyarrow as pa

    if not isinstance(data, (pa.Table, pa.RecordBatch)):
        data = pa.table(data)  # the Arrow PyCapsule stream protocol
    return data.to_pandas(types_mapper={pa.bool_(): pd.BooleanDtype()}.get)
