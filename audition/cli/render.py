"""``audition render``: filter a transfer into a new file, streaming, with an archive sidecar."""

from __future__ import annotations

import json
import math
import sys
import time

from audition.cli.filteropts import add_filter_options, add_source_options, filter_source, no_filter
from audition.cli.noiseopts import add_noise_options
from audition.cli.values import SEED
from audition.cli.recordopts import add_record_options, record_provenance

HELP = "filter a sound file into a new one (the original is never touched), with a JSON sidecar record"
#: Kept equal to audition.io.formats.OUTPUT_SUBTYPES (tests check it) so the help needs no soundfile import.
SUBTYPES = ("PCM_S8", "PCM_U8", "PCM_16", "PCM_24", "PCM_32", "FLOAT", "DOUBLE")
#: Files shorter than this render without a progress bar (it would only flicker).
PROGRESS_MIN_SECONDS = 5.0


def add_parser(sub) -> None:
    p = sub.add_parser("render", help=HELP, description=(HELP[0].upper() + HELP[1:]) + ". The output keeps the input's "
                       "rate, channels, container and subtype; integer outputs get TPDF dither at their word "
                       "length. It is written to a temporary file beside OUT and renamed into place only "
                       "when complete.")
    p.add_argument("input", metavar="IN", help="the sound file to filter (only read)")
    p.add_argument("output", metavar="OUT", help="the new file (same container as IN); OUT.json is written beside it")
    add_filter_options(p)
    add_source_options(p, auto_help="survey the input, plan the filter and render it in one go (the plan goes "
                       "into the sidecar); --method and --highpass then apply to every candidate")
    add_noise_options(p, auto=True)
    out = p.add_argument_group("output")
    out.add_argument("--subtype", metavar="NAME", help=f"output encoding, one of {', '.join(SUBTYPES)} "
                     "(default: the input's)")
    out.add_argument("--no-dither", dest="dither", action="store_false",
                     help="round integer outputs without TPDF dither (not advised: low-level distortion)")
    out.add_argument("--seed", type=SEED, default=0, metavar="N", help="seed of the dither (default 0): "
                     "the same inputs and seed give the same bytes")
    out.add_argument("--overwrite", action="store_true", help="replace an existing OUT and OUT.json (never IN)")
    out.add_argument("--accept-truncated", action="store_true",
                     help="render an input whose header declares more frames than the file holds (what it holds; "
                          "the sidecar records both counts); without it such a file is refused")
    add_archive_options(out)
    out.add_argument("--report", metavar="FILE.html", help="also write one self-contained HTML page (pictures inline, "
                     "no network): survey, the filter and why, trade-off, predicted against measured, provenance; "
                     "surveys with the automatic noise reference unless noise options are given")
    out.add_argument("--json", action="store_true", help="print one JSON object instead of the summary")
    out.add_argument("--quiet", action="store_true", help="no progress bar and no summary (warnings still shown)")
    add_record_options(p)
    p.set_defaults(run=run)


class ProgressBar:
    """A one-line bar on stderr, redrawn at most ten times a second, with the time left.

    A job of several phases (survey, plan, render, measure, report) calls :meth:`phase`
    as each starts: the bar then reads "[2/5] rendering" and starts again from zero.
    """

    def __init__(self, label: str, stream=None, width: int = 30):
        self.label, self.stream, self.width = label, stream or sys.stderr, width
        self.t0 = time.perf_counter()
        self._last = 0.0
        self._shown = 0

    def phase(self, name: str, index: int, count: int) -> None:
        self.label = f"[{index}/{count}] {name}"
        self.t0 = time.perf_counter()
        self._last = 0.0
        self._draw(f"{self.label} ...")

    def __call__(self, done: int, total: int) -> None:
        now = time.perf_counter()
        if now - self._last < 0.1 and done < total:
            return
        self._last = now
        frac = min(1.0, done / total) if total else 1.0
        fill = int(round(frac * self.width))
        left = ""
        if 0.02 < frac < 1.0 and now - self.t0 > 1.0:
            left = f"  {hms((now - self.t0) * (1.0 - frac) / frac)} left"
        self._draw(f"{self.label} [{'#' * fill}{'.' * (self.width - fill)}] {frac:6.1%}{left}")

    def _draw(self, text: str) -> None:
        pad = max(0, self._shown - len(text))
        self.stream.write("\r" + text + " " * pad)
        self.stream.flush()
        self._shown = len(text)

    def close(self) -> None:
        self.stream.write("\r" + " " * self._shown + "\r")
        self.stream.flush()
        self._shown = 0


