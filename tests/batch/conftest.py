"""A real dask.distributed cluster for the batch tests that ask for it (started once per
session: two worker processes with one thread each, no dashboard, 1 GiB each)."""

import pytest


@pytest.fixture(scope="session")
def dask_client():
    pytest.importorskip("distributed")
    from distributed import Client, LocalCluster

    cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                           dashboard_address=":0", memory_limit="1GiB")
    client = Client(cluster, set_as_default=False)
    try:
        yield client
    finally:
        client.close()
        cluster.close()
