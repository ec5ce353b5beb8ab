"""``audition batch``: render many clips with one filter choice, in parallel, resumable, with one report."""

from __future__ import annotations

import json
import math
import os
import sys
import time

from audition.cli.filteropts import add_filter_options, add_source_options, filter_source
from audition.cli.noiseopts import add_noise_options
from audition.cli.render import ProgressBar, hms
from audition.cli.values import SEED, number

HELP = "render a whole set of clips (folder, pattern or manifest) in parallel, with one report for the set"
#: Report name under OUTDIR when --report is not given (".csv" and ".json" are added).
DEFAULT_REPORT = "batch-report"


def add_parser(sub) -> None:
    p = sub.add_parser("batch", help=HELP, description=(HELP[0].upper() + HELP[1:]) + ". "
                       "Each output keeps its clip's place under OUTDIR, its container and encoding, and gets its "
                       "JSON sidecar. A clip that fails is reported with its reason and the others go on. "
                       "Exit status: 0 all rendered (or already done), 1 some failed, 2 bad arguments "
                       "(nothing written), 130 interrupted (run again with --resume).")
    p.add_argument("sources", nargs="+", metavar="SOURCE",
                   help="a folder (searched recursively for sound files), a quoted pattern such as 'tapes/**/*.wav', "
                        "a manifest .csv (columns path and optionally preset, plan, noise_spans, noise_clip) "
                        "or a sound file")
    p.add_argument("outdir", metavar="OUTDIR", help="where the outputs go (made if missing; must not be inside a "
                   "source folder)")
    add_filter_options(p)
    add_source_options(p, auto_help="plan each clip by itself (planning options below)",
                       title="where the filter comes from (a manifest row's preset or plan overrides it for its clip)")
    add_noise_options(p, auto=True)
    out = p.add_argument_group("output")
    out.add_argument("--subtype", metavar="NAME", help="output encoding for every clip (default: each input's)")
    out.add_argument("--no-dither", dest="dither", action="store_false",
                     help="round integer outputs without TPDF dither (not advised)")
    out.add_argument("--seed", type=SEED, default=0, metavar="N", help="seed of the dither (default 0)")
    out.add_argument("--resume", action="store_true",
                     help="skip clips whose output exists with a sidecar of the same input bytes (SHA-256) and "
                          "settings; render the others again, replacing what does not match")
    out.add_argument("--overwrite", action="store_true", help="render every clip, replacing existing outputs")
    out.add_argument("--accept-truncated", action="store_true",
                     help="render clips whose header declares more frames than the file holds (what they hold; "
                          "each sidecar records both counts); without it such a clip fails")
    from audition.cli.render import add_archive_options

    add_archive_options(out)
    out.add_argument("--no-figures", dest="figures", action="store_false",
                     help="render only: no survey, prediction or measurement per clip (faster; the report then "
                          "has no SNR or treble figures)")
    run_g = p.add_argument_group("running")
    run_g.add_argument("--workers", type=int, metavar="N",
                       help="cores to use on this machine: one worker process per core, each rendering one clip "
                            "at a time (default: all cores; --workers 1 leaves the others free)")
    run_g.add_argument("--cluster", metavar="ADDRESS",
                       help="run on an existing Dask distributed cluster (e.g. tcp://10.0.0.5:8786); every worker "
                            "must see SOURCES and OUTDIR at the same paths (pip install 'audition[cluster]')")
    run_g.add_argument("--cluster-timeout", type=number(0.0, 86400.0, lo_open=True, unit="s"), default=10.0,
                       metavar="SECONDS",
                       help="how long to wait for the cluster's scheduler (default 10)")
    rep = p.add_argument_group("report")
    rep.add_argument("--report", metavar="FILE", help=f"report path: FILE.csv and FILE.json (default "
                     f"OUTDIR/{DEFAULT_REPORT}.csv and .json)")
    rep.add_argument("--plot", metavar="FILE.png", help="draw the batch: SNR gain against treble loss per clip "
                     "(predicted and measured), the outputs' true peaks, the counts and the failures")
    rep.add_argument("--json", action="store_true", help="print the JSON report instead of the summary")
    rep.add_argument("--verbose", action="store_true", help="one line per clip as it ends")
    rep.add_argument("--quiet", action="store_true", help="no progress bar and no summary")
    p.set_defaults(run=run)


