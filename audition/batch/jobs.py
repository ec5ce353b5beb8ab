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
    accept_truncated : bool
        Render a clip whose header declares more frames than it holds (``--accept-truncated``).
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
    accept_truncated: bool = False
    container: str | None = None
    strict_metadata: bool | None = None
    command_line: tuple = ()

    def settings(self) -> dict:
        """The settings this job's sidecar must carry (JSON form) for ``resume`` to skip it."""
        from audition import pipeline

        s = pipeline.job_settings(spec=self.spec, auto=self.auto, noise=self.noise, subtype=self.subtype,
                                  dither=self.dither, seed=self.seed)
        return json.loads(json.dumps(s))

    def archive_settings(self) -> dict:
        """The archive options (``--container``, ``--strict-metadata``), recorded in the sidecar beside
        ``settings``: a change in either renders the clip again on ``resume``."""
        return {"container": self.container, "strict_metadata": self.strict_metadata}


# ---------------------------------------------------------------------------
# A worker process's state (set by _init_worker, read by run_job)
# ---------------------------------------------------------------------------

#: Set in a worker process by :func:`_init_worker`: the main process asks the workers to stop.
_STOP = None
#: True in a worker process while a job renders: only then does Ctrl-C interrupt it.
_RUNNING = False
#: Set in a worker process: where it tells the main process which job it begins.
_STARTED = None


def _init_worker(stop_event, started_queue=None, parent_pid: int | None = None) -> None:
    """Start of a worker process: remember the stop flag; take Ctrl-C and SIGTERM only while rendering; die with the parent.

    An idle worker that took Ctrl-C would die with a traceback and break the
    pool; a rendering one takes SIGINT or SIGTERM through :mod:`audition.interrupt`
    (recorded at once, raised where no library callback can lose it), so the
    render removes its temporary file; a second signal (the main process
    forwards Ctrl-C to its workers) does not cut that clean-up short.

    The worker must not outlive the main process (killed, even by SIGKILL): the
    kernel sends it SIGTERM when its parent dies (Linux ``prctl(PR_SET_PDEATHSIG)``,
    prctl(2)), and a thread watching the parent's pid does the same where prctl
    is missing. Then an idle worker exits at once and a rendering one cleans up
    first (:func:`_exit_if_orphaned`).
    """
    global _STOP, _STARTED, _PARENT
    from audition import interrupt

    _STOP, _STARTED = stop_event, started_queue
    _PARENT = parent_pid if parent_pid is not None else os.getppid()

    def active(signum):
        if _orphaned() and not _RUNNING:
            os._exit(128 + signum)  # nothing of a job to clean up: go at once
        return _RUNNING  # between jobs a Ctrl-C is the main process's to act on

    interrupt.install(active)
    _die_with_parent()
    interrupt.unblock()  # the main process forks its workers with the signals blocked (see pool._one_pool)
    if _orphaned():  # the parent died before the watch was set
        os._exit(143)


#: The pid of the main process a worker serves (set by :func:`_init_worker`).
_PARENT = None


def _orphaned() -> bool:
    return _PARENT is not None and os.getppid() != _PARENT


def _die_with_parent() -> None:
    """Have SIGTERM sent to this process when its parent dies: prctl where there is one, and a watching thread."""
    import signal
    import threading

    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        PR_SET_PDEATHSIG = 1  # linux/prctl.h
        libc.prctl(PR_SET_PDEATHSIG, int(signal.SIGTERM), 0, 0, 0)
    except (OSError, AttributeError):
        pass  # not Linux: the thread below does it alone

    def watch():
        import time

        while not _orphaned():
            time.sleep(0.5)
        os.kill(os.getpid(), signal.SIGTERM)

    threading.Thread(target=watch, name="audition-parent-watch", daemon=True).start()


