"""Event logs stored as Parquet datasets partitioned by student, and opened lazily.

Layout of a dataset folder (a local path or any fsspec URL)::

    rulefeat-partitions.json      format, number of partitions, EventLog options, columns
    students.parquet              student, partition, events  (one row per student)
    part-00000/chunk-000000.parquet, chunk-000001.parquet, ...
    part-00001/...

A student's partition is a stable hash of the student label's text (:func:`student_partition`), the same
in every process and on every machine, so all of a student's events land in one partition and units can
be sent to the partition holding their student.  The writer holds up to ``buffer_events`` events and
writes a partition's buffered events as one chunk (whole students, each sorted by time) when the buffer
is full (largest partition first) or on closing, so a partition has few, large chunk files however many
small pieces of it were written.  :meth:`DistributedLog.load` turns a partition into an ordinary :class:`~rulefeat.EventLog` wherever it
runs (contract 9: the same engine on every worker).

Workers never keep a partition's log between tasks: :meth:`DistributedLog.submit` runs a function on a
partition's log built inside the task, and only the function's (small) result stays.  So a worker's memory
is bounded by the size of a partition, not of the dataset; :func:`partitions_for` picks the number of
partitions that keeps each near :data:`PARTITION_EVENTS` events.
"""

from __future__ import annotations

import json
import posixpath

import numpy as np
import pandas as pd

from .. import _frame
from ..errors import LogSchemaError, ParameterError
from ..log.eventlog import EventLog
from .extra import require

__all__ = ["write_partitioned", "PartitionWriter", "DistributedLog", "student_partition", "partitions_for",
           "PARTITION_EVENTS", "MANIFEST"]

# Default events per partition: a built EventLog of the demo data takes about 370 bytes an event, so a
# partition of 500k events is ~0.2 GB in a worker while a task runs on it (measured, benchmarks/scale_out.py).
PARTITION_EVENTS = 500_000
MANIFEST = "rulefeat-partitions.json"
STUDENTS = "students.parquet"
FORMAT = 1
# pandas' SipHash of the label text with this fixed key: stable across processes, machines and versions.
_HASH_KEY = "rulefeat-student"  # 16 characters, as SipHash needs


def student_partition(students, n_partitions: int) -> np.ndarray:
    """The partition (0 .. n_partitions - 1) of every student label, from a stable hash of its text."""
    labels = pd.Series(students).astype(str).to_numpy(dtype=object)
    hashed = pd.util.hash_array(labels, hash_key=_HASH_KEY, categorize=True)
    return (hashed % np.uint64(n_partitions)).astype(np.int64)