def filter_choice(args):
    """``(spec, auto, label)`` from the options: exactly one way of choosing the filter, or none."""
    spec, auto = filter_source(args)
    if auto is not None:
        return None, auto, "auto"
    if spec is None:
        return None, None, ""
    label = f"preset {args.preset}" if args.preset else f"plan {args.plan}" if args.plan else "options"
    return spec, None, label


def noise_reference(args, auto):
    """The noise reference for every clip; None with --no-figures (no survey, no prediction, no measurement)."""
    from audition.cli.noiseopts import gave_noise, noise_from_args
    from audition.errors import BadParameter

    if args.figures:
        return noise_from_args(args)
    if auto is not None:
        raise BadParameter("--auto plans from a survey of each clip: leave out --no-figures")
    if gave_noise(args):
        raise BadParameter("--no-figures leaves out the survey: leave out the noise-reference options too")
    return None


#: Widest a --verbose line may be.
VERBOSE_COLUMNS = 100


def clip_durations(jobs) -> dict[int, float]:
    """Each job's length in seconds from its file's header (read here, before the workers start).

    A file whose header cannot be read (it will fail in its worker) counts as the mean of the others.
    """
    import soundfile

    def seconds(path):
        try:
            inf = soundfile.info(path)
        except Exception:  # noqa: BLE001 - any unreadable header: its worker gives the reason
            return None
        return inf.frames / inf.samplerate if inf.samplerate else 0.0

    known = {job.index: s for job in jobs if (s := seconds(job.input)) is not None}
    mean = sum(known.values()) / len(known) if known else 1.0
    return {job.index: known.get(job.index, mean) for job in jobs}


