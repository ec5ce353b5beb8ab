"""Many files, one command: find the clips, describe each job, run them in parallel, resume, report.

The flow of a batch::

    sources ──► discover ──► plan_jobs ──► run_batch ──► rows ──► write_report
    (folders,    (inputs and   (one small     (worker processes     (CSV + JSON,
     globs,       their places  picklable      or a Dask cluster;    atomic)
     manifests)   under OUTDIR) Job each)      the main process
                                               gathers the rows)

Where each step lives:

- :mod:`~audition.batch.sources`: folders, glob patterns, manifest CSVs
  (:func:`discover`, :func:`read_manifest`), and :func:`plan_jobs`, which
  turns the clips into jobs and holds every check that refuses the whole batch.
  (Not named ``discover.py``: the function re-exported here would hide a
  module of the same name.)
- :mod:`~audition.batch.jobs`: one clip's :class:`Job`, :func:`run_job` (run
  in a worker; never raises), its row of the report, the resume rules
  (:func:`finished_record`, the sidecar checks) and the worker's state.
- :mod:`~audition.batch.run`: :func:`run_batch`, the main process: hands the
  jobs to a route and gathers the rows in job order.
- :mod:`~audition.batch.pool`: the local route, worker processes on this
  machine (:func:`local_workers`), Ctrl-C, workers that die.
- :mod:`~audition.batch.cluster`: the Dask route (:func:`connect`).
- :mod:`~audition.batch.report`: :class:`BatchResult`, its summary, the
  report's CSV and JSON files and the checks of their paths.

Every check that can refuse the whole batch (an output folder inside a source
folder, two clips mapping to one output, outputs already there, a bad manifest)
runs in :func:`plan_jobs`, before anything is written. After that a bad clip
never stops the batch: :func:`run_job` turns any failure into a row with a
one-line reason and never raises.

A job is rendered by :func:`audition.pipeline.render_job` (the same chain as
``audition render``), so every output has its sidecar ``OUT.json``, which
carries the input's SHA-256 and the job's ``settings``. ``resume`` skips a job
whose output exists and whose sidecar agrees on both; the outputs are written
atomically (temporary file renamed into place), so a batch killed part-way
leaves only complete outputs, and the temporary file of a killed render is
removed before its clip is rendered again.

The public names are importable from ``audition.batch``. Importing it stays
cheap: at the top, the modules here import only the standard library,
:mod:`audition.errors` and each other; the rest (pipeline, scipy, soundfile,
dask.distributed) is imported inside the functions that need it, so the batch
parent does not import scipy before forking unless its jobs need it. To patch a
name in a test, patch it in the module that looks it up (e.g.
``audition.batch.jobs`` for what :func:`run_job` calls), not here.

Nothing here parses arguments or prints; :mod:`audition.cli.batch` does.
"""

from __future__ import annotations

from audition.batch.cluster import connect
from audition.batch.jobs import (ROW_FIELDS, STATUSES, Job, empty_row, finished_record, remove_stale_parts,
                                 row_from_render, row_from_sidecar, run_job)
from audition.batch.pool import default_workers, local_workers
from audition.batch.report import (BatchResult, audiofile_now, check_plot_path, check_report_path, columns,
                                   report_paths, summarise, write_report)
from audition.batch.run import run_batch
from audition.batch.sources import AUDIO_EXTENSIONS, MANIFEST_COLUMNS, Source, discover, plan_jobs, read_manifest

__all__ = ["AUDIO_EXTENSIONS", "MANIFEST_COLUMNS", "ROW_FIELDS", "STATUSES", "BatchResult", "Job", "Source",
           "audiofile_now", "check_plot_path", "check_report_path", "columns", "connect", "default_workers",
           "discover", "empty_row", "finished_record", "local_workers", "plan_jobs", "read_manifest",
           "remove_stale_parts", "report_paths", "row_from_render", "row_from_sidecar", "run_batch", "run_job",
           "summarise", "write_report"]
