"""Run a fire-flow scan over many hydrants in batches: in this process, or on Dask (``dask.distributed``).

Hydrants are independent, so the scan splits them into batches. On Dask the network, the C and the
covariance are sent to each worker once (``Client.scatter(broadcast=True)``); each worker builds its
solver and the static solution once per scan and keeps them between batches. A batch that fails is
retried (``retries``); one that still fails is named in ``ScanResult.failures`` and its hydrants come
back as rows with no figures and the error in their note: never a silent gap. A hydrant whose own
solve fails (e.g. no convergence) is a row with the reason; the batch goes on.
"""

from __future__ import annotations

import logging
import math
import os
import sys
import time
import uuid
from dataclasses import dataclass, field

from calib.errors import CalibError
from calib.fireflow.scan import (FireFlowScan, GroupCovariance, HydrantFlow, ScanOptions,
                                 locality_order)


@dataclass
class ScanJob:
    """Everything a worker needs for a scan (sent to each worker once)."""

    network: object
    roughness: object = None
    options: ScanOptions = field(default_factory=ScanOptions)
    covariance: GroupCovariance | None = None
    token: str = field(default_factory=lambda: uuid.uuid4().hex)


@dataclass
class BatchFailure:
    index: int
    nodes: list
    error: str

    def __str__(self) -> str:
        shown = ", ".join(self.nodes[:5]) + (f" and {len(self.nodes) - 5} more"
                                             if len(self.nodes) > 5 else "")
        return f"batch {self.index} ({shown}) failed after its retries: {self.error}"


@dataclass
class ScanResult:
    flows: list  # HydrantFlow per requested node, in the requested order
    failures: list  # BatchFailure
    workers: int  # 0 = in this process
    seconds: float
    solves: int = 0


_SCANS: dict = {}  # per process: the scan of the current job (solver, static solution)


def _scan_for(job: ScanJob) -> FireFlowScan:
    scan = _SCANS.get(job.token)
    if scan is None:
        _SCANS.clear()
        scan = FireFlowScan(job.network, roughness=job.roughness, options=job.options,
                            covariance=job.covariance)
        _SCANS[job.token] = scan
    return scan


def scan_batch(job: ScanJob, nodes: list) -> tuple[list, int]:
    """Figures of each hydrant of one batch -> (flows, solves). Runs on a worker."""
    scan = _scan_for(job)
    scan.reset()
    before = scan.solves
    out = []
    for node in nodes:
        try:
            out.append(scan.hydrant(node))
        except CalibError as exc:  # this hydrant only: say why and go on
            out.append(failed_row(node, f"failed: {exc}"))
    return out, scan.solves - before


def failed_row(node, note: str) -> HydrantFlow:
    nan = math.nan
    return HydrantFlow(node=str(node), static=nan, flow_at_residual=nan, flow_system=nan,
                       limiting_node="", available=nan, note=note)


def batches(nodes: list, size: int) -> list[list]:
    size = max(1, int(size))
    return [list(nodes[k:k + size]) for k in range(0, len(nodes), size)]


def default_batch_size(n_nodes: int, workers: int) -> int:
    """About eight batches per worker (load balance, a smooth progress bar), 1 to 100 hydrants."""
    return max(1, min(100, math.ceil(n_nodes / (8 * max(workers, 1)))))


def _bar(total: int, progress: bool):
    from tqdm import tqdm
    # off a terminal (CI, a log file) tqdm stays silent (disable=None): carriage returns would pile
    # up into one long line; the command prints its summary line either way
    return tqdm(total=total, unit="hydrant", desc="fire flow", disable=None if progress else True,
                file=sys.stderr, mininterval=0.5)


def run(network, nodes, roughness=None, options: ScanOptions | None = None,
        covariance: GroupCovariance | None = None, workers: int | None = None,
        scheduler: str | None = None, batch_size: int | None = None, progress: bool = True,
        retries: int = 1, client=None) -> ScanResult:
    """Scan ``nodes``: ``workers=0`` (and no scheduler) in this process; otherwise on Dask, a
    ``LocalCluster`` of ``workers`` single-threaded processes (default: this machine's cores), or
    the cluster at ``scheduler`` (e.g. ``tcp://10.0.0.5:8786``; its workers need this package), or
    an open ``client`` (left open; for tests and benchmarks that reuse one cluster)."""
    job = ScanJob(network=network, roughness=roughness, options=options or ScanOptions(),
                  covariance=covariance)
    job.options.check()
    wanted = [str(n) for n in nodes]
    # neighbours in the same batch, one after the other: warm starts (``FireFlowScan``)
    nodes = locality_order(network, list(dict.fromkeys(wanted)))
    start = time.perf_counter()
    if scheduler is None and workers == 0 and client is None:
        flows, failures, solves = _run_here(job, nodes, batch_size, progress, retries)
        used = 0
    else:
        flows, failures, solves, used = _run_dask(job, nodes, workers, scheduler, batch_size,
                                                  progress, retries, client)
    by_node = {f.node: f for f in flows}
    flows = [by_node[n] for n in wanted]  # the requested order
    return ScanResult(flows=flows, failures=failures, workers=used,
                      seconds=time.perf_counter() - start, solves=solves)


def _run_here(job, nodes, batch_size, progress, retries):
    parts = batches(nodes, batch_size or default_batch_size(len(nodes), 1))
    flows, failures, solves = [], [], 0
    with _bar(len(nodes), progress) as bar:
        for k, part in enumerate(parts):
            for attempt in range(retries + 1):
                try:
                    rows, n = scan_batch(job, part)
                    flows.extend(rows)
                    solves += n
                    break
                except Exception as exc:  # noqa: BLE001 - any failure of a batch is retried, then named
                    if attempt == retries:
                        failures.append(BatchFailure(k, part, f"{type(exc).__name__}: {exc}"))
                        flows.extend(failed_row(n_, f"batch {k} failed: {exc}") for n_ in part)
            bar.update(len(part))
    return flows, failures, solves


def _run_dask(job, nodes, workers, scheduler, batch_size, progress, retries, client=None):
    from dask.distributed import Client, LocalCluster, as_completed

    cluster, own = None, client is None
    if client is not None:
        pass
    elif scheduler is None:
        n = workers or os.cpu_count() or 1
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                               dashboard_address=None, silence_logs=logging.CRITICAL)
        client = Client(cluster)
    else:
        client = Client(scheduler)
    try:
        used = len(client.scheduler_info().get("workers", {})) or (workers or 1)
        parts = batches(nodes, batch_size or default_batch_size(len(nodes), used))
        shared = client.scatter(job, broadcast=True)  # the network goes to each worker once
        futures = {client.submit(scan_batch, shared, part, retries=retries, pure=False,
                                 key=f"fireflow-{job.token[:8]}-batch-{k}"): k
                   for k, part in enumerate(parts)}
        results: dict[int, list] = {}
        failures, solves = [], 0
        with _bar(len(nodes), progress) as bar:
            for fut in as_completed(futures):
                k = futures[fut]
                if fut.status == "error":
                    exc = fut.exception()
                    failures.append(BatchFailure(k, parts[k], f"{type(exc).__name__}: {exc}"))
                    results[k] = [failed_row(n_, f"batch {k} failed: {exc}") for n_ in parts[k]]
                else:
                    results[k], n_solves = fut.result()
                    solves += n_solves
                bar.update(len(parts[k]))
        flows = [row for k in range(len(parts)) for row in results[k]]
        failures.sort(key=lambda f: f.index)
        return flows, failures, solves, used
    finally:
        if own:
            client.close()
        if cluster is not None:
            cluster.close()
