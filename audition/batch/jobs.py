"""One clip's job: what it is, how a worker runs it, when an earlier output is kept.

:class:`Job` is the small picklable description a worker is handed;
:func:`run_job` renders it and returns its row of the report, never raising.
The resume rules live here: :func:`finished_record` (an output is done when
its sidecar carries the same settings and the input's SHA-256) and the choice,
in :func:`run_job`, of what an attempt may replace.

The worker-side state (:data:`_STOP`, :data:`_RUNNING`, :data:`_STARTED`) and
:func:`_init_worker`, which sets it and the worker's Ctrl-C handling, live in
this module because :func:`run_job` reads them as this module's globals: a
worker process (forked or spawned) is initialised and then runs jobs through
these same names.
"""

from __future__ import annotations

import json
import os
import time
from dataclasses import dataclass

from audition.errors import AuditionError

#: Statuses of a row: rendered now, skipped (done by an earlier run), failed, or not run (interrupted).
STATUSES = ("done", "no filter", "skipped", "failed", "not run")
#: The first columns of the report, in order; figures of the prediction and measurement follow.
ROW_FIELDS = ("input", "output", "status", "reason", "warnings", "filter", "duration_seconds", "rate_hz",
              "channels", "f0_hz", "q", "order", "alignment", "highpass_hz", "sections", "method", "peak_dbfs",
              "true_peak_dbtp", "clipped_samples", "seconds", "realtime_factor", "input_sha256")


# ---------------------------------------------------------------------------
# What one job is
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Job:
    """One clip to render: a small picklable description handed to a worker.

    Attributes
    ----------
    index : int
        Position in the batch (the report keeps this order).
    input, output : str
        Absolute paths; the output's folder is made by the worker.
    rel : str
        The output's path relative to the output folder (for messages).
    spec : audition.plan.presets.FilterSpec or None
        The filter, from a preset, a plan file or the filter options; None with ``auto``.
    auto : audition.pipeline.PlanSettings or None
        Plan each clip by itself with these settings.
    noise : audition.pipeline.NoiseReference or None
        Where the hiss alone is; the predicted and measured figures need it.
    subtype, dither, seed :
        Output encoding as in ``audition render``.
    resume : bool
        Skip when the output is already there with a sidecar for the same input bytes and settings.
    overwrite : bool
        Replace existing outputs.
    filter_label : str
        Where the filter comes from, e.g. ``"preset cassette-ferric"``.
    run : str
        The batch run this job belongs to (set by :func:`~audition.batch.run.run_batch`),
        recorded in the sidecar as "batch_run". A job may be attempted twice: a worker process that
        dies takes the rows of the others with it (a local pool kills them all; Dask
        re-runs the tasks of a lost worker). So an attempt that finds an output
        finished by its own run keeps it (status done), and one that finds its own
        run's unfinished output (killed before the measurement) replaces it, as it
        replaces an output without a sidecar (killed between committing the two).
    threads : bool
        Run the job's reading and writing in helper threads (set by
        :func:`~audition.batch.run.run_batch`: only when a worker process has two or more cores to itself). Without, a
        worker is one thread: one core's work per worker, so ``--workers N`` keeps
        N cores busy and no more. Not a setting: the output is the same.
    """

    index: int
    input: str
    output: str
    rel: str
    spec: object = None
    auto: object = None
    noise: object = None
    subtype: str | None = None
    dither: bool = True
    seed: int = 0
    resume: bool = False
    overwrite: bool = False
    filter_label: str = ""
    run: str = ""
    threads: bool = False

    def settings(self) -> dict:
        """The settings this job's sidecar must carry (JSON form) for ``resume`` to skip it."""
        from audition import pipeline

        s = pipeline.job_settings(spec=self.spec, auto=self.auto, noise=self.noise, subtype=self.subtype,
                                  dither=self.dither, seed=self.seed)
        return json.loads(json.dumps(s))


# ---------------------------------------------------------------------------
# A worker process's state (set by _init_worker, read by run_job)
# ---------------------------------------------------------------------------

