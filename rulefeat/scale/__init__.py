"""rulefeat beyond one machine: student-partitioned logs, fitting, featurizing and evaluating on Dask.

Needs the ``dask`` extra (``pip install "rulefeat[dask]"``); the rest of rulefeat never imports it.

- :func:`write_partitioned` / :class:`PartitionWriter`: an event log as Parquet partitioned by a stable
  hash of the student (:func:`partitions_for`: about 500k events a partition); :class:`DistributedLog`
  opens such a dataset lazily (folder or fsspec URL) and runs tasks on its partitions' logs, built in
  each task and never kept on the workers.
- :func:`fit`: a RuleFeatures or LogFeatures fitted on the training students' partitions, to the state
  one machine learns (exact norms; BKT by EM summed over partitions).
- :func:`transform`: features of units computed on the partitions of their students.
- :func:`incremental_value`: the evaluation with per-fold features computed on the cluster and the
  per-fold model fits run as cluster tasks on the feature tables.
"""

from .evaluate import incremental_value
from .featurize import transform
from .fit import fit, shared_labels, units_by_partition
from .partitioned import (
    PARTITION_EVENTS,
    DistributedLog,
    PartitionWriter,
    partitions_for,
    student_partition,
    write_partitioned,
)

__all__ = ["write_partitioned", "PartitionWriter", "DistributedLog", "student_partition", "partitions_for",
           "PARTITION_EVENTS", "fit", "transform", "incremental_value", "shared_labels", "units_by_partition"]
