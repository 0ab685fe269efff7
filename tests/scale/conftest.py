"""One small Dask cluster per test module of tests/scale, started and closed here."""

from __future__ import annotations

import pytest


@pytest.fixture(scope="module")
def client():
    distributed = pytest.importorskip("distributed")
    # Threads in this process: quick to start and reliable on a small CI machine. Tasks still go through
    # the scheduler, and the events stay in the workers' memory (futures) as on a real cluster.
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None) \
            as cluster, distributed.Client(cluster) as c:
        yield c