def _exit_if_orphaned() -> None:
    """A worker whose main process is gone has no one to hand its row to: it ends here (its job cleaned up)."""
    if _orphaned():
        from audition import interrupt

        os._exit(interrupt.exit_status() or 143)


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
    # archive metadata (issue 15): the output's fixity and what of the clip's chunks it does not carry
    row["output_sha256"] = r.get("output_sha256")
    row["metadata_dropped"] = "; ".join(f"{m['chunk']}: {m['reason']}" for m in r.get("metadata") or ()
                                        if m.get("fate") == "dropped")
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
    if rec.get("archive_settings") != job.archive_settings():
        return None  # another --container or --strict-metadata (or a sidecar from before they were recorded)
    if job.noise is not None and not (rec.get("measured") or rec.get("figures_missing")):
        return None  # an output of a run older than the commit of output, sidecar and figures as one unit
    try:
        sha = reader.sha256_file(job.input)
    except OSError:
        return None
    if rec.get("input", {}).get("sha256") != sha:
        return None
    return rec if _output_intact(job.output, rec) else None


def _output_intact(path: str, rec: dict) -> bool:
    """The output is the one its sidecar describes: its own SHA-256 and size, and every frame of the input.

    An output whose sidecar records no SHA-256 of its own (audition before issue 16) is not trusted.
    """
    from audition.io import reader

    out = rec.get("output") or {}
    inp = rec.get("input") or {}
    if not out.get("sha256") or out.get("frames") is None or out.get("frames") != inp.get("frames"):
        return False
    try:
        if out.get("size_bytes") is not None and os.path.getsize(path) != out["size_bytes"]:
            return False
        if reader.sha256_file(path) != out["sha256"]:
            return False
        return reader.info(path).frames == out["frames"]
    except (OSError, AuditionError):
        return False


def remove_stale_parts(output: str) -> list[str]:
    """Remove the temporary files a killed render of ``output`` (and of its sidecar) left beside it."""
    from audition.io import sidecar, tempfiles

    return tempfiles.remove_leftover_parts(output, sidecar.sidecar_path(output))


# ---------------------------------------------------------------------------
# One job, in a worker
# ---------------------------------------------------------------------------


def _provenance(job: Job) -> dict | None:
    p = {"batch_run": job.run} if job.run else {}
    p["archive_settings"] = job.archive_settings()
    if job.command_line:
        p["command_line"] = list(job.command_line)
    return p or None


def run_job(job: Job, progress=None) -> dict:
    """Render one job; the row of the report. Never raises: a failure is a row with a one-line reason.

    ``progress`` is handed to :func:`audition.pipeline.render_job` (its phases, then frames done).
    """
    global _RUNNING
    t0 = time.perf_counter()
    row = empty_row(job)
    from audition import interrupt

    try:
        if (_STOP is not None and _STOP.is_set()) or interrupt.received() is not None:
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
                                provenance=_provenance(job), threads=job.threads, container=job.container,
                                strict_metadata=job.strict_metadata, accept_truncated=job.accept_truncated,
                                figures_optional=True, progress=progress)
        row_from_render(row, r)
        if r.get("output") is None:
            # --auto answered "no filter": neither rendered nor failed, nothing written
            row.update(status="no filter", reason=_one_line(r.get("no_filter_reason") or ""), output="")
        else:
            # rendered; figures that could not be made are left empty, and the row says why
            row.update(status="done", reason=_reason_of(job, r.get("figures_missing") or ""))
    except AuditionError as exc:
        if interrupt.received() is not None:  # a read cut short by the signal: the signal is the news
            row.update(status="not run", reason="interrupted while rendering (nothing of it was kept)")
        else:
            row.update(status="failed", reason=_reason_of(job, exc))
    except KeyboardInterrupt:
        row.update(status="not run", reason="interrupted while rendering (nothing of it was kept)")
    except MemoryError:
        row.update(status="failed", reason="out of memory")
    except Exception as exc:  # a bug, but one clip must not stop the others: keep its name in the reason
        row.update(status="failed", reason=_one_line(f"internal error {type(exc).__name__}: {exc}"))
    finally:
        _RUNNING = False
        _exit_if_orphaned()
    row["seconds"] = time.perf_counter() - t0
    return row


def _reason_of(job: Job, text) -> str:
    # the row already names the clip: drop the message's own "'path': " in front
    reason = _one_line(text) if str(text) else ""
    return reason.replace(f"{job.input!r}: ", "", 1) if reason.startswith(("no figures: ", "no measurement: ",
                                                                           f"{job.input!r}: ")) else reason
