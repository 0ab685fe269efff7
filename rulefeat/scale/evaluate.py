"""``incremental_value`` on a cluster: per-fold features where the events are, per-fold models as cluster tasks.

For every fold the two transformers are fitted on the fold's training students' partitions
(:func:`rulefeat.scale.fit`) and transform the fold's units where their students' events are
(:func:`rulefeat.scale.transform`); only the resulting feature tables (units x features) leave the
workers.  The folds' model fits then run through the library's one fold loop under
``joblib.parallel_config(backend="dask")``, which scatters the feature tables to the cluster once and
runs each fold as a cluster task.  Folds, seeds, statistics and the results dict are those of
:func:`rulefeat.incremental_value`, so for the same events, units and seed the report is the same
(numeric times: bit for bit; datetime times: to float rounding of the time axis, see
:mod:`rulefeat.scale.featurize`).  Warnings raised while featurizing stay in the workers' logs.
"""

from __future__ import annotations

import hashlib
import uuid

import joblib
import numpy as np
import pandas as pd

from .. import _frame
from ..errors import UnitError
from ..evaluate.folds import column_names, dense, fold_features
from ..evaluate.inputs import WHERE, prepare_units
from ..evaluate.value.engine import evaluate_inputs
from ..report.value import IncrementalValueReport
from .extra import default_client, require
from .featurize import transform_each
from .fit import fit, shared_labels
from .partitioned import DistributedLog

__all__ = ["incremental_value", "compute_incremental_value", "log_summary"]


def incremental_value(dlog: DistributedLog, units, y, rules, *, client=None, n_jobs=-1, **options):
    """:func:`rulefeat.incremental_value` of a :class:`DistributedLog`'s events, run on a Dask cluster.

    Parameters
    ----------
    dlog : DistributedLog
        The partitioned events.
    units, y, rules :
        As in :func:`rulefeat.incremental_value`.
    client : distributed.Client, optional
        The cluster; the current client by default.
    n_jobs : int, default -1
        Fold tasks running at once on the cluster (see :func:`rulefeat.evaluate.thread_budget`).
    **options
        Every other option of :func:`rulefeat.incremental_value` (``cv``, ``repeats``, ``model``,
        ``mined`` as None or a dict of LogFeatures parameters, ``random_state``, ...).

    Returns
    -------
    IncrementalValueReport
    """
    return IncrementalValueReport(*compute_incremental_value(dlog, units, y, rules, client=client, n_jobs=n_jobs,
                                                             **options))


def compute_incremental_value(dlog: DistributedLog, units, y, rules, *, client=None, n_jobs=-1, population=None,
                              unit="window", task="auto", **options):
    """Same as :func:`incremental_value` but returns ``(results, oof, oof_transfer)``."""
    client = default_client(client)
    summary = log_summary(dlog, client)
    units = _frame.as_pandas(units)

    def student_codes(labels):
        return _student_codes(dlog, labels)

    def from_log(codes, notes):
        return _populations(dlog, client, codes, notes)

    inputs = prepare_units(units, y, population, unit, task, student_codes,
                           from_log if "population" in summary["fields"] else None)

    def source(X, mined, rules_tf, rule_names):
        return ClusterFolds(dlog, client, X, mined, rules_tf, rule_names)

    with joblib.parallel_config(backend="dask", client=client):
        return evaluate_inputs(inputs, None, rules, options.pop("mined", None), {"n_events": dlog.n_events,
                               "log": summary}, source, unit=unit, n_jobs=n_jobs, **options)


class ClusterFolds:
    """Fold features computed on the cluster for every fold before the fold loop runs."""

    def __init__(self, dlog, client, X, mined, rules, rule_names):
        self.dlog, self.client, self.X = dlog, client, X
        self.mined, self.rules, self.rule_names = mined, rules, list(rule_names)

    def for_tasks(self, tasks: list, y: np.ndarray) -> FoldTables:
        tables = {}
        for task in tasks:
            train, test = task.fold.train, task.fold.test
            key = fold_key(train, test)
            if key not in tables:
                # Kept on the cluster, not in the fold loop's job: each fold task fetches its own tables.
                tables[key] = self.client.scatter([self._fold(train, test, y[train])], hash=False)[0]
        return FoldTables(tables, self.client)

    def _fold(self, train, test, y_train):
        Xtr = self.X.iloc[train]
        both = pd.concat([Xtr, self.X.iloc[test]])
        ests = [fit(prototype, self.dlog, Xtr, y_train, client=self.client) for prototype in (self.mined, self.rules)]
        blocks = []
        for prefix, est, Z in zip(("mined", "rules"), ests, transform_each(ests, self.dlog, both, client=self.client),
                                  strict=True):
            values = dense(Z)
            blocks.append((column_names(est, Z, prefix), values[:len(train)], values[len(train):]))
        return fold_features(blocks[0], blocks[1], self.rule_names)


