"""The scan in batches: the same numbers on a local Dask cluster of 2 workers and with none; failed
batches retried, then named, never a silent gap."""

import math

import numpy as np
import pytest

from calib.fireflow import distribute, hydrant_nodes


@pytest.fixture(scope="module")
def cluster():
    from dask.distributed import Client, LocalCluster
    import logging
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                      silence_logs=logging.CRITICAL) as lc, Client(lc) as client:
        yield client


def test_dask_two_workers_gives_the_same_numbers_as_none(town, cluster):
    nodes = hydrant_nodes(town)[:24]
    here = distribute.run(town, nodes, workers=0, progress=False, batch_size=5)
    there = distribute.run(town, nodes, client=cluster, progress=False, batch_size=5)
    assert there.workers == 2 and here.workers == 0
    assert not here.failures and not there.failures
    assert [f.node for f in there.flows] == nodes == [f.node for f in here.flows]
    for a, b in zip(here.flows, there.flows):
        for name in ("static", "flow_at_residual", "flow_system", "available"):
            # nan where the default search left flow_system empty: the same on both sides
            assert getattr(a, name) == pytest.approx(getattr(b, name), rel=1e-12, nan_ok=True)
        assert a.limiting_node == b.limiting_node and a.hydrant_class == b.hydrant_class
    # both ran every hydrant: the solve counts agree too (1-4 solves a hydrant here)
    assert here.solves == there.solves and len(nodes) <= here.solves <= 6 * len(nodes)


def test_a_failing_batch_is_named_on_dask_and_here(town, cluster):
    nodes = hydrant_nodes(town)[:6]
    bad_c = np.ones(3)  # wrong length: every worker fails to set up the scan
    for kw in (dict(workers=0), dict(client=cluster)):
        result = distribute.run(town, nodes, roughness=bad_c, progress=False, batch_size=4, **kw)
        assert [f.index for f in result.failures] == [0, 1]
        # batches hold neighbours (locality order): together the failures name every hydrant
        assert sorted(n for f in result.failures for n in f.nodes) == sorted(nodes)
        first = result.failures[0]
        assert len(first.nodes) == 4 and "batch 0" in str(first) and first.nodes[0] in str(first)
        assert [f.node for f in result.flows] == nodes  # every hydrant has its row
        assert all(math.isnan(f.available) and "failed" in f.note for f in result.flows)


def test_a_batch_that_fails_once_is_retried(town, monkeypatch):
    nodes = hydrant_nodes(town)[:4]
    calls = {"n": 0}
    real = distribute.scan_batch

    def flaky(job, part):
        calls["n"] += 1
        if calls["n"] == 1:
            raise OSError("worker lost")
        return real(job, part)

    monkeypatch.setattr(distribute, "scan_batch", flaky)
    result = distribute.run(town, nodes, workers=0, progress=False, batch_size=4)
    assert calls["n"] == 2 and not result.failures
    assert all(math.isfinite(f.available) for f in result.flows)


def test_command_on_an_existing_cluster_by_scheduler_address(cluster, tmp_path):
    import pandas as pd
    from calib.cli import main
    from tests.fireflow.conftest import NETWORK
    nodes = "J007,J010,J017,J018,J022"
    here, there = tmp_path / "here.csv", tmp_path / "there.csv"
    assert main(["fireflow", str(NETWORK), "--out", str(here), "--workers", "0", "--nodes", nodes,
                 "--quiet"]) == 0
    address = cluster.scheduler_info()["address"]
    assert main(["fireflow", str(NETWORK), "--out", str(there), "--scheduler", address,
                 "--nodes", nodes, "--quiet", "--batch-size", "2"]) == 0
    assert pd.read_csv(here).equals(pd.read_csv(there))
