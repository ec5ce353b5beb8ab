"""The batch report: the result of a run, its summary, and its CSV and JSON files.

:class:`BatchResult` is what :func:`~audition.batch.run.run_batch` returns
(and what :mod:`audition.plots.batch` draws); :func:`summarise` counts it;
:func:`write_report` writes it, each file atomically. The checks of a report's
or a picture's path run before the batch starts.
"""

from __future__ import annotations

import csv
import io
import os
from dataclasses import dataclass

from audition import __version__
from audition.batch.jobs import ROW_FIELDS, STATUSES
from audition.errors import OutputRefused


# ---------------------------------------------------------------------------
# The result of a batch and its summary
# ---------------------------------------------------------------------------


@dataclass
class BatchResult:
    """The rows (in job order), the summary, and whether the batch was interrupted."""

    rows: list[dict]
    summary: dict
    interrupted: bool = False

    @property
    def failed(self) -> int:
        return self.summary["counts"]["failed"]


def audiofile_now() -> str:
    from audition.io import sidecar

    return sidecar.utc_now_iso()


def summarise(rows, wall_seconds: float, runner: str, workers: int, started_utc: str) -> dict:
    """Counts, audio time and throughput of a batch."""
    counts = {s: sum(r["status"] == s for r in rows) for s in STATUSES}
    done_audio = sum(r["duration_seconds"] or 0.0 for r in rows if r["status"] == "done")
    all_audio = sum(r["duration_seconds"] or 0.0 for r in rows if r["status"] in ("done", "skipped"))
    return {
        "audition_version": __version__,
        "started_utc": started_utc,
        "finished_utc": audiofile_now(),
        "runner": runner,
        "workers": workers,
        "files": len(rows),
        "counts": {k.replace(" ", "_"): v for k, v in counts.items()},
        "audio_seconds": all_audio,
        "rendered_audio_seconds": done_audio,
        "wall_seconds": wall_seconds,
        "throughput_audio_seconds_per_second": done_audio / wall_seconds if wall_seconds > 0 else None,
    }


# ---------------------------------------------------------------------------
# The report's files
# ---------------------------------------------------------------------------


def report_paths(path) -> tuple[str, str]:
    """``(CSV, JSON)`` paths of a report: ``path`` with its ``.csv`` or ``.json`` ending replaced by each."""
    path = os.fspath(path)
    stem, ext = os.path.splitext(path)
    if ext.lower() not in (".csv", ".json"):
        stem = path
    return stem + ".csv", stem + ".json"


def columns(rows) -> list[str]:
    """The report's columns: :data:`ROW_FIELDS`, then every predicted/measured figure any row has."""
    cols = list(ROW_FIELDS)
    extra = {k for r in rows for k in r if k not in ROW_FIELDS}
    return cols + sorted(extra, key=_figure_rank)


#: Figures first in the report, in this order, predicted before measured; the rest follow by name.
_FIRST_FIGURES = tuple(f"{w}_{k}" for w in ("predicted", "measured") for k in (
    "snr_gain_db_flat", "snr_gain_db_a", "snr_gain_db_itu468", "noise_reduction_db_flat", "noise_reduction_db_a",
    "noise_reduction_db_itu468", "treble_loss_db", "treble_from_hz"))


def _figure_rank(name: str):
    return (_FIRST_FIGURES.index(name), "") if name in _FIRST_FIGURES else (len(_FIRST_FIGURES), name)


def _inside_lexically(path: str, folder: str) -> bool:
    p, f = os.path.abspath(path), os.path.abspath(folder)
    return p == f or p.startswith(f.rstrip(os.sep) + os.sep)


def _check_new_file(path: str, outdir: str | None, what: str, hint: str) -> None:
    """Refuse a file the batch will write whose folder is missing or that names a folder.

    Checked before the batch starts; a folder below OUTDIR passes, as OUTDIR itself is made later.
    """
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder) and not (outdir is not None and _inside_lexically(folder, outdir)):
        raise OutputRefused(f"{what} {path!r}: the folder {folder!r} does not exist")
    if os.path.isdir(path):
        raise OutputRefused(f"{what} {path!r}: is a folder; {hint}")
    # the folder, or the first of its parents that exists when it is to be made below OUTDIR
    there = folder
    while not os.path.isdir(there) and os.path.dirname(there) != there:
        there = os.path.dirname(there)
    if not os.access(there, os.W_OK | os.X_OK):
        raise OutputRefused(f"{what} {path!r}: the folder {there!r} is not writable; nothing was rendered")


def check_report_path(path, outdir: str | None = None) -> tuple[str, str]:
    """Refuse a report whose folder is missing or not writable, or a FOLDER (checked before the batch starts).

    ``--report FOLDER`` would write ``FOLDER.csv`` and ``FOLDER.json`` beside the folder, not in it:
    refused, with the name that was probably meant. OUTDIR itself is made later.
    """
    p = os.fspath(path)
    if os.path.isdir(p) or p.endswith(("/", os.sep)):
        inside = os.path.join(p, "batch-report")
        raise OutputRefused(f"report {p!r}: is a folder; the report is FILE.csv and FILE.json, so name a file "
                            f"stem such as {inside!r}")
    csv_path, json_path = report_paths(path)
    for p in (csv_path, json_path):
        _check_new_file(p, outdir, "report", "name a file")
    return csv_path, json_path


def check_plot_path(path, outdir: str | None = None) -> str:
    """Refuse a batch picture whose folder is missing or that names a folder (checked before the batch starts)."""
    _check_new_file(path, outdir, "plot", "give the picture a file name ending in .png")
    return path


def write_report(path, result: BatchResult) -> tuple[str, str]:
    """Write the batch report as CSV (one row per clip) and JSON (summary and rows), each atomically.

    Returns the two paths.
    """
    from audition import report
    from audition.io import sidecar

    csv_path, json_path = report_paths(path)
    cols = columns(result.rows)
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=cols, lineterminator="\n", extrasaction="ignore")
    w.writeheader()
    for r in result.rows:
        w.writerow({k: _csv_cell(r.get(k)) for k in cols})
    report.write(csv_path, buf.getvalue())
    sidecar.write_sidecar(json_path, {"summary": result.summary, "interrupted": result.interrupted,
                                      "columns": cols, "rows": [_json_row(r, cols) for r in result.rows]})
    return csv_path, json_path


def _csv_cell(v):
    if v is None:
        return ""
    if isinstance(v, float):
        return repr(v)
    return v


def _json_row(r: dict, cols) -> dict:
    import math

    out = {}
    for k in cols:
        v = r.get(k)
        if isinstance(v, float) and not math.isfinite(v):
            v = None
        out[k] = v
    return out
