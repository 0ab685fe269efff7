"""The evaluation on worker processes: everything a fold task carries crosses a process boundary (pickled).

The other cluster tests use threads (quick to start); here the two workers are separate processes, as on a
real cluster, so the fold tables' handles, the job and the fitted transformers are really serialised,
and may be serialised again by a worker (spilling to disk, handing a task on).
"""

from __future__ import annotations

import json
import pickle

import pandas as pd
import pytest
from _scale_data import simulated

from rulefeat import EventLog, scale
from rulefeat.evaluate.value.engine import compute_incremental_value, demo_rules_path
from rulefeat.scale.evaluate import FoldTables

distributed = pytest.importorskip("distributed")

EVALUATION = {"cv": 2, "repeats": 1, "n_boot": 20, "random_state": 0, "learning_curve": (1.0,), "ablation": False,
              "transfer": False, "mined": {"families": ["volume", "correctness"]}}


def test_fold_tables_pickle_again_after_travelling():
    tables = FoldTables({"fold-a": object(), "fold-b": object()})  # no client: nothing is published
    travelled = pickle.loads(pickle.dumps(tables))
    again = pickle.loads(pickle.dumps(travelled))  # failed before: the copy had no futures to take keys from
    assert again.names == travelled.names == tables.names
    assert not hasattr(again, "tables")


@pytest.fixture(scope="module")
def process_client():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) \
            as cluster, distributed.Client(cluster) as c:
        yield c


def test_the_report_on_worker_processes_equals_one_machine(process_client, tmp_path):
    events, windows = simulated(24, seed=3)
    units = windows[["student", "start", "end", "label"]]
    dlog = scale.write_partitioned(events, tmp_path / "events", 3)
    here, oof_here, _ = compute_incremental_value(EventLog(events), units, "label", demo_rules_path(), **EVALUATION)
    there, oof_there, _ = scale.evaluate.compute_incremental_value(
        dlog, units, "label", demo_rules_path(), client=process_client, n_jobs=2, **EVALUATION)
    assert not process_client.list_datasets(), "the fold tables stayed published after the evaluation"
    for results in (here, there):
        results.pop("timing")
    assert json.dumps(there, sort_keys=True, default=str) == json.dumps(here, sort_keys=True, default=str)
    pd.testing.assert_frame_equal(oof_there, oof_here)
