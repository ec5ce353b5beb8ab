"""Many files, one command: find the clips, describe each job, run them in parallel, resume, report.

The flow of a batch::

    sources ──► discover ──► plan_jobs ──► run_batch ──► rows ──► write_report
    (folders,    (inputs and   (one small     (worker processes     (CSV + JSON,
     globs,       their places  picklable      or a Dask cluster;    atomic)
     manifests)   under OUTDIR) Job each)      the main process
                                               gathers the rows)

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

Nothing here parses arguments or prints; :mod:`audition.cli.batch` does.
"""

from __future__ import annotations

import csv
import glob
import io
import json
import os
import re
import time
from dataclasses import dataclass, replace

from audition import __version__
from audition.errors import AuditionError, BadInputFile, BadParameter, OutputRefused

#: File endings taken as sound files when a folder is searched (libsndfile reads them all;
#: some, like Ogg Vorbis or MP3, are then refused per file because audition does not write them).
AUDIO_EXTENSIONS = (".wav", ".wave", ".bwf", ".rf64", ".w64", ".flac", ".aif", ".aiff", ".aifc", ".caf",
                    ".au", ".snd", ".ogg", ".oga", ".opus", ".mp3")
#: Columns a manifest CSV may have; ``path`` is required.
MANIFEST_COLUMNS = ("path", "preset", "plan", "noise_spans", "noise_clip")
#: Statuses of a row: rendered now, skipped (done by an earlier run), failed, or not run (interrupted).
STATUSES = ("done", "skipped", "failed", "not run")
#: The first columns of the report, in order; figures of the prediction and measurement follow.
ROW_FIELDS = ("input", "output", "status", "reason", "warnings", "filter", "duration_seconds", "rate_hz",
              "channels", "f0_hz", "q", "order", "alignment", "highpass_hz", "sections", "method", "peak_dbfs",
              "true_peak_dbtp", "clipped_samples", "seconds", "realtime_factor", "input_sha256")
_GLOB_MAGIC = re.compile(r"[*?[]")


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
    spec : audition.presets.FilterSpec or None
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
        The batch run this job belongs to (set by :func:`run_batch`), recorded in the
        sidecar as "batch_run". A job may be attempted twice: a worker process that
        dies takes the rows of the others with it (a local pool kills them all; Dask
        re-runs the tasks of a lost worker). So an attempt that finds an output
        finished by its own run keeps it (status done), and one that finds its own
        run's unfinished output (killed before the measurement) replaces it, as it
        replaces an output without a sidecar (killed between committing the two).
    threads : bool
        Run the job's reading and writing in helper threads (set by :func:`run_batch`:
        only when a worker process has two or more cores to itself). Without, a
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


@dataclass(frozen=True)
class Source:
    """One clip found in the sources: its input path and its place under the output folder."""

    input: str
    rel: str
    origin: str
    spec: object = None
    noise_spans: tuple | None = None
    noise_clip: str | None = None
    label: str = ""


# ---------------------------------------------------------------------------
# Finding the clips
# ---------------------------------------------------------------------------


def _inside(path: str, folder: str) -> bool:
    """True when ``path`` is ``folder`` or below it (real paths, links resolved)."""
    p, f = os.path.realpath(path), os.path.realpath(folder)
    return p == f or p.startswith(f.rstrip(os.sep) + os.sep)


def _is_audio_name(name: str) -> bool:
    return not name.startswith(".") and os.path.splitext(name)[1].lower() in AUDIO_EXTENSIONS


def _glob_base(pattern: str) -> str:
    """The leading folders of a glob pattern that hold no wildcard."""
    parts = pattern.split(os.sep)
    keep = []
    for part in parts[:-1]:
        if _GLOB_MAGIC.search(part):
            break
        keep.append(part)
    base = os.sep.join(keep)
    if pattern.startswith(os.sep) and not base:
        base = os.sep
    return base or "."


def _glob_matches(pattern: str, path: str) -> bool:
    """Would ``glob(pattern, recursive=True)`` find ``path`` (were it there)? Compared part by part."""
    import fnmatch

    pat = os.path.abspath(pattern).split(os.sep)
    parts = os.path.abspath(path).split(os.sep)

    def match(i, j):
        if i == len(pat):
            return j == len(parts)
        if pat[i] == "**":
            return any(match(i + 1, k) for k in range(j, len(parts) + 1))
        return j < len(parts) and fnmatch.fnmatchcase(parts[j], pat[i]) and match(i + 1, j + 1)

    return match(0, 0)