def hms(seconds: float) -> str:
    """A duration as h:mm:ss (or m:ss under an hour), rounded to the second."""
    s = int(round(max(0.0, seconds)))
    h, rem = divmod(s, 3600)
    m, s = divmod(rem, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


def _clock(seconds: float) -> str:
    m, s = divmod(seconds, 60.0)
    h, m = divmod(int(m), 60)
    return f"{h}:{m:02d}:{s:06.3f}" if h else f"{m}:{s:06.3f}"


def format_summary(j: dict) -> str:
    if j["dither"]["kind"] == "tpdf":
        dither = f"TPDF +-1 LSB at {j['dither']['bits']} bits, seed {j['dither']['seed']}"
    elif j["dither"]["bits"]:
        dither = f"none (turned off), rounded to {j['dither']['bits']} bits"
    else:
        dither = "none (float output)"
    peak = "digital silence" if j["peak_dbfs"] is None else f"{j['peak_dbfs']:+.2f} dBFS"
    tp = j.get("true_peak_dbtp")
    true_peak = "digital silence" if tp is None else f"{tp:+.2f} dBTP"
    return "\n".join([
        f"rendered {j['input']} -> {j['output']}",
        f"  {j['format']} {j['subtype']}, {j['rate']:g} Hz, {j['channels']} channel(s), "
        f"{j['frames']:,} frames ({_clock(j['duration_seconds'])})",
        f"  filter: {len(j['sections'])} section(s) by the {j['method']} method"
        + (f", f0 {j['f0_hz']:,.1f} Hz" if j["f0_hz"] else "") + (f", Q {j['q']:.4g}" if j["q"] else ""),
        f"  dither: {dither}",
        f"  sample peak of the output: {peak} (full scale = 0 dBFS), {j['clipped_samples']:,} sample(s) "
        "beyond full scale",
        f"  true peak of the output:   {true_peak} (ITU-R BS.1770-4 Annex 2, 4x oversampled; full scale = 0 dBTP)",
        f"  took {j['seconds']:.2f} s ({j['realtime_factor']:,.0f}x real time)",
        f"  record: {j['sidecar']}" if j["sidecar"] else "  record: none",
    ] + _figures_lines(j))


def _figures_lines(j: dict) -> list[str]:
    lines = []
    if j.get("plan") and j["plan"].get("choice"):
        lines += ["", f"  f0 chosen by --auto: {j['plan']['choice']['label']}"]
    if j.get("plan") and j["plan"].get("explanation"):
        from audition.cli.plan import wrap

        lines += ["", wrap("why: " + j["plan"]["explanation"])]
    pr, me = j.get("predicted"), j.get("measured")
    if pr and me:
        lines += ["", f"  {'':<42}{'predicted':>11}{'measured':>11}"]
        names = {"flat": "unweighted", "a": "A-weighted", "itu468": "ITU-R 468 weighted (RMS)"}
        for key, what in (("snr_gain_db", "SNR gain"), ("noise_reduction_db", "noise reduction")):
            for w, label in names.items():
                a, b = pr.get(key, {}).get(w), me.get(key, {}).get(w)
                lines.append(f"  {what + ', ' + label:<42}{_db(a):>11}{_db(b):>11}")
        lines.append(f"  {'treble loss (largest cut where heard)':<42}{_db(pr['treble_loss_db']):>11}"
                     f"{_db(me.get('treble_loss_db')):>11}")
        hp, hm = pr.get("hiss_heard") or {}, me.get("hiss_heard") or {}
        lines.append(f"  {'hiss heard after the filter (sone)':<42}{_sone(hp.get('after_sone')):>11}"
                     f"{_sone(hm.get('after_sone')):>11}")
    if j.get("report"):
        lines += ["", f"  report: {j['report']}"]
    return lines


def _sone(v) -> str:
    return "-" if v is None else f"{v:.2f}"


def _db(v) -> str:
    return "-" if v is None else f"{v:.2f} dB"


def add_archive_options(group) -> None:
    """``--container`` and ``--strict-metadata`` (render and batch): what becomes of an archive file's chunks."""
    import argparse

    group.add_argument("--container", choices=("wav", "rf64", "w64"),
                       help="container of the output for WAV inputs (default: the input's; RF64 when a WAV output "
                            "would pass 4 GiB); w64 carries none of the input's chunks")
    group.add_argument("--strict-metadata", action=argparse.BooleanOptionalAction, default=None,
                       help="refuse to write when any chunk or tag of the input would be dropped (default: on for "
                            "Broadcast Wave and RF64/BW64 inputs, off for others)")


def print_dropped(prog: str, output, metadata) -> None:
    """One line on stderr for each chunk of the input the output does not carry."""
    for m in metadata or ():
        if m.get("fate") == "dropped":
            print(f"{prog}: {output}: {m['chunk']!r} dropped: {m['reason']}", file=sys.stderr)


def run(args) -> int:
    from audition.cli.noiseopts import gave_noise, noise_from_args
    from audition.io import reader
    from audition.pipeline import render_job

    with reader.accept_truncated(*([args.input] if args.accept_truncated else [])):
        info = reader.info(args.input)
    spec, auto = filter_source(args)
    if spec is None and auto is None:
        raise no_filter(auto=True)
    provenance = record_provenance(args)  # before anything is written: a bad --abx-log fails early
    noise = noise_from_args(args) if (gave_noise(args) or auto is not None or args.report) else None
    bar = None
    if not args.quiet and not args.json and sys.stderr.isatty() and info.seconds > PROGRESS_MIN_SECONDS:
        bar = ProgressBar("rendering")
    try:
        j = render_job(args.input, args.output, spec=spec, auto=auto, noise=noise, subtype=args.subtype,
                       dither=args.dither, seed=args.seed, overwrite=args.overwrite, progress=bar,
                       report_path=args.report, provenance={**(provenance or {}), "command_line": args.command_line},
                       container=args.container, strict_metadata=args.strict_metadata,
                       accept_truncated=args.accept_truncated)
    finally:
        if bar is not None:
            bar.close()
    for msg in j.get("warnings") or ():
        print(f"audition render: warning: {msg}", file=sys.stderr)
    print_dropped("audition render", args.output, j.get("metadata"))
    if j.get("output") is None:
        # --auto answered "no filter": nothing rendered, one clear line (and the report, if asked)
        if args.json:
            print(json.dumps(j, indent=2))
        else:
            print(f"{args.input}: no filter: {j['no_filter_reason']}; nothing written to {args.output}"
                  + (f" (report: {j['report']})" if j.get("report") else ""))
        return 0
    tp = j.get("true_peak_dbtp")
    if j["clipped_samples"]:
        trim = math.ceil(j["trim_db"] * 10.0 + 1e-9) / 10.0
        float_out = j["subtype"] in ("FLOAT", "DOUBLE")
        what = "kept beyond full scale (float output)" if float_out else "clipped at full scale"
        peak = "" if tp is None else f", true peak of the output {tp:+.2f} dBTP"
        print(f"audition render: warning: {j['clipped_samples']:,} sample(s) {what}{peak}; lower the level by "
              f"{trim:.1f} dB (e.g. --gain-db {-trim:.1f}) and render again", file=sys.stderr)
    elif tp is not None and tp > 0.0:
        trim = math.ceil(tp * 10.0 - 1e-9) / 10.0
        print(f"audition render: warning: no sample beyond full scale, but the true peak is {tp:+.2f} dBTP "
              f"(inter-sample overs a converter may clip); lower the level by {trim:.1f} dB "
              f"(e.g. --gain-db {-trim:.1f}) if that matters", file=sys.stderr)
    if args.json:
        print(json.dumps(j, indent=2))
    elif not args.quiet:
        print(format_summary(j))
    return 0