def partitions_for(n_events: int, *, events_per_partition: int = PARTITION_EVENTS) -> int:
    """Number of partitions that holds about ``n_events`` with at most ``events_per_partition`` each on average.

    Examples
    --------
    >>> partitions_for(10_600_000), partitions_for(1_000), partitions_for(2_000_000, events_per_partition=10**6)
    (22, 1, 2)
    """
    if isinstance(n_events, bool) or not isinstance(n_events, (int, np.integer)) or n_events < 0:
        raise ParameterError(f"The 'n_events' parameter of partitions_for must be a non-negative integer. "
                             f"Got {n_events!r} instead.")
    if isinstance(events_per_partition, bool) or not isinstance(events_per_partition, (int, np.integer)) \
            or events_per_partition < 1:
        raise ParameterError(f"The 'events_per_partition' parameter of partitions_for must be a positive integer. "
                             f"Got {events_per_partition!r} instead.")
    return max(1, -(-int(n_events) // int(events_per_partition)))


def _filesystem(path, storage_options):
    fsspec = require("fsspec")
    return fsspec.core.url_to_fs(str(path), **(storage_options or {}))


class PartitionWriter:
    """Write an event log chunk by chunk (whole students per chunk) into a student-partitioned dataset.

    Use it as a context manager; each :meth:`write` takes a table of events of students not written
    before, splits it by student partition and appends one sorted Parquet chunk to each partition.
    Closing writes the manifest and the student table, so a dataset is readable only once complete.

    Parameters
    ----------
    path : str or path
        A folder (created, must be empty or absent) or an fsspec URL.
    n_partitions : int
        Number of partitions; a few times the number of workers is a good start.
    log_options : dict, optional
        Options of :class:`~rulefeat.EventLog` used for every partition (``columns``, ``time_unit``,
        ``session_gap``, ...). They are stored in the manifest.
    storage_options : dict, optional
        Passed to fsspec for URLs.
    buffer_events : int, default 4_000_000
        Events held (as Arrow tables) before the largest partitions' buffers are written out. More means
        fewer chunk files per partition, which later reads faster (one file per 5k-event piece made an
        18-chunk partition read 3.4x slower at 91 chunks); the writer's memory is about 40 bytes an event
        of the demo data's columns.
    """

    def __init__(self, path, n_partitions: int, *, log_options: dict | None = None,
                 storage_options: dict | None = None, buffer_events: int = 4_000_000):
        for name, value in (("n_partitions", n_partitions), ("buffer_events", buffer_events)):
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
                raise ParameterError(f"The {name!r} parameter of PartitionWriter must be a positive integer. "
                                     f"Got {value!r} instead.")
        self.fs, self.root = _filesystem(path, storage_options)
        if self.fs.exists(self.root) and self.fs.ls(self.root):
            raise ParameterError(f"PartitionWriter: {str(path)!r} is not empty; give a new folder so that "
                                 "no old partition is mixed in.")
        self.fs.makedirs(self.root, exist_ok=True)
        self.n_partitions, self.buffer_events = int(n_partitions), int(buffer_events)
        self._buffer: dict[int, list] = {}
        self._buffered = np.zeros(self.n_partitions, dtype=np.int64)
        self._files = np.zeros(self.n_partitions, dtype=np.int64)
        self.log_options = dict(log_options or {})
        self._students: list[pd.DataFrame] = []
        self._seen: set[str] = set()
        self._columns: dict | None = None
        self._chunks = 0

    def _name(self, field: str) -> str:
        return self.log_options.get("columns", {}).get(field, field)

    def write(self, events) -> None:
        """Append the events of some students (a DataFrame, Arrow table or an EventLog)."""
        frame = self._frame(events)
        student, time = self._name("student"), self._name("time")
        for name in (student, time):
            if name not in frame.columns:
                raise LogSchemaError(f"PartitionWriter.write: the events have no column {name!r}; name it or "
                                     "give log_options={'columns': {...}}.")
        counts = frame[student].value_counts(sort=False, dropna=False)
        counts = counts[counts > 0]  # a categorical column lists its unused categories too
        if counts.index.isna().any():
            raise LogSchemaError(f"PartitionWriter.write: {int(counts[counts.index.isna()].sum())} events have "
                                 "no student; every event needs one to be placed in a partition.")
        text = [str(s) for s in counts.index]
        again = [s for s in text if s in self._seen]
        if again:
            raise LogSchemaError(f"PartitionWriter.write: students {again[:5]!r} were written in an "
                                 "earlier chunk; write all of a student's events in one chunk.")
        self._seen.update(text)
        part = student_partition(frame[student], self.n_partitions)
        self._students.append(pd.DataFrame({"student": counts.index.to_numpy(), "events": counts.to_numpy(),
                                            "partition": student_partition(counts.index, self.n_partitions)}))
        self._check_columns(frame)
        keys = [student, time] if _frame.is_numeric(frame[time]) or _frame.is_datetime(frame[time]) else [student]
        ordered = frame.assign(_part=part).sort_values(["_part", *keys], kind="stable")
        bounds = np.searchsorted(ordered["_part"].to_numpy(), np.arange(self.n_partitions + 1))
        body = ordered.drop(columns="_part")
        pa = require("pyarrow")
        for k in range(self.n_partitions):
            if bounds[k + 1] > bounds[k]:
                self._buffer.setdefault(k, []).append(
                    pa.Table.from_pandas(body.iloc[bounds[k]:bounds[k + 1]], preserve_index=False))
                self._buffered[k] += bounds[k + 1] - bounds[k]
        self._chunks += 1
        while self._buffered.sum() > self.buffer_events:
            self._flush(int(np.argmax(self._buffered)))

    def _frame(self, events) -> pd.DataFrame:
        if isinstance(events, EventLog):
            if not self.log_options:
                self.log_options = _options_of(events)
            return events.to_frame(derived=False).reset_index(drop=True)
        return _frame.as_pandas(events).reset_index(drop=True)

    def _check_columns(self, frame: pd.DataFrame) -> None:
        columns = {str(c): str(frame[c].dtype) for c in frame.columns}
        if self._columns is None:
            self._columns = columns
        elif list(columns) != list(self._columns):
            raise LogSchemaError(f"PartitionWriter.write: this chunk has columns {list(columns)!r}, the first "
                                 f"had {list(self._columns)!r}; every chunk needs the same columns.")

    def _flush(self, k: int) -> None:
        """Write partition ``k``'s buffered pieces (whole students, in writing order) as its next chunk."""
        pq, pa = require("pyarrow.parquet"), require("pyarrow")
        pieces = self._buffer.pop(k)
        folder = posixpath.join(self.root, f"part-{k:05d}")
        self.fs.makedirs(folder, exist_ok=True)
        try:
            table = pa.concat_tables(pieces, promote_options="permissive") if len(pieces) > 1 else pieces[0]
        except (pa.ArrowInvalid, pa.ArrowTypeError) as exc:
            raise LogSchemaError(f"PartitionWriter.write: the chunks written have columns of types that do not "
                                 f"combine ({exc}); give every chunk the same column types.") from exc
        with self.fs.open(posixpath.join(folder, f"chunk-{self._files[k]:06d}.parquet"), "wb") as f:
            pq.write_table(table, f)
        self._files[k] += 1
        self._buffered[k] = 0

    def close(self) -> None:
        """Write what is still buffered, the student table and the manifest."""
        for k in sorted(self._buffer):
            self._flush(k)
        pq, pa = require("pyarrow.parquet"), require("pyarrow")
        students = pd.concat(self._students, ignore_index=True) if self._students else \
            pd.DataFrame({"student": pd.Series([], dtype=object), "events": [], "partition": []})
        with self.fs.open(posixpath.join(self.root, STUDENTS), "wb") as f:
            pq.write_table(pa.Table.from_pandas(students, preserve_index=False), f)
        manifest = {"format": FORMAT, "n_partitions": self.n_partitions, "log_options": self.log_options,
                    "columns": self._columns or {}, "chunks": self._chunks,
                    "events": int(students["events"].sum()), "students": len(students)}
        with self.fs.open(posixpath.join(self.root, MANIFEST), "w") as f:
            json.dump(manifest, f, indent=1, default=str)

    def __enter__(self) -> PartitionWriter:
        return self

    def __exit__(self, kind, value, tb) -> None:
        if kind is None:
            self.close()


def _options_of(log: EventLog) -> dict:
    """EventLog options that rebuild ``log``'s events (already renamed and relabelled) the same way."""
    settings = log.settings
    options = {"session_gap": settings["session_gap"], "duration_cap": settings["duration_cap"],
               "duplicates": settings.get("duplicates", "keep")}
    return {k: v for k, v in options.items() if v is not None}


def write_partitioned(events, path, n_partitions: int | None = None, *, log_options: dict | None = None,
                      storage_options: dict | None = None) -> DistributedLog:
    """Write an event table or an :class:`~rulefeat.EventLog` as a student-partitioned Parquet dataset.

    Parameters
    ----------
    events : EventLog, pandas.DataFrame or pyarrow.Table
        The events. An EventLog is written with its own (canonical) columns and options; a table is
        written as given and read later with ``log_options``.
    path : str or path
        A new folder or an fsspec URL.
    n_partitions : int, optional
        Number of partitions; by default :func:`partitions_for` the number of events (about
        :data:`PARTITION_EVENTS` events each).
    log_options : dict, optional
        :class:`~rulefeat.EventLog` options for reading the partitions back (for a table).
    storage_options : dict, optional
        Passed to fsspec.

    Returns
    -------
    DistributedLog
        The dataset, opened.

    Examples
    --------
    >>> import pandas as pd, tempfile
    >>> events = pd.DataFrame({"student": ["a", "b", "a", "c"], "time": [3.0, 1.0, 1.0, 2.0],
    ...                        "action": ["attempt", "hint", "hint", "attempt"]})
    >>> dlog = write_partitioned(events, tempfile.mkdtemp() + "/events", 2)
    >>> dlog.n_partitions, dlog.n_events, sorted(dlog.students)
    (2, 4, ['a', 'b', 'c'])
    >>> sum(len(dlog.load(k)) for k in range(dlog.n_partitions))
    4
    """
    if n_partitions is None:
        n_partitions = partitions_for(len(events))
    with PartitionWriter(path, n_partitions, log_options=log_options, storage_options=storage_options) as out:
        out.write(events)
    return DistributedLog(path, storage_options=storage_options)


class DistributedLog:
    """A student-partitioned event dataset, opened lazily: schema, students and partition map, no events.

    Nothing but the manifest and the student table is read on the client. :meth:`load` builds one
    partition's :class:`~rulefeat.EventLog`; :meth:`submit` runs a function on it as a cluster task, the
    log built inside the task and dropped when it ends, so that no worker holds more than the partitions
    of its running tasks (:mod:`rulefeat.scale`'s ``fit``, ``transform`` and ``incremental_value`` read
    each partition again in each of their passes).

    Parameters
    ----------
    path : str or path
        The folder (or fsspec URL) :func:`write_partitioned` / :class:`PartitionWriter` wrote.
    storage_options : dict, optional
        Passed to fsspec.
    """

    def __init__(self, path, *, storage_options: dict | None = None):
        self.path, self.storage_options = str(path), storage_options
        require("pyarrow")  # pandas reads the Parquet files through it
        fs, root = _filesystem(path, storage_options)
        if not fs.exists(posixpath.join(root, MANIFEST)):
            raise LogSchemaError(f"DistributedLog: {self.path!r} has no {MANIFEST}; it is not a dataset written "
                                 "by rulefeat.scale.write_partitioned (or its writer was not closed).")
        with fs.open(posixpath.join(root, MANIFEST), "r") as f:
            manifest = json.load(f)
        if manifest.get("format") != FORMAT:
            raise LogSchemaError(f"DistributedLog: {self.path!r} has format {manifest.get('format')!r}; this "
                                 f"version of rulefeat reads format {FORMAT}.")
        with fs.open(posixpath.join(root, STUDENTS), "rb") as f:
            table = pd.read_parquet(f)
        self._manifest = manifest
        _, self._students = _frame.factorize(table["student"])  # sorted as EventLog sorts its students
        order = _frame.codes_for(table["student"], self._students)
        self._partition = np.empty(len(table), dtype=np.int64)
        self._partition[order] = table["partition"].to_numpy()
        self._events = np.empty(len(table), dtype=np.int64)
        self._events[order] = table["events"].to_numpy()
        self._reader = _Reader(self.path, storage_options, manifest)
        self._memo: dict = {}

    def __repr__(self) -> str:
        return (f"DistributedLog({self.n_events} events, {len(self.students)} students, "
                f"{self.n_partitions} partitions at {self.path!r})")

    def __getstate__(self) -> dict:
        state = self.__dict__.copy()
        state["_memo"] = {}  # per-partition summaries are recomputed where needed
        return state

    @property
    def n_partitions(self) -> int:
        return int(self._manifest["n_partitions"])

    @property
    def n_events(self) -> int:
        return int(self._manifest["events"])

    @property
    def schema(self) -> dict:
        """``{column: pandas dtype}`` of the stored events (before the EventLog reads them)."""
        return dict(self._manifest["columns"])

    @property
    def log_options(self) -> dict:
        return dict(self._manifest["log_options"])

    @property
    def students(self) -> pd.Index:
        """Every student label, sorted as an EventLog of all the events would number them."""
        return self._students

    def partition_map(self) -> pd.DataFrame:
        """One row per student: ``student``, ``partition``, ``events``."""
        return pd.DataFrame({"student": self._students, "partition": self._partition, "events": self._events})

    def partition_of(self, students) -> np.ndarray:
        """The partition of every label (by hash, so also for students the dataset does not hold)."""
        return student_partition(students, self.n_partitions)

    def files(self, k: int) -> list[str]:
        """The Parquet chunks of partition ``k``, in writing order."""
        return self._reader.files(k)

    def read(self, k: int) -> pd.DataFrame:
        """Partition ``k``'s events as stored (a worker-side step of :meth:`load`)."""
        return self._reader.read(k)

    def load(self, k: int) -> EventLog | None:
        """Partition ``k`` as an :class:`~rulefeat.EventLog` (None when it holds no student)."""
        return self._reader.load(k)

    def submit(self, client, k: int, function, *args, **options):
        """A future of ``function(partition k's EventLog or None, *args)``, run as one cluster task.

        The log is built inside the task and freed when it returns; only the result stays on the
        worker. ``args`` may hold futures (dask passes their values); ``options`` go to
        ``client.submit`` (``workers=``, ...).
        """
        if not 0 <= k < self.n_partitions:
            raise ParameterError(f"DistributedLog.submit: partition {k!r} does not exist; there are "
                                 f"{self.n_partitions} (0 .. {self.n_partitions - 1}).")
        return client.submit(_on_partition, self._reader, k, function, *args, pure=False, **options)

    def per_partition(self, client, function) -> list:
        """``[function(log of partition k) for every k]``, computed on the cluster once per dataset.

        For small per-partition facts (category labels, summaries): they are kept on this object by
        ``function`` (a module-level function), so later fits and evaluations do not read every partition
        again for them.
        """
        key = f"{function.__module__}.{function.__qualname__}"
        if key not in self._memo:
            self._memo[key] = client.gather([self.submit(client, k, function) for k in range(self.n_partitions)])
        return self._memo[key]


class _Reader:
    """What a task needs to read partitions (path, options, layout): small to send with every task."""

    def __init__(self, path: str, storage_options, manifest: dict):
        self.path, self.storage_options = path, storage_options
        self.n_partitions = int(manifest["n_partitions"])
        self.schema = dict(manifest["columns"])
        self.log_options = dict(manifest["log_options"])

    def files(self, k: int) -> list[str]:
        fs, root = _filesystem(self.path, self.storage_options)
        folder = posixpath.join(root, f"part-{k:05d}")
        return sorted(fs.glob(posixpath.join(folder, "*.parquet"))) if fs.exists(folder) else []

    def read(self, k: int) -> pd.DataFrame:
        # One Arrow table of every chunk, turned into pandas once: about twice as fast as a pandas frame per
        # chunk and a concat (measured on a partition of 18 chunks), and chunks' categories are unified.
        pq, pa = require("pyarrow.parquet"), require("pyarrow")
        fs, _ = _filesystem(self.path, self.storage_options)
        tables = []
        for name in self.files(k):
            with fs.open(name, "rb") as f:
                tables.append(pq.read_table(f))
        if not tables:
            return pd.DataFrame({c: pd.Series([], dtype=object) for c in self.schema})
        table = pa.concat_tables(tables, promote_options="permissive") if len(tables) > 1 else tables[0]
        return table.to_pandas()

    def load(self, k: int) -> EventLog | None:
        if not 0 <= k < self.n_partitions:
            raise ParameterError(f"DistributedLog.load: partition {k!r} does not exist; there are "
                                 f"{self.n_partitions} (0 .. {self.n_partitions - 1}).")
        frame = self.read(k)
        if not len(frame):
            return None
        return EventLog(frame, **self.log_options)


def _on_partition(reader: _Reader, k: int, function, *args):
    return function(reader.load(k), *args)