class BatchProgress(ProgressBar):
    """One line on stderr for the whole batch, redrawn at most ten times a second (:class:`ProgressBar`'s).

    It counts audio done across the clips: each running job's fraction (its survey, plan,
    render and measurement, told by its worker through ``run_batch(on_progress=...)``)
    times its length, plus the clips that have ended. The time left is the audio still to
    do at the pace of this run's own work (clips skipped by --resume do not speed it up).
    Called with a row (``on_row``) it counts the clip and, with ``verbose``, writes its line.
    """

    def __init__(self, jobs, stream=None, bar: bool = True, verbose: bool = False, durations=None,
                 clock=time.perf_counter, columns: int | None = None):
        super().__init__("batch", stream)
        self.bar, self.verbose, self.clock = bar, verbose, clock
        self.t0 = clock()
        self.total = len(jobs)
        self.durations = dict(durations if durations is not None else clip_durations(jobs) if bar else {})
        self.total_audio = sum(self.durations.values())
        self.fraction: dict[int, float] = {}
        self.files = self.failed = 0
        self.skipped_audio = 0.0
        self.columns = columns
        if self.bar:
            self.draw(force=True)

    # -- what the workers tell -------------------------------------------------------------

    def progress(self, fractions: dict) -> None:
        """``run_batch``'s ``on_progress``: fractions of the running (or just ended) jobs."""
        for index, frac in fractions.items():
            if frac > self.fraction.get(index, 0.0):
                self.fraction[index] = min(1.0, float(frac))
        if self.bar:
            self.draw()

    def __call__(self, row: dict) -> None:
        self.files += row["status"] != "not run"  # an interrupted clip has not ended
        self.failed += row["status"] == "failed"
        if row["status"] == "skipped":
            self.skipped_audio += row.get("duration_seconds") or 0.0
        if self.verbose:
            if self._shown:
                self.stream.write("\r" + " " * self._shown + "\r")
                self._shown = 0
            self.stream.write(per_file_line(row) + "\n")
        if self.bar:
            self.draw(force=self.verbose or self.files == self.total)
        self.stream.flush()

    # -- the line --------------------------------------------------------------------------

    def audio_done(self) -> float:
        return sum(self.durations.get(i, 0.0) * f for i, f in self.fraction.items())

    def line(self) -> str:
        if self.total_audio > 0:
            done = self.audio_done()
            frac = done / self.total_audio
        else:
            done, frac = 0.0, (self.files / self.total if self.total else 1.0)
        if self.files < self.total:
            frac = min(frac, 0.999)  # 100.0 % only when every clip has ended
        elapsed = self.clock() - self.t0
        worked = done - self.skipped_audio
        left = ""
        if self.files < self.total and frac > 0.02 and elapsed > 1.0 and worked > 0:
            left = f"{hms((self.total_audio - done) * elapsed / worked)} left"
        # the counts keep their widths, and room is kept for the time left: the bar does not jump about
        n = len(str(self.total))
        clips = f"{self.files:{n}d}/{self.total} clips" + (f", {self.failed} failed" if self.failed else "")
        whole = hms(self.total_audio)
        audio = f"{hms(done):>{len(whole)}}/{whole} audio" if self.total_audio > 0 else ""
        pct = f"{math.floor(frac * 1000.0) / 10.0:5.1f} %"
        cols = self._columns() - 1  # never the last column: no wrap on any terminal
        for parts in ((clips, audio), (clips,), (f"{self.files}/{self.total}",)):
            tail = "  ".join((pct,) + parts)
            width = min(24, cols - len("batch [] ") - len(tail) - len("  0:00:00 left"))
            if width >= 8:
                fill = round(frac * width)
                return (f"batch [{'#' * fill}{'.' * (width - fill)}] {tail}" + (f"  {left}" if left else ""))[:cols]
        return f"batch {tail}  {left}"[:cols]

    def draw(self, force: bool = False) -> None:
        now = self.clock()
        if not force and now - self._last < 0.1:
            return
        self._last = now
        self._draw(self.line())

    def _columns(self) -> int:
        if self.columns is not None:
            return self.columns
        try:
            cols = os.get_terminal_size(self.stream.fileno()).columns
        except (OSError, ValueError, AttributeError):
            return 80
        return min(80, cols) if cols > 0 else 80  # a terminal that tells no size (0) is taken as 80 wide

    def close(self) -> None:
        if self._shown:
            super().close()


def shorten_left(text: str, width: int) -> str:
    """``text`` in at most ``width`` columns: its start replaced by "..." when too long (a path keeps its end)."""
    return text if len(text) <= width else "..." + text[len(text) - max(0, width - 3):]


def shorten_right(text: str, width: int) -> str:
    return text if len(text) <= width else text[:max(0, width - 3)] + "..."


def _clip_name(path: str) -> str:
    """A clip's path as typed from here when it is below the current folder, else in full."""
    try:
        rel = os.path.relpath(path)
    except ValueError:
        return path
    return rel if not rel.startswith("..") else path


def _shape(row: dict) -> str:
    """The filter's shape from a row: "order 4 Butterworth", "order 2, Q 0.707", "order 3, 2 sections"."""
    order, alignment = row.get("order"), row.get("alignment")
    if alignment:
        return f"order {order} {str(alignment).replace('-', '–').title()}"
    if order == 1:
        return "order 1"
    if order == 2 and isinstance(row.get("q"), (int, float)):
        return f"order 2, Q {row['q']:.3f}"
    return f"order {order}, {row.get('sections')} sections" if order else ""


def without_path(reason: str, path: str) -> str:
    """A reason without the clip's own path in front (the line already names the clip)."""
    for head in (f"{path!r}: ", f"{path}: "):
        if reason.startswith(head):
            return reason[len(head):]
    return reason


