"""Transform units where their students' events are: one task per partition, results as pandas, Dask or Parquet.

A unit's features depend only on its own events and the fitted state (contract 3), and all of a student's
events sit in one partition, so each partition's task scores the units of its students with the same
engine as one machine (the fitted transformer bound to that partition's EventLog, contract 9); the log is
built in the task and freed with it.  With
numeric times the result equals the single-machine one to the bit; with datetime times each partition's
log counts seconds from its own earliest event, so time differences agree to float rounding
(docs/ship.md, "Time").
"""

from __future__ import annotations

import copy
import posixpath

import numpy as np
import pandas as pd

from .. import _frame
from .._base import UnitTransformer
from .._validation import Options, validate
from ..errors import ParameterError, UnitError
from .extra import default_client, require
from .fit import units_by_partition
from .partitioned import DistributedLog

__all__ = ["transform", "transform_each"]


def transform(fitted, dlog: DistributedLog, X: pd.DataFrame, *, client=None, output: str = "pandas",
              path=None, storage_options: dict | None = None):
    """Features of ``X``'s units computed on the partitions holding their students.

    Parameters
    ----------
    fitted : RuleFeatures or LogFeatures
        A fitted transformer (from :func:`rulefeat.scale.fit`, or fitted on one machine).
    dlog : DistributedLog
        The partitioned events.
    X : pandas.DataFrame
        Unit keys.
    client : distributed.Client, optional
        The cluster; the current client by default.
    output : {"pandas", "dask", "parquet"}, default "pandas"
        A DataFrame in X's row order (with X's index); a Dask DataFrame with one partition per event
        partition (rows grouped by partition, X's index kept); or Parquet files written by the workers
        to ``path`` (``part-00000.parquet``, ...; X's index as a column ``unit``), returning ``path``.
    """
    validate("rulefeat.scale.transform", {"output": output}, {"output": Options(("pandas", "dask", "parquet"))})
    if not isinstance(fitted, UnitTransformer) or not hasattr(fitted, "feature_names_out_"):
        raise ParameterError("rulefeat.scale.transform: 'fitted' must be a fitted RuleFeatures or LogFeatures. "
                             f"Got {type(fitted).__name__}.")
    if output == "parquet" and path is None:
        raise ParameterError("rulefeat.scale.transform: output='parquet' needs path=, the folder to write to.")
    client = default_client(client)
    X = _frame.as_pandas(X)
    student = fitted.unit_.student
    if student not in X.columns:
        raise UnitError(f"rulefeat.scale.transform: X has no {student!r} column; its units need their student.")
    rows = units_by_partition(dlog, X[student])
    if output == "parquet":
        futures = [dlog.submit(client, k, _write, fitted, X.iloc[r], path, k, storage_options) for k, r in rows.items()]
        client.gather(futures)
        return path
    futures = [dlog.submit(client, k, _transform_part, fitted, X.iloc[r]) for k, r in rows.items()]
    if output == "dask":
        dd = require("dask.dataframe")
        meta = pd.DataFrame({name: pd.Series([], dtype=np.float64) for name in fitted.feature_names_out_},
                            index=X.index[:0])
        return dd.from_delayed(futures, meta=meta, verify_meta=False)
    parts = client.gather(futures)
    order = np.argsort(np.concatenate(list(rows.values())), kind="stable")
    return pd.concat(parts).iloc[order] if len(parts) > 1 else parts[0].iloc[order]


def transform_each(fitted: list, dlog: DistributedLog, X: pd.DataFrame, *, client=None) -> list[pd.DataFrame]:
    """``[transform(f, dlog, X) for f in fitted]`` (pandas output) in one pass: each partition's log is built
    once for all the transformers (the cluster evaluation featurizes each fold this way)."""
    client = default_client(client)
    X = _frame.as_pandas(X)
    student = fitted[0].unit_.student
    rows = units_by_partition(dlog, X[student])
    parts = client.gather([dlog.submit(client, k, _transform_parts, fitted, X.iloc[r]) for k, r in rows.items()])
    order = np.argsort(np.concatenate(list(rows.values())), kind="stable")
    return [pd.concat([p[j] for p in parts]).iloc[order] if len(parts) > 1 else parts[0][j].iloc[order]
            for j in range(len(fitted))]


def _transform_parts(log, fitted: list, X: pd.DataFrame) -> list[pd.DataFrame]:
    return [_transform_part(log, f, X) for f in fitted]


def _transform_part(log, fitted, X: pd.DataFrame) -> pd.DataFrame:
    if log is None:
        raise UnitError(f"rulefeat.scale.transform: {len(X)} units name students that are not in the event "
                        f"log (first {X.iloc[0].to_dict()!r}).")
    local = copy.deepcopy(fitted)  # shares nothing with other tasks; reads this partition's events only
    local.set_params(log=log)
    return local.transform(X)


def _write(log, fitted, X, path, k, storage_options):
    fsspec = require("fsspec")
    fs, root = fsspec.core.url_to_fs(str(path), **(storage_options or {}))
    fs.makedirs(root, exist_ok=True)
    table = _transform_part(log, fitted, X)
    table.insert(0, "unit", np.asarray(X.index))
    with fs.open(posixpath.join(root, f"part-{k:05d}.parquet"), "wb") as f:
        table.to_parquet(f, index=False)
    return len(table)
