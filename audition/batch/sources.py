"""Finding the clips, and every check that can refuse the whole batch before anything is written.

A source is a folder (searched recursively), a glob pattern, a manifest CSV or
one sound file (:func:`discover`, :func:`read_manifest`); each clip found is a
:class:`Source` with its place under the output folder. :func:`plan_jobs`
turns the clips into :class:`~audition.batch.jobs.Job` s and refuses the batch
as a whole (an output folder inside a source, two clips mapping to one output,
outputs a pattern would find again, outputs already there) before anything is
written.
"""

from __future__ import annotations

import csv
import glob
import io
import os
import re
from dataclasses import dataclass

from audition.batch.jobs import Job
from audition.errors import BadInputFile, BadParameter

#: File endings taken as sound files when a folder is searched (libsndfile reads them all;
#: some, like Ogg Vorbis or MP3, are then refused per file because audition does not write them).
AUDIO_EXTENSIONS = (".wav", ".wave", ".bwf", ".rf64", ".w64", ".flac", ".aif", ".aiff", ".aifc", ".caf",
                    ".au", ".snd", ".ogg", ".oga", ".opus", ".mp3")
#: Columns a manifest CSV may have; ``path`` is required.
MANIFEST_COLUMNS = ("path", "preset", "plan", "noise_spans", "noise_clip")
_GLOB_MAGIC = re.compile(r"[*?[]")


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
    from audition.plan import presets

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
        from audition.io import sidecar

        there = [p for j in jobs for p in (j.output, sidecar.sidecar_path(j.output)) if os.path.lexists(p)]
        if there:
            more = f" (and {len(there) - 1} more)" if len(there) > 1 else ""
            raise BadParameter(f"{there[0]!r} exists{more}; give --resume to skip the clips already done, "
                               "or --overwrite to render them all again")
    return jobs
