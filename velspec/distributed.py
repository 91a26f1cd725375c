"""The streaming pass on a dask.distributed cluster (``velspec run --workers N | --scheduler ADDRESS``).

Each task is a run of consecutive blocks of CMPs, scanned with the halo of ``smooth_cmps``
gathers on each side that their smoothing needs (:func:`velspec.pipeline.stream_pass` with a
``span``), so its picks have the bits of the same CMPs in a run on one machine. The workers read
the SEG-Y themselves, at the path the client opened (shared storage); the client sends them the
header index once, receives each task's outcomes and writes them, with their completion
records, into the partial file, so an interrupted cluster run resumes like any other. The line
pass then runs once, on the client, over all the picks.

A worker that dies takes its tasks with it; the scheduler gives them to the others (its
``distributed.scheduler.allowed-failures`` sets how many deaths a task may see). Workers should
run one task at a time (``--nthreads 1``): each task uses the worker's cores through numba.
"""

from __future__ import annotations

import math
import os
import threading

import numpy as np

from .errors import InputError

_ONE_SCAN = threading.Lock()   # numba's default thread pool takes one parallel caller at a time
TASKS_PER_WORKER = 4           # enough tasks to balance the load, few enough to keep halos cheap
MOST_CMPS_PER_TASK = 512


def _client(workers: int, scheduler: str | None):
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise InputError("--workers and --scheduler need dask.distributed: pip install 'velspec[cluster]'") from None
    if scheduler:
        try:
            return Client(scheduler, timeout="10s"), None
        except Exception as exc:  # refused, timed out, bad address: dask raises several kinds
            raise InputError(f"cannot reach the Dask scheduler at {scheduler} ({exc}); start it "
                             "(dask scheduler) or check the address") from None
    cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=":0",
                           host="127.0.0.1")
    return Client(cluster), cluster


def task_spans(todo: np.ndarray, block: int, nworkers: int, halo: int) -> list[tuple[int, int]]:
    """Runs of blocks (first, last + 1) that make the tasks: about ``TASKS_PER_WORKER`` per worker,
    at most ``MOST_CMPS_PER_TASK`` CMPs each, never fewer CMPs than twice the halo when that can be
    helped (the halo is scanned twice)."""
    per = max(1, math.ceil(len(todo) / max(1, TASKS_PER_WORKER * nworkers)))
    per = max(per, math.ceil(2 * halo / block))
    per = min(per, max(1, MOST_CMPS_PER_TASK // block))
    spans = []
    for j in todo.tolist():
        if spans and spans[-1][1] == j and spans[-1][1] - spans[-1][0] < per:
            spans[-1] = (spans[-1][0], j + 1)
        else:
            spans.append((j, j + 1))
    return spans


def scan_span(segy, params, positions, hood, water, lo: int, hi: int, threads: int):
    """Outcomes of items ``lo..hi-1`` (a task; runs on a worker)."""
    from .cpu import set_threads
    from .pick.guide import guide_source
    from .pipeline import stream_pass

    with _ONE_SCAN:
        set_threads(threads)
        guide_for = guide_source(params, segy.times)
        return list(stream_pass(segy, params, positions, None, guide_for, water, hood=hood, span=(lo, hi)))


def stream_on_cluster(segy, params, run, positions, hood, water, todo, *, workers: int = 0,
                      scheduler: str | None = None, update=None) -> None:
    """Finish the blocks ``todo`` of the partial run ``run`` on a Dask cluster.

    Parameters
    ----------
    segy : SegyLine
        The open line (its header index goes to the workers; they open the file by its path).
    params : RunParams
    run : velspec.partial.PartialRun
        Where each finished block is written, with its completion record.
    positions, hood, water
        As for :func:`velspec.pipeline.stream_pass` (``water`` (ncmp, 2) on the line's CMPs).
    todo : ndarray of int
        Block numbers to do.
    workers : int
        Size of a local cluster to start (processes, one thread each), when ``scheduler`` is None.
    scheduler : str, optional
        Address of a running scheduler.
    update : callable, optional
        ``update(n)`` after each task, in CMPs.

    Raises
    ------
    InputError
        No scheduler at the address, or no worker joined it.
    """
    from dask.distributed import as_completed

    client, cluster = _client(workers, scheduler)
    try:
        try:
            client.wait_for_workers(1, timeout=60)
        except TimeoutError:
            raise InputError(f"no Dask worker joined the scheduler {scheduler} within 60 s; start workers "
                             "(dask worker ADDRESS --nthreads 1)") from None
        info = client.scheduler_info()["workers"]
        nworkers = max(1, len(info))
        # a local cluster shares this machine's cores between its workers; a remote worker uses its own
        cores = os.cpu_count() or 1
        threads = params.threads or (max(1, cores // nworkers) if cluster is not None else 0)
        shared = client.scatter([segy, params, np.asarray(positions), hood, water], broadcast=True)
        spans = task_spans(np.asarray(todo), run.block, nworkers, params.pick.smooth_cmps)
        futures = {}
        for first, last in spans:
            lo, hi = run.block_span(first)[0], run.block_span(last - 1)[1]
            f = client.submit(scan_span, *shared, lo, hi, threads, pure=False)
            futures[f] = (first, last)
        for f in as_completed(futures):
            first, last = futures.pop(f)
            outcomes = f.result()
            f.release()
            for j in range(first, last):
                a, b = run.block_span(j)
                base = run.block_span(first)[0]
                run.write_block(j, outcomes[a - base: b - base])
            if update is not None:
                update(len(outcomes))
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


__all__ = ["stream_on_cluster", "scan_span", "task_spans", "TASKS_PER_WORKER", "MOST_CMPS_PER_TASK"]
