"""The Dask route: connect to a scheduler and run the jobs on its workers.

dask.distributed is imported only here, and only when ``--cluster`` is given.
The paths must be the same for the cluster's workers as for this machine.
"""

from __future__ import annotations

from audition.batch.jobs import _failed_row, _one_line, run_job
from audition.errors import BadParameter


def connect(address: str, timeout_seconds: float = 10.0):
    """A :class:`distributed.Client` of the cluster at ``address``.

    Raises
    ------
    BadParameter
        dask.distributed not installed, or no scheduler answering at ``address`` within the timeout.
    """
    try:
        from distributed import Client
    except ImportError:
        raise BadParameter("--cluster needs dask.distributed: pip install 'audition[cluster]'") from None
    try:
        return Client(address, timeout=timeout_seconds, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise BadParameter(f"cluster {address!r}: no scheduler answered within {timeout_seconds:g} s "
                           f"({_one_line(exc) or type(exc).__name__})") from None


def _run_on_cluster(jobs, client, gather) -> bool:
    from distributed import as_completed

    futures = {}
    for job in jobs:
        futures[client.submit(run_job, job, pure=False, key=f"audition-batch-{job.run}-{job.index}")] = job
    try:
        with client.as_current():
            finished = as_completed(list(futures))
        for f in finished:
            job = futures[f]
            try:
                row = f.result()
            except Exception as exc:  # the cluster lost the job (a worker died); not the job's own error
                row = _failed_row(job, f"the cluster lost it ({type(exc).__name__}: {exc})")
            gather(job, row)
    except KeyboardInterrupt:
        client.cancel(list(futures))
        return True
    return False