#: Set in a worker process by :func:`_init_worker`: the main process asks the workers to stop.
_STOP = None
#: True in a worker process while a job renders: only then does Ctrl-C interrupt it.
_RUNNING = False
#: Set in a worker process: where it tells the main process which job it begins.
_STARTED = None


def _init_worker(stop_event, started_queue=None) -> None:
    """Start of a worker process: remember the stop flag; take Ctrl-C only while rendering.

    An idle worker that took Ctrl-C would die with a traceback and break the
    pool; a rendering one takes it once, as KeyboardInterrupt, so the render
    removes its temporary file (the main process also forwards Ctrl-C to its
    workers, so a second one must not cut that clean-up short).
    """
    import signal

    global _STOP, _STARTED
    _STOP, _STARTED = stop_event, started_queue

    def on_sigint(signum, frame):
        global _RUNNING
        if _RUNNING:
            _RUNNING = False
            raise KeyboardInterrupt

    signal.signal(signal.SIGINT, on_sigint)


# ---------------------------------------------------------------------------
# A job's row of the report
# ---------------------------------------------------------------------------


def _one_line(text: str) -> str:
    return " ".join(str(text).split()) or "no reason given"


def empty_row(job: Job) -> dict:
    """A row with this job's names and every figure left blank."""
    row = dict.fromkeys(ROW_FIELDS)
    row.update(input=job.input, output=job.output, status="not run", reason="", filter=job.filter_label)
    return row


def _failed_row(job: Job, why: str) -> dict:
    row = empty_row(job)
    row.update(status="failed", reason=_one_line(why))
    return row


def _flatten(prefix: str, d, into: dict) -> None:
    if isinstance(d, dict):
        for k, v in d.items():
            _flatten(f"{prefix}_{k}", v, into)
    elif isinstance(d, (list, tuple)):
        into[prefix] = json.dumps(d)
    else:
        into[prefix] = d


def _design_fields(dd: dict) -> dict:
    return {"f0_hz": dd.get("f0_hz"), "q": dd.get("q"), "order": dd.get("order"), "alignment": dd.get("alignment"),
            "highpass_hz": dd.get("highpass_hz"), "sections": len(dd.get("sections") or ()),
            "method": dd.get("method")}


def row_from_render(row: dict, r: dict) -> dict:
    """Fill a row from the dict :func:`audition.pipeline.render_job` returns."""
    row.update(_design_fields(r))
    row.update(duration_seconds=r.get("duration_seconds"), rate_hz=r.get("rate"), channels=r.get("channels"),
               peak_dbfs=r.get("peak_dbfs"), true_peak_dbtp=r.get("true_peak_dbtp"),
               clipped_samples=r.get("clipped_samples"), realtime_factor=r.get("realtime_factor"),
               input_sha256=r.get("input_sha256"))
    for what in ("predicted", "measured"):
        if r.get(what):
            _flatten(what, r[what], row)
    if r.get("warnings"):
        row["warnings"] = "; ".join(_one_line(w) for w in r["warnings"])
    return row


def row_from_sidecar(row: dict, rec: dict) -> dict:
    """Fill a row from the sidecar of an output rendered by an earlier run."""
    inp = rec.get("input", {})
    rate, frames = inp.get("rate_hz"), inp.get("frames")
    row.update(_design_fields(rec.get("design", {})))
    row.update(duration_seconds=frames / rate if rate and frames else None, rate_hz=rate,
               channels=inp.get("channels"), peak_dbfs=rec.get("peak_dbfs"), true_peak_dbtp=rec.get("true_peak_dbtp"),
               clipped_samples=rec.get("clipped_samples"), input_sha256=inp.get("sha256"))
    for what in ("predicted", "measured"):
        if rec.get(what):
            _flatten(what, rec[what], row)
    return row


# ---------------------------------------------------------------------------
# Resume: is an earlier output this job's, finished?
# ---------------------------------------------------------------------------


