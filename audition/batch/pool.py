"""The local route: worker processes on this machine, Ctrl-C, and workers that die.

:func:`local_workers` decides how many processes (one per core, no more than
there are clips); :func:`_run_locally` runs the jobs in process pools, sends
Ctrl-C on to the workers (how a worker takes it is set up by
:func:`audition.batch.jobs._init_worker`), and runs again, one per process,
the jobs of a worker that died, so only the culprit fails. With
``on_progress`` each worker writes how far its job is into a shared array
(one float per job, no lock, a few writes a second: :class:`_JobProgress`),
which the main process reads between its waits. Before forking,
:func:`_warm_imports` imports what a render needs, scipy only when the jobs
need it; keep every other import of this route inside its function.
"""

from __future__ import annotations

import os
import time

from audition.batch.jobs import _failed_row, _init_worker, run_job

#: Seconds between two writes of a job's progress by its worker (a phase's start and end always write).
PROGRESS_EVERY_SECONDS = 0.2
#: Set in a worker process by :func:`_init_counting_worker`: the shared array of the jobs' progress.
_COUNTERS = None


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


def _run_locally(jobs, n_workers, gather, mp_context, on_progress=None) -> bool:
    """Run the jobs in worker processes; True when interrupted.

    ``on_progress({job index: fraction done})``, optional, is called in this
    process a few times a second with the jobs still running.

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
    counting = None
    if on_progress is not None and jobs:
        # one float per job, written by its worker alone, read here: no lock (a worker killed holding one
        # would stall the others); an aligned 8-byte store is read whole (x86-64, AArch64)
        counting = (ctx.RawArray("d", max(job.index for job in jobs) + 1), on_progress)
    todo = list(jobs)
    while todo:
        outcome = _one_pool(todo, n_workers, ctx, stop, gather, counting)
        if outcome is None:
            return True
        started, not_started = outcome
        if not started and not_started:
            for job in not_started:  # the workers die before any job starts: nothing to isolate
                gather(job, _failed_row(job, "worker processes die as they start"))
            return False
        for job in started:
            solo = _one_pool([job], 1, ctx, stop, gather, counting)
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


class _JobProgress:
    """In a worker: how far its job is, as a fraction of the whole job, written to the shared array.

    The job's phases (survey, plan, render, measure; see ``pipeline.render_job``) count
    equally: the survey, the render and the measurement each stream the clip once, and
    the plan takes about as long as one pass on a ten-minute clip (measured, one core).
    """

    def __init__(self, counters, index: int):
        self.counters, self.index = counters, index
        self.base, self.share, self._last = 0.0, 1.0, 0.0

    def phase(self, name: str, index: int, count: int) -> None:
        self.base, self.share = (index - 1) / count, 1.0 / count
        self._put(self.base)

    def __call__(self, done: int, total: int) -> None:
        now = time.monotonic()
        if now - self._last < PROGRESS_EVERY_SECONDS and done < total:
            return
        self._last = now
        self._put(self.base + self.share * (min(1.0, done / total) if total > 0 else 1.0))

    def _put(self, fraction: float) -> None:
        self.counters[self.index] = max(self.counters[self.index], fraction)


def _init_counting_worker(stop_event, started_queue, parent_pid, counters) -> None:
    """:func:`audition.batch.jobs._init_worker`, and remember the shared progress array."""
    global _COUNTERS
    _COUNTERS = counters
    _init_worker(stop_event, started_queue, parent_pid)


def _run_counted(job) -> dict:
    """:func:`audition.batch.jobs.run_job` with its progress written to the shared array."""
    return run_job(job, progress=None if _COUNTERS is None else _JobProgress(_COUNTERS, job.index))


def _one_pool(jobs, n_workers, ctx, stop, gather, counting=None):
    """Run ``jobs`` in one process pool.

    ``counting`` is None or ``(shared array, on_progress)`` (see :func:`_run_locally`).

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
    if counting is None:
        init, initargs, task, poll = _init_worker, (stop, started_q, os.getpid()), run_job, 0.5
    else:
        counters, on_progress = counting
        init, initargs, task, poll = _init_counting_worker, (stop, started_q, os.getpid(), counters), _run_counted, 0.2
    pool = ProcessPoolExecutor(min(n_workers, len(jobs)), mp_context=ctx, initializer=init, initargs=initargs)
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
                    futures[pool.submit(task, job)] = job
        finally:
            interrupt.restore_mask(mask)
        pending = set(futures)
        while pending:
            interrupt.check()  # a signal whose KeyboardInterrupt a callback or finalizer lost
            done, pending = wait(pending, timeout=poll, return_when=FIRST_COMPLETED)
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
            if counting is not None:
                on_progress({j.index: counters[j.index] for j in jobs
                             if j.index in began and j.index not in gathered})
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