def discover(source: str, outdir: str) -> list[Source]:
    """The clips one source names.

    Parameters
    ----------
    source : str
        A folder (searched recursively for sound files, hidden ones left out),
        a manifest ``*.csv`` (one row per clip, see :func:`read_manifest`), a
        glob pattern (``**`` recursive), or one sound file.
    outdir : str
        The output folder: refused when a folder or recursive glob would find
        its outputs again on the next run.

    Returns
    -------
    list of Source, sorted by path

    Raises
    ------
    BadParameter
        A source that does not exist or finds nothing; an output folder inside it.
    """
    if os.path.isdir(source):
        if _inside(outdir, source):
            raise BadParameter(f"output folder {outdir!r} is inside the source folder {source!r}: its outputs "
                               "would be taken as clips on the next run; choose an output folder outside it")
        found = []
        for folder, dirs, files in os.walk(source):
            dirs[:] = sorted(d for d in dirs if not d.startswith("."))
            for name in sorted(files):
                if _is_audio_name(name):
                    p = os.path.join(folder, name)
                    found.append(Source(os.path.abspath(p), os.path.relpath(p, source), source))
        found.sort(key=lambda s: s.rel.split(os.sep))
        if not found:
            raise BadParameter(f"source folder {source!r}: no sound files in it "
                               f"(endings {', '.join(AUDIO_EXTENSIONS)})")
        return found
    if source.lower().endswith(".csv") and os.path.isfile(source):
        return read_manifest(source, outdir)
    if _GLOB_MAGIC.search(source):
        base = _glob_base(source)
        if _inside(outdir, base) and "**" in source:
            raise BadParameter(f"output folder {outdir!r} is inside {base!r}, which the pattern {source!r} "
                               "searches: its outputs would be taken as clips on the next run; "
                               "choose an output folder outside it")
        matches = sorted(p for p in glob.glob(source, recursive=True) if os.path.isfile(p))
        if not matches:
            raise BadParameter(f"source pattern {source!r}: matches no file")
        return [Source(os.path.abspath(p), os.path.relpath(p, base), source) for p in matches]
    if os.path.isfile(source):
        return [Source(os.path.abspath(source), os.path.basename(source), source)]
    raise BadParameter(f"source {source!r}: no such file or folder "
                       "(give a folder, a pattern, a manifest .csv or a file)")


def _parse_spans(text: str, where: str) -> tuple[tuple[float, float], ...]:
    spans = []
    for item in re.split(r"[;\s]+", text.strip()):
        a, sep, b = item.partition(":")
        try:
            if not sep:
                raise ValueError
            start, end = float(a), float(b)
        except ValueError:
            raise BadParameter(f"{where}: noise span {item!r}: write START:END in seconds, several separated "
                               "by ';' (e.g. 0.2:1.5;30:31)") from None
        if not 0.0 <= start < end:
            raise BadParameter(f"{where}: noise span {item!r}: need 0 <= START < END")
        spans.append((start, end))
    return tuple(spans)


def read_manifest(path: str, outdir: str = "") -> list[Source]:
    """The clips a manifest CSV lists.

    The first row names the columns: ``path`` (required; relative paths are
    taken from the manifest's folder) and optionally ``preset`` (a preset
    name), ``plan`` (a plan file), ``noise_spans`` (``START:END`` in seconds,
    several separated by ``;``) and ``noise_clip`` (a noise-only recording).
    An empty cell means "as the command line says". Outputs keep the clips'
    places relative to the manifest's folder (or, when some clip lies outside
    it, to the folder all clips share).

    Raises
    ------
    BadInputFile
        An unreadable manifest, a missing or unknown column, an empty path.
    BadParameter
        A row naming both a preset and a plan, a bad noise span.
    """
    from audition import presets

    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            text = fh.read()
    except (OSError, UnicodeDecodeError) as exc:
        raise BadInputFile(f"manifest {path!r}: cannot be read ({exc})") from None
    reader = csv.DictReader(io.StringIO(text))
    header = [h.strip() for h in (reader.fieldnames or [])]
    if "path" not in header:
        raise BadInputFile(f"manifest {path!r}: the first row must name the columns, one of them 'path' "
                           f"(allowed: {', '.join(MANIFEST_COLUMNS)})")
    unknown = [h for h in header if h not in MANIFEST_COLUMNS]
    if unknown:
        raise BadInputFile(f"manifest {path!r}: column {unknown[0]!r} is not known; allowed are "
                           f"{', '.join(MANIFEST_COLUMNS)}")
    reader.fieldnames = header
    here = os.path.dirname(os.path.abspath(path))
    rows = []
    for line, row in enumerate(reader, start=2):
        where = f"manifest {path!r} line {line}"
        cell = {k: (v or "").strip() for k, v in row.items() if k is not None}
        if not any(cell.values()):
            continue
        if not cell.get("path"):
            raise BadInputFile(f"{where}: the path is empty")
        clip = os.path.normpath(os.path.join(here, cell["path"]))
        spec = label = None
        if cell.get("preset") and cell.get("plan"):
            raise BadParameter(f"{where}: give a preset or a plan, not both")
        if cell.get("preset"):
            spec, label = presets.find(cell["preset"]), f"preset {cell['preset']}"
        elif cell.get("plan"):
            plan_path = os.path.normpath(os.path.join(here, cell["plan"]))
            spec, label = presets.load(plan_path), f"plan {cell['plan']}"
        spans = _parse_spans(cell["noise_spans"], where) if cell.get("noise_spans") else None
        noise_clip = os.path.normpath(os.path.join(here, cell["noise_clip"])) if cell.get("noise_clip") else None
        rows.append((clip, spec, label or "", spans, noise_clip))
    if not rows:
        raise BadInputFile(f"manifest {path!r}: lists no clips")
    base = here
    if not all(_inside(r[0], here) for r in rows):
        base = os.path.commonpath([os.path.dirname(r[0]) for r in rows])
    return [Source(clip, os.path.relpath(clip, base), path, spec, spans, noise_clip, label)
            for clip, spec, label, spans, noise_clip in rows]


