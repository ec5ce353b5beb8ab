"""``audition batch``: render many clips with one filter choice, in parallel, resumable, with one report."""

from __future__ import annotations

import json
import sys
import time

from audition.cli.filteropts import add_filter_options, add_source_options, filter_source
from audition.cli.noiseopts import add_noise_options
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


class BatchProgress:
    """One line on stderr for the whole batch: files done, audio hours done, rate; redrawn at most 10 times a second."""

    def __init__(self, total: int, stream=None, bar: bool = True, verbose: bool = False, width: int = 24):
        self.total, self.stream, self.bar, self.verbose, self.width = total, stream or sys.stderr, bar, verbose, width
        self.t0 = time.perf_counter()
        self.files = self.failed = 0
        self.audio = self.rendered_audio = 0.0
        self._last = 0.0
        self._shown = 0

    def line(self) -> str:
        frac = self.files / self.total if self.total else 1.0
        fill = int(round(frac * self.width))
        elapsed = max(time.perf_counter() - self.t0, 1e-9)
        rate = self.rendered_audio / elapsed
        failed = f", {self.failed} failed" if self.failed else ""
        return (f"batch [{'#' * fill}{'.' * (self.width - fill)}] {self.files}/{self.total} files{failed}, "
                f"{self.audio / 3600.0:.2f} h of audio, {rate:,.0f}x real time")

    def __call__(self, row: dict) -> None:
        self.files += 1
        self.failed += row["status"] == "failed"
        if row["status"] in ("done", "skipped"):
            self.audio += row["duration_seconds"] or 0.0
        if row["status"] == "done":
            self.rendered_audio += row["duration_seconds"] or 0.0
        if self.verbose:
            self._clear()
            self.stream.write(per_file_line(row) + "\n")
        now = time.perf_counter()
        if self.bar and (now - self._last >= 0.1 or self.files == self.total):
            self._last = now
            text = self.line()
            self.stream.write("\r" + text + " " * max(0, self._shown - len(text)))
            self._shown = len(text)
        self.stream.flush()

    def _clear(self):
        if self._shown:
            self.stream.write("\r" + " " * self._shown + "\r")
            self._shown = 0

    def close(self) -> None:
        self._clear()
        self.stream.flush()


def per_file_line(row: dict) -> str:
    what = row["status"]
    if what == "failed" or what == "not run":
        return f"{what:8} {row['input']}: {row['reason']}"
    dur = row.get("duration_seconds") or 0.0
    figures = ""
    for kind in ("measured", "predicted"):
        gain = row.get(f"{kind}_snr_gain_db_itu468")
        if isinstance(gain, (int, float)):
            figures = f", SNR gain {gain:+.1f} dB itu468 {kind}"
            break
    took = f" in {row['seconds']:.2f} s" if what == "done" and row.get("seconds") else ""
    return f"{what:8} {row['output']} ({dur:.1f} s of audio{figures}){took}"


def _clock(seconds: float) -> str:
    m, s = divmod(seconds, 60.0)
    h, m = divmod(int(m), 60)
    return f"{h}:{m:02d}:{s:04.1f}"


def format_summary(result, paths) -> str:
    s = result.summary
    c = s["counts"]
    thr = s["throughput_audio_seconds_per_second"]
    lines = [f"batch: {s['files']} clip(s): {c['done']} rendered, {c.get('no_filter', 0)} no filter, "
             f"{c['skipped']} already done, {c['failed']} failed"
             + (f", {c['not_run']} not run (interrupted)" if c["not_run"] else ""),
             f"  {_clock(s['rendered_audio_seconds'])} of audio rendered in {s['wall_seconds']:.2f} s"
             + (f" ({thr:,.1f}x real time)" if thr else "") + f" on {s['runner']}"]
    for r in result.rows:
        if r["status"] in ("failed", "no filter"):
            lines.append(f"  {r['status']}: {r['input']}: {r['reason']}")
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
        progress = BatchProgress(len(jobs), bar=show and sys.stderr.isatty(), verbose=args.verbose)
        try:
            result = batch.run_batch(jobs, workers=args.workers, client=client, on_row=progress)
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
        plot_batch(result, plot, weighting=getattr(args, "weighting", None) or "itu468",
                   title=f"audition batch: {' '.join(args.sources)} -> {args.outdir}",
                   budget_db=auto.budget_db if auto is not None else None)
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