def _read_sidecar(job: Job) -> dict | None:
    """The JSON object in this job's sidecar, when the output and its sidecar are both there."""
    from audition.io import sidecar

    side = sidecar.sidecar_path(job.output)
    if not (os.path.isfile(job.output) and os.path.isfile(side)):
        return None
    try:
        with open(side, encoding="utf-8") as fh:
            rec = json.load(fh)
    except (OSError, ValueError):
        return None
    return rec if isinstance(rec, dict) else None


def finished_record(job: Job, rec: dict | None = None) -> dict | None:
    """The sidecar of this job's output when a run finished it with the same input and settings.

    ``rec`` is the sidecar already read (default: read it now).
    """
    from audition.io import reader

    rec = _read_sidecar(job) if rec is None else rec
    if rec is None or rec.get("settings") != job.settings():
        return None
    if job.noise is not None and not rec.get("measured"):
        return None  # killed between the render and its measurement: the job is not finished
    try:
        sha = reader.sha256_file(job.input)
    except OSError:
        return None
    return rec if rec.get("input", {}).get("sha256") == sha else None


def remove_stale_parts(output: str) -> list[str]:
    """Remove the temporary files a killed render of ``output`` (and of its sidecar) left beside it."""
    from audition.io import sidecar, tempfiles

    return tempfiles.remove_leftover_parts(output) + tempfiles.remove_leftover_parts(sidecar.sidecar_path(output))


# ---------------------------------------------------------------------------
# One job, in a worker
# ---------------------------------------------------------------------------


def run_job(job: Job) -> dict:
    """Render one job; the row of the report. Never raises: a failure is a row with a one-line reason."""
    global _RUNNING
    t0 = time.perf_counter()
    row = empty_row(job)
    try:
        if _STOP is not None and _STOP.is_set():
            row["reason"] = "interrupted before it started"
            return row
        if _STARTED is not None:
            _STARTED.put(job.index)
        _RUNNING = True
        from audition import pipeline

        os.makedirs(os.path.dirname(job.output), exist_ok=True)
        remove_stale_parts(job.output)
        side = _read_sidecar(job)
        ours = bool(job.run) and side is not None and side.get("batch_run") == job.run
        if side is not None and (job.resume or ours):
            rec = finished_record(job, side)
            if rec is not None:
                row_from_sidecar(row, rec)
                if ours:  # an earlier attempt of this run finished it; its row was lost with its worker
                    row.update(status="done", reason="")
                else:
                    row.update(status="skipped", reason="done by an earlier run (same input bytes and settings)")
                row["seconds"] = time.perf_counter() - t0
                return row
        # What a batch may replace was settled before it began (plan_jobs refuses existing outputs without
        # --resume or --overwrite). So an output found here without a readable sidecar, or a sidecar without
        # its output, is what an earlier attempt of this run left when it was killed between the two renames
        # of its commit, or in its clean-up: replace it. Another run's sidecar is refused (a safety net for
        # callers that did not plan the jobs with plan_jobs).
        overwrite = job.overwrite or job.resume or ours or side is None
        r = pipeline.render_job(job.input, job.output, spec=job.spec, auto=job.auto, noise=job.noise,
                                subtype=job.subtype, dither=job.dither, seed=job.seed, overwrite=overwrite,
                                provenance={"batch_run": job.run} if job.run else None, threads=job.threads)
        row_from_render(row, r)
        if r.get("output") is None:
            # --auto answered "no filter": neither rendered nor failed, nothing written
            row.update(status="no filter", reason=_one_line(r.get("no_filter_reason") or ""), output="")
        else:
            row.update(status="done", reason="")
    except AuditionError as exc:
        # the row already names the clip: drop the message's own "'path': " in front
        reason = _one_line(exc)
        row.update(status="failed", reason=reason.removeprefix(f"{job.input!r}: ") or reason)
    except KeyboardInterrupt:
        row.update(status="not run", reason="interrupted while rendering (nothing of it was kept)")
    except MemoryError:
        row.update(status="failed", reason="out of memory")
    except Exception as exc:  # a bug, but one clip must not stop the others: keep its name in the reason
        row.update(status="failed", reason=_one_line(f"internal error {type(exc).__name__}: {exc}"))
    finally:
        _RUNNING = False
    row["seconds"] = time.perf_counter() - t0
    return row