# ---------------------------------------------------------------------------
# From clips to jobs, with every whole-batch check
# ---------------------------------------------------------------------------


def plan_jobs(sources, outdir, *, spec=None, auto=None, noise=None, filter_label: str = "", subtype=None,
              dither: bool = True, seed: int = 0, resume: bool = False, overwrite: bool = False) -> list[Job]:
    """The jobs of a batch, checked as a whole before anything is written.

    Parameters
    ----------
    sources : sequence of str
        Folders, globs, manifests or files (see :func:`discover`).
    outdir : str
        The output folder (it need not exist yet).
    spec, auto : FilterSpec or PlanSettings, one of them (or neither when every manifest row brings its own)
    noise : NoiseReference or None
        The noise reference for every clip; a manifest row's spans or clip replace its spans and clip.
    filter_label : str
        Where ``spec`` comes from, for the report.
    subtype, dither, seed, resume, overwrite :
        As in :class:`Job`.

    Raises
    ------
    BadParameter
        A clip with no filter; two clips mapping to one output; a clip inside
        the output folder; existing outputs without ``resume`` or ``overwrite``.
    """
    from audition import pipeline

    outdir_abs = os.path.abspath(outdir)
    found: list[Source] = []
    for s in sources:
        found.extend(discover(s, outdir))
    jobs = []
    by_output: dict[str, Source] = {}
    for i, src in enumerate(found):
        out = os.path.normpath(os.path.join(outdir_abs, src.rel))
        if not _inside(out, outdir_abs) or src.rel.startswith(".."):
            raise BadParameter(f"{src.input!r} (from {src.origin!r}) would be written outside the output folder "
                               f"{outdir!r}; list clips below the manifest's folder")
        if _inside(src.input, outdir_abs):
            raise BadParameter(f"{src.input!r} (from {src.origin!r}) is inside the output folder {outdir!r}: "
                               "outputs would be processed again; choose an output folder outside the sources")
        key = os.path.normcase(out)
        if key in by_output:
            other = by_output[key]
            if os.path.realpath(other.input) == os.path.realpath(src.input):
                raise BadParameter(f"{src.input!r} is named twice (by {other.origin!r} and {src.origin!r}), both "
                                   f"times mapping to {out!r}; name each clip once")
            raise BadParameter(f"{other.input!r} (from {other.origin!r}) and {src.input!r} (from {src.origin!r}) "
                               f"both map to {out!r}; give each clip its own place")
        by_output[key] = src
        job_spec, job_auto, label = (src.spec, None, src.label) if src.spec is not None else (spec, auto, filter_label)
        if job_spec is None and job_auto is None:
            raise BadParameter(f"{src.input!r}: no filter for it; give --preset, --plan, --auto or filter "
                               "options (or a preset/plan column in the manifest)")
        job_noise = noise
        if src.noise_spans is not None or src.noise_clip is not None:
            base = noise or pipeline.NoiseReference()
            job_noise = pipeline.NoiseReference(spans=src.noise_spans if src.noise_spans is not None else base.spans,
                                                clip=src.noise_clip if src.noise_clip is not None else base.clip,
                                                margin_db=base.margin_db, treble_from_hz=base.treble_from_hz)
        jobs.append(Job(i, src.input, out, os.path.relpath(out, outdir_abs), job_spec, job_auto, job_noise,
                        subtype, dither, seed, resume, overwrite, label or ("auto" if job_auto else "")))
    for s in sources:
        if _GLOB_MAGIC.search(s) and not os.path.isdir(s) and not s.lower().endswith(".csv"):
            caught = next((j.output for j in jobs if _glob_matches(s, j.output)), None)
            if caught is not None:
                raise BadParameter(f"output {caught!r} would be matched by the pattern {s!r}: outputs would be taken "
                                   "as clips on the next run; choose an output folder the pattern does not reach")
    if not (resume or overwrite):
        from audition import audiofile

        there = [p for j in jobs for p in (j.output, audiofile.sidecar_path(j.output)) if os.path.lexists(p)]
        if there:
            more = f" (and {len(there) - 1} more)" if len(there) > 1 else ""
            raise BadParameter(f"{there[0]!r} exists{more}; give --resume to skip the clips already done, "
                               "or --overwrite to render them all again")
    return jobs


