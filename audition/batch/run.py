"""Running a batch: the main process hands the jobs to a route and gathers the rows.

:func:`run_batch` stamps every job with the run's name, sends them to worker
processes on this machine (:mod:`audition.batch.pool`) or to a Dask cluster
(:mod:`audition.batch.cluster`), and returns a
:class:`~audition.batch.report.BatchResult` with the rows in job order.
"""

from __future__ import annotations

import os
import time
from dataclasses import replace

from audition.batch.cluster import _run_on_cluster
from audition.batch.jobs import empty_row
from audition.batch.pool import _run_locally, default_workers, local_workers
from audition.batch.report import BatchResult, audiofile_now, summarise


def run_batch(jobs, *, workers: int | None = None, client=None, on_row=None, mp_context=None,
              on_progress=None) -> BatchResult:
    """Run the jobs; the main process gathers the rows.

    Parameters
    ----------
    jobs : sequence of Job
    workers : int, optional
        Cores to use on this machine (default: all this process may run on);
        ignored with ``client``. One worker process per core, each rendering
        one clip at a time in one thread; when there are fewer clips than
        cores, each process gets the spare cores for its reading and writing
        threads (see ``Job.threads``). Cluster workers render in one thread.
    client : distributed.Client, optional
        Run on that Dask cluster instead (see :func:`~audition.batch.cluster.connect`); the paths must be
        the same for its workers.
    on_row : callable, optional
        ``on_row(row)`` in the main process as each job ends (in the order they end).
    on_progress : callable, optional
        ``on_progress({job index: fraction of the job done})`` in the main process: a few
        times a second with the running jobs (local workers), and with 1.0 as each job ends
        (but not for one interrupted), just before ``on_row``. On a cluster only the ends are told.
    mp_context : multiprocessing context, optional
        How worker processes start (default: the platform's); jobs are picklable, so any works.

    Returns
    -------
    BatchResult
        Rows in job order. A Ctrl-C (KeyboardInterrupt) stops the batch: running
        renders are abandoned without leaving anything, the rest are rows
        "not run", and ``interrupted`` is True.
    """
    started = audiofile_now()
    t0 = time.perf_counter()
    rows: dict[int, dict] = {}

    def gather(job, row):
        rows[job.index] = row
        if on_progress is not None and row["status"] != "not run":  # an interrupted clip is not done
            on_progress({job.index: 1.0})
        if on_row is not None:
            on_row(row)

    run = f"{os.getpid()}-{time.time_ns()}"
    interrupted = False
    if client is not None:
        jobs = [replace(job, run=run, threads=False) for job in jobs]
        runner = f"dask cluster {getattr(client.scheduler, 'address', '?')}"
        n_workers = len(client.scheduler_info().get("workers", {}))
        interrupted = _run_on_cluster(jobs, client, gather)
    else:
        n_workers, threads = local_workers(workers or default_workers(), len(jobs))
        jobs = [replace(job, run=run, threads=threads) for job in jobs]
        runner = f"{n_workers} worker process(es)"
        interrupted = _run_locally(jobs, n_workers, gather, mp_context, on_progress)
    wall = time.perf_counter() - t0
    ordered = []
    for job in jobs:
        row = rows.get(job.index)
        if row is None:
            row = empty_row(job)
            row["reason"] = "interrupted before it started"
        ordered.append(row)
    return BatchResult(ordered, summarise(ordered, wall, runner, n_workers, started), interrupted)
