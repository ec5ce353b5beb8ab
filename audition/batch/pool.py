"""The local route: worker processes on this machine, Ctrl-C, and workers that die.

:func:`local_workers` decides how many processes (one per core, no more than
there are clips); :func:`_run_locally` runs the jobs in process pools, sends
Ctrl-C on to the workers (how a worker takes it is set up by
:func:`audition.batch.jobs._init_worker`), and runs again, one per process,
the jobs of a worker that died, so only the culprit fails. Before forking,
:func:`_warm_imports` imports what a render needs, scipy only when the jobs
need it; keep every other import of this route inside its function.
"""

from __future__ import annotations

import os

from audition.batch.jobs import _failed_row, _init_worker, run_job


def default_workers() -> int:
    """The cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


def local_workers(cores: int, clips: int) -> tuple[int, bool]:
    """How a batch of ``clips`` uses ``cores`` on this machine: ``(processes, threads)``.

    One worker process per core, as many as there are clips. A worker renders
    in one thread (reading, filtering, writing in turn), so N workers keep N
    cores busy: on a loaded machine ``--workers 1`` leaves the other cores
    free, and the cores are not shared between a worker's threads and the
    other workers. When there are fewer clips than cores, every process has
    two or more cores to itself and reads ahead and writes behind in helper
    threads (``threads`` True), as a single-file render does.
    """
    processes = max(1, min(cores, clips))
    return processes, cores // processes >= 2


def _run_locally(jobs, n_workers, gather, mp_context) -> bool:
    """Run the jobs in worker processes; True when interrupted.

    A worker process that dies (a crash inside a library on a malformed file)
    breaks the whole pool, and the pool kills its other workers. The jobs it
    had not started go to a fresh pool; the ones that had started (the culprit,
    and the others running beside it) are run again one per process, so only
    the culprit is reported failed. A clip a killed worker had already finished
    is kept by its second attempt (see ``Job.run``).
    """
    import multiprocessing

    ctx = mp_context or multiprocessing.get_context()
    if ctx.get_start_method() == "fork":
        _warm_imports(jobs)
    stop = ctx.Event()
    todo = list(jobs)
    while todo:
        outcome = _one_pool(todo, n_workers, ctx, stop, gather)
        if outcome is None:
            return True
        started, not_started = outcome
        if not started and not_started:
            for job in not_started:  # the workers die before any job starts: nothing to isolate
                gather(job, _failed_row(job, "worker processes die as they start"))
            return False
        for job in started:
            solo = _one_pool([job], 1, ctx, stop, gather)
            if solo is None:
                return True
            if solo[0]:
                gather(job, _failed_row(job, "its worker process died while rendering it (a crash in a "
                                             "library reading or writing this file?)"))
        todo = not_started
    return False


def _warm_imports(jobs) -> None:
    """Import what a render needs before forking, so every worker inherits it.

    With the C kernels a render needs no scipy.signal (about a second to import);
    the numpy kernels use its sosfilt, so then it is imported here, once, instead
    of in every worker. The survey and the measurement use scipy.fft (a quarter
    of a second to import): only for jobs that survey.
    """
    import soundfile  # noqa: F401

    from audition import kernels, pipeline, render  # noqa: F401

    if any(job.noise is not None or job.auto is not None for job in jobs):
        import scipy.fft  # noqa: F401

        from audition import measure, plan  # noqa: F401
        from audition.survey import onepass  # noqa: F401
    if not kernels.COMPILED:
        import scipy.signal  # noqa: F401


def _one_pool(jobs, n_workers, ctx, stop, gather):
    """Run ``jobs`` in one process pool.

    Returns None when interrupted; else ``(started, not_started)``: the jobs
    without a row when the pool broke, split by whether a worker had begun them
    (both empty when it did not break).
    """
    import multiprocessing
    import queue as queue_mod
    import signal
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    from audition import interrupt

    started_q = ctx.SimpleQueue()
    pool = ProcessPoolExecutor(min(n_workers, len(jobs)), mp_context=ctx, initializer=_init_worker,
                               initargs=(stop, started_q, os.getpid()))
    futures = {}
    gathered: set[int] = set()
    began: set[int] = set()
    broken = False

    def drain():
        # read as they come, so the pipe never fills and blocks a worker
        while not started_q.empty():
            try:
                began.add(started_q.get())
            except (EOFError, OSError, queue_mod.Empty):
                return

    try:
        # the workers are forked (or spawned) by the first submit: with SIGINT and SIGTERM blocked,
        # so a signal that lands meanwhile waits for a worker's own handler (see jobs._init_worker)
        # instead of striking the child's start-up code; here it is taken when they are unblocked
        mask = interrupt.block_in_thread()
        try:
            with interrupt.shielded():
                for job in jobs:
                    futures[pool.submit(run_job, job)] = job
        finally:
            interrupt.restore_mask(mask)
        pending = set(futures)
        while pending:
            interrupt.check()  # a signal whose KeyboardInterrupt a callback or finalizer lost
            done, pending = wait(pending, timeout=0.5, return_when=FIRST_COMPLETED)
            drain()
            for f in done:
                job = futures[f]
                try:
                    row = f.result()
                except BrokenProcessPool:
                    broken = True
                    continue
                gather(job, row)
                gathered.add(job.index)
    except KeyboardInterrupt:
        stop.set()
        for f in futures:
            f.cancel()
        # Ctrl-C at a terminal reaches the workers too; `kill -INT` of this process alone does not
        for child in multiprocessing.active_children():
            try:
                os.kill(child.pid, signal.SIGINT)
            except OSError:
                pass
        pool.shutdown(wait=True, cancel_futures=True)
        for f, job in futures.items():
            if f.done() and not f.cancelled() and f.exception() is None and job.index not in gathered:
                gather(job, f.result())
        return None
    pool.shutdown(wait=True)
    if not broken:
        return [], []
    drain()
    left = [j for j in jobs if j.index not in gathered]
    return [j for j in left if j.index in began], [j for j in left if j.index not in began]