# ---------------------------------------------------------------------------
# One job, in a worker
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


def _one_line(text: str) -> str:
    return " ".join(str(text).split()) or "no reason given"


def empty_row(job: Job) -> dict:
    """A row with this job's names and every figure left blank."""
    row = dict.fromkeys(ROW_FIELDS)
    row.update(input=job.input, output=job.output, status="not run", reason="", filter=job.filter_label)
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


def _read_sidecar(job: Job) -> dict | None:
    """The JSON object in this job's sidecar, when the output and its sidecar are both there."""
    from audition import audiofile

    side = audiofile.sidecar_path(job.output)
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
    from audition import audiofile

    rec = _read_sidecar(job) if rec is None else rec
    if rec is None or rec.get("settings") != job.settings():
        return None
    if job.noise is not None and not rec.get("measured"):
        return None  # killed between the render and its measurement: the job is not finished
    try:
        sha = audiofile.sha256_file(job.input)
    except OSError:
        return None
    return rec if rec.get("input", {}).get("sha256") == sha else None


def remove_stale_parts(output: str) -> list[str]:
    """Remove the temporary files a killed render of ``output`` (and of its sidecar) left beside it."""
    from audition import audiofile

    return audiofile.remove_leftover_parts(output) + audiofile.remove_leftover_parts(audiofile.sidecar_path(output))


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


# ---------------------------------------------------------------------------
# Many jobs: worker processes on this machine, or a Dask cluster
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


def _failed_row(job: Job, why: str) -> dict:
    row = empty_row(job)
    row.update(status="failed", reason=_one_line(why))
    return row


def run_batch(jobs, *, workers: int | None = None, client=None, on_row=None, mp_context=None) -> BatchResult:
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
        Run on that Dask cluster instead (see :func:`connect`); the paths must be the same for its workers.
    on_row : callable, optional
        ``on_row(row)`` in the main process as each job ends (in the order they end).
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
        interrupted = _run_locally(jobs, n_workers, gather, mp_context)
    wall = time.perf_counter() - t0
    ordered = []
    for job in jobs:
        row = rows.get(job.index)
        if row is None:
            row = empty_row(job)
            row["reason"] = "interrupted before it started"
        ordered.append(row)
    return BatchResult(ordered, summarise(ordered, wall, runner, n_workers, started), interrupted)


def audiofile_now() -> str:
    from audition import audiofile

    return audiofile.utc_now_iso()


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

        from audition import measure, plan, spectrum  # noqa: F401
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

    started_q = ctx.SimpleQueue()
    pool = ProcessPoolExecutor(min(n_workers, len(jobs)), mp_context=ctx, initializer=_init_worker,
                               initargs=(stop, started_q))
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
        for job in jobs:
            futures[pool.submit(run_job, job)] = job
        pending = set(futures)
        while pending:
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
# The report
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


def check_report_path(path, outdir: str | None = None) -> tuple[str, str]:
    """Refuse a report whose folder is missing (checked before the batch starts); OUTDIR itself is made later."""
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
    from audition import audiofile, report

    csv_path, json_path = report_paths(path)
    cols = columns(result.rows)
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=cols, lineterminator="\n", extrasaction="ignore")
    w.writeheader()
    for r in result.rows:
        w.writerow({k: _csv_cell(r.get(k)) for k in cols})
    report.write(csv_path, buf.getvalue())
    audiofile.write_sidecar(json_path, {"summary": result.summary, "interrupted": result.interrupted,
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