class FoldTables:
    """The fold loop's feature source once every fold's tables are computed: a lookup by fold.

    The tables are data scattered to the cluster and published there under names of their own (a future
    does not survive joblib's pickling, and a bare key looked up by a worker's client never resolves);
    this object travels to the fold tasks with the names only and each task fetches its fold's tables.
    The client's copy holds the futures, and :meth:`close` (called when the fold loop ends) unpublishes
    them so the cluster lets the tables go.
    """

    def __init__(self, tables: dict, client=None):
        self.tables, self.client = tables, client
        self.names = {fold: f"rulefeat-fold-{uuid.uuid4().hex}" for fold in tables}
        if client is not None:
            for fold, future in tables.items():
                client.publish_dataset(future, name=self.names[fold])

    def __getstate__(self) -> dict:
        # A copy that already travelled may travel again (a worker spilling or handing on its task).
        return {"names": dict(self.names)}

    def __setstate__(self, state: dict) -> None:
        self.names = state["names"]

    def features(self, train: np.ndarray, test: np.ndarray, y_train: np.ndarray):
        fold = fold_key(train, test)
        if hasattr(self, "tables"):
            return self.tables[fold].result()
        distributed = require("distributed")
        return distributed.get_client().get_dataset(self.names[fold]).result()

    def close(self) -> None:
        if getattr(self, "client", None) is not None:
            for name in self.names.values():
                self.client.unpublish_dataset(name)
            self.client, self.tables = None, {}


def fold_key(train: np.ndarray, test: np.ndarray) -> str:
    digest = hashlib.sha256(np.asarray(train, dtype=np.int64).tobytes())
    digest.update(b"|" + np.asarray(test, dtype=np.int64).tobytes())
    return digest.hexdigest()


def _student_codes(dlog: DistributedLog, labels) -> np.ndarray:
    labels = pd.Series(list(labels) if not isinstance(labels, pd.Series) else labels).reset_index(drop=True)
    codes = _frame.codes_for(labels, dlog.students)
    absent = np.flatnonzero(codes < 0)
    if len(absent):
        shown = ", ".join(f"row {r}: {labels.iloc[r]!r}" for r in absent[:5])
        raise UnitError(f"{WHERE}: {len(absent)} rows name students that are not in the event log ({shown}). "
                        "Check the student ids against DistributedLog.students.")
    return codes


def log_summary(dlog: DistributedLog, client) -> dict:
    """:meth:`rulefeat.EventLog.summary` of all the events, added up over the partitions."""
    parts = [p for p in dlog.per_partition(client, _summary) if p]
    actions: dict = {}
    for p in parts:
        for name, n in p["actions"].items():
            actions[name] = actions.get(name, 0) + n
    total = {key: int(sum(p[key] for p in parts)) for key in ("events", "input_rows", "dropped_rows", "students",
                                                             "sessions")}
    issues = [f"partition {k}: {issue}" for k, p in enumerate(parts) for issue in p["issues"]]
    return {**total, "actions": dict(sorted(actions.items())), "fields": parts[0]["fields"] if parts else [],
            "issues": issues}


def _summary(log):
    return None if log is None else log.summary()


def _populations(dlog: DistributedLog, client, codes: np.ndarray, notes: list):
    """Each unit's population: that of its student's first event (as on one machine)."""
    names = [str(c) for c in shared_labels(dlog, client).get("population", [])]
    found = dlog.per_partition(client, _first_population)
    student_pop = np.full(len(dlog.students), -1, dtype=np.int64)
    mixed = 0
    lookup = pd.Index(names)
    for part in found:
        if part is None:
            continue
        students, labels, n_mixed = part
        at = _frame.codes_for(pd.Series(students), dlog.students)
        student_pop[at] = np.where(pd.isna(labels), -1, lookup.get_indexer(pd.Index(labels).astype(str)))
        mixed += n_mixed
    if mixed:
        notes.append(f"{mixed} students have events in more than one population; each is counted in the "
                     "population of its first event.")
    return student_pop[codes], names


def _first_population(log):
    if log is None:
        return None
    first, last = log.student_bounds()
    present = np.flatnonzero(first < last)
    pop = log.values("population")
    at_first = pop[first[present]]
    labels = np.where(at_first >= 0, np.asarray(log.categories("population"), dtype=object)[np.maximum(at_first, 0)],
                      None)
    values = pop.astype(float)
    starts = first[present]
    mixed = int((np.minimum.reduceat(values, starts) != np.maximum.reduceat(values, starts)).sum()) if len(starts) \
        else 0
    return np.asarray(log.students[present], dtype=object), labels, mixed