def per_file_line(row: dict, columns: int = VERBOSE_COLUMNS) -> str:
    """A clip's --verbose line: status, clip, and the filter (f0 and shape) or the reason; at most ``columns``."""
    what = row["status"]
    name = _clip_name(row["input"])
    head = f"{what:9} "
    if what in ("failed", "not run", "no filter"):
        reason = without_path(row.get("reason") or "", row["input"])
        room = columns - len(head) - 2
        name = shorten_left(name, max(20, min(len(name), room - min(len(reason), 40))))
        return head + name + ": " + shorten_right(reason, room - len(name))
    parts = []  # most telling first: the filter, the SNR gain, the length and the time it took
    if isinstance(row.get("f0_hz"), (int, float)):
        parts.append(", ".join(p for p in (f"f0 {row['f0_hz']:,.0f} Hz", _shape(row)) if p))
    for kind in ("measured", "predicted"):
        gain = row.get(f"{kind}_snr_gain_db_itu468")
        if isinstance(gain, (int, float)):
            parts.append(f"SNR {gain:+.1f} dB (ITU-R 468, {kind})")
            break
    if row.get("duration_seconds"):
        took = f" in {hms(row['seconds'])}" if what == "done" and row.get("seconds") is not None else ""
        parts.append(f"{hms(row['duration_seconds'])} of audio{took}")
    # drop the least telling parts before cutting the clip's name below 30 columns
    for n in range(len(parts), -1, -1):
        details = "; ".join(parts[:n])
        room = columns - len(head) - (2 + len(details) if details else 0)
        if room >= min(len(name), 30) or n <= 1:
            break
    name = shorten_left(name, max(20, room))
    line = head + name + (": " + details if details else "")
    return shorten_right(line, columns)


def _clock(seconds: float) -> str:
    """A duration as h:mm:ss, rounded to the second."""
    s = round(max(0.0, seconds))
    return f"{s // 3600}:{s // 60 % 60:02d}:{s % 60:02d}"


def format_summary(result, paths) -> str:
    s = result.summary
    c = s["counts"]
    thr = s["throughput_audio_seconds_per_second"]
    lines = [f"batch: {s['files']} clip(s): {c['done']} rendered, {c.get('no_filter', 0)} no filter, "
             f"{c['skipped']} already done, {c['failed']} failed"
             + (f", {c['not_run']} not run (interrupted)" if c["not_run"] else ""),
             f"  {_clock(s['rendered_audio_seconds'])} of audio rendered in {_clock(s['wall_seconds'])}"
             + (f" ({thr:,.1f}x real time)" if thr else "") + f" on {s['runner']}"]
    for r in result.rows:
        if r["status"] in ("failed", "no filter"):
            lines.append(f"  {r['status']}: {r['input']}: {without_path(r['reason'] or '', r['input'])}")
    lines.append(f"  report: {paths[0]} and {paths[1]}")
    if result.interrupted:
        lines.append("  interrupted: run the same command with --resume to finish")
    return "\n".join(lines)


def _check_side_outputs(args, jobs, report_path):
    """Refuse a report or picture that is one of the batch's inputs, not a plain file, or exists.

    An existing one is replaced with --overwrite or --resume (a resumed batch rewrites its report).
    Returns the --plot :class:`~audition.io.guard.Target` (None without --plot).
    """
    import os

    from audition.batch.report import report_paths
    from audition.errors import OutputRefused
    from audition.io import guard

    inputs = []
    for job in jobs:
        noise = getattr(job, "noise", None)
        inputs += [job.input, getattr(noise, "clip", None), getattr(getattr(job, "spec", None), "source", None) or None]
    inputs = list(dict.fromkeys(p for p in inputs if p))
    replace = bool(args.overwrite or args.resume)
    csv_path, json_path = report_paths(report_path)
    outdir_made = os.path.isdir(args.outdir)
    for path, what in ((csv_path, "report"), (json_path, "report"), (args.plot, "--plot")):
        if path is None or not (outdir_made or os.path.isdir(os.path.dirname(os.path.abspath(path)))):
            continue  # below an OUTDIR not made yet: nothing there to collide with
        guard.check_output(path, inputs=inputs, overwrite=replace, what=what)
    guard.check_distinct([csv_path, json_path, args.plot])
    outputs = {os.path.realpath(job.output) for job in jobs}
    for path in (csv_path, json_path, args.plot):
        if path is not None and os.path.realpath(path) in outputs:
            raise OutputRefused(f"{path!r}: is also a clip's output; name the report and the picture differently")
    if args.plot is None:
        return None
    return guard.Target(args.plot, inputs=inputs, overwrite=replace, what="--plot", check=False)


def run(args) -> int:
    import os

    from audition import batch
    from audition.errors import BadParameter, OutputRefused

    if args.workers is not None and args.workers < 1:
        raise BadParameter(f"--workers {args.workers}: need at least 1")
    if args.cluster and args.workers is not None:
        raise BadParameter("--workers counts processes on this machine; with --cluster the cluster's workers run")
    if args.resume and args.overwrite:
        raise BadParameter("--resume and --overwrite: choose one (skip what is done, or render everything again)")
    if os.path.exists(args.outdir) and not os.path.isdir(args.outdir):
        raise BadParameter(f"OUTDIR {args.outdir!r}: exists and is not a folder")
    spec, auto, label = filter_choice(args)
    jobs = batch.plan_jobs(args.sources, args.outdir, spec=spec, auto=auto, noise=noise_reference(args, auto),
                           filter_label=label, subtype=args.subtype, dither=args.dither, seed=args.seed,
                           resume=args.resume, overwrite=args.overwrite)
    from dataclasses import replace

    # archive metadata (issue 15): the container, the strictness and the command line, for every clip
    jobs = [replace(j, container=args.container, strict_metadata=args.strict_metadata,
                    command_line=tuple(args.command_line)) for j in jobs]
    if args.accept_truncated:
        jobs = [replace(j, accept_truncated=True) for j in jobs]
    report_path = args.report or os.path.join(args.outdir, DEFAULT_REPORT)
    batch.check_report_path(report_path, args.outdir)  # the default one too: OUTDIR may be read-only
    if args.plot:
        batch.check_plot_path(args.plot, args.outdir)
    plot = _check_side_outputs(args, jobs, report_path)
    client = batch.connect(args.cluster, args.cluster_timeout) if args.cluster else None
    try:
        # every check has passed: from here on things are written
        try:
            os.makedirs(args.outdir, exist_ok=True)
        except OSError as exc:
            raise OutputRefused(f"OUTDIR {args.outdir!r}: cannot be made ({exc.strerror or exc})") from None
        show = not args.quiet and not args.json
        progress = BatchProgress(jobs, bar=show and sys.stderr.isatty(), verbose=args.verbose)
        try:
            result = batch.run_batch(jobs, workers=args.workers, client=client, on_row=progress,
                                     on_progress=progress.progress if progress.bar else None)
        finally:
            progress.close()
    finally:
        if client is not None:
            client.close()
    os.makedirs(os.path.dirname(os.path.abspath(report_path)), exist_ok=True)  # --report below OUTDIR
    paths = batch.write_report(report_path, result)
    if args.plot:
        from audition.plots.batch import plot_batch

        os.makedirs(os.path.dirname(os.path.abspath(args.plot)), exist_ok=True)  # --plot below OUTDIR
        # judged as the clips were planned: the hiss heard, unless --auto chose by weighted SNR
        plot_batch(result, plot, weighting=getattr(args, "weighting", None) or "itu468",
                   title=f"audition batch: {' '.join(args.sources)} -> {args.outdir}",
                   budget_db=auto.budget_db if auto is not None else None,
                   measure="snr" if auto is not None and auto.objective == "snr" else "heard")
    if args.json:
        with open(paths[1], encoding="utf-8") as fh:
            print(json.dumps(json.load(fh), indent=2))
    elif not args.quiet:
        print(format_summary(result, paths))
    for row in result.rows:
        if row.get("metadata_dropped"):
            print(f"audition batch: {row['output']}: dropped {row['metadata_dropped']}", file=sys.stderr)
    if result.interrupted:
        return 130
    if result.failed:
        print(f"audition batch: {result.failed} of {len(jobs)} clip(s) failed (reasons in the report)",
              file=sys.stderr)
        return 1
    return 0
