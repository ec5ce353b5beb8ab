"""``audition render``: filter a transfer into a new file, streaming, with an archive sidecar."""

from __future__ import annotations

import json
import math
import sys
import time

from audition.cli.filteropts import add_filter_options

HELP = "filter a sound file into a new one (the original is never touched), with a JSON sidecar record"
#: Kept equal to audition.audiofile.OUTPUT_SUBTYPES (tests check it) so the help needs no soundfile import.
SUBTYPES = ("PCM_S8", "PCM_U8", "PCM_16", "PCM_24", "PCM_32", "FLOAT", "DOUBLE")
#: Files shorter than this render without a progress bar (it would only flicker).
PROGRESS_MIN_SECONDS = 5.0


def add_parser(sub) -> None:
    p = sub.add_parser("render", help=HELP, description=HELP.capitalize() + ". The output keeps the input's "
                       "rate, channels, container and subtype; integer outputs get TPDF dither at their word "
                       "length. It is written to a temporary file beside OUT and renamed into place only "
                       "when complete.")
    p.add_argument("input", metavar="IN", help="the sound file to filter (only read)")
    p.add_argument("output", metavar="OUT", help="the new file (same container as IN); OUT.json is written beside it")
    add_filter_options(p)
    out = p.add_argument_group("output")
    out.add_argument("--subtype", metavar="NAME", help=f"output encoding, one of {', '.join(SUBTYPES)} "
                     "(default: the input's)")
    out.add_argument("--no-dither", dest="dither", action="store_false",
                     help="round integer outputs without TPDF dither (not advised: low-level distortion)")
    out.add_argument("--seed", type=int, default=0, metavar="N", help="seed of the dither (default 0): "
                     "the same inputs and seed give the same bytes")
    out.add_argument("--overwrite", action="store_true", help="replace an existing OUT and OUT.json (never IN)")
    out.add_argument("--json", action="store_true", help="print one JSON object instead of the summary")
    out.add_argument("--quiet", action="store_true", help="no progress bar and no summary (warnings still shown)")
    p.set_defaults(run=run)


def resolve_design(args, info):
    """The design to render ``info``'s file with, at its rate.

    One place that decides where the filter comes from, so a plan, a preset or
    an automatic choice can join the explicit options here.
    """
    from audition.cli.filteropts import design_from_args
    from audition.errors import BadParameter

    try:
        d = design_from_args(args, info.rate_hz)
    except BadParameter as exc:
        # name the file: the limit (Nyquist) comes from its rate
        raise BadParameter(f"{info.path!r} at {info.rate_hz:g} Hz: {exc}") from None
    if d is None:
        raise BadParameter("give a filter: --f0 HZ [--q Q | --order N --alignment NAME] or --section F0:Q ...")
    return d, {}


class ProgressBar:
    """A one-line bar on stderr, redrawn at most ten times a second."""

    def __init__(self, label: str, stream=None, width: int = 30):
        self.label, self.stream, self.width = label, stream or sys.stderr, width
        self.t0 = time.perf_counter()
        self._last = 0.0

    def __call__(self, done: int, total: int) -> None:
        now = time.perf_counter()
        if now - self._last < 0.1 and done < total:
            return
        self._last = now
        frac = min(1.0, done / total) if total else 1.0
        fill = int(round(frac * self.width))
        self.stream.write(f"\r{self.label} [{'#' * fill}{'.' * (self.width - fill)}] {frac:6.1%}")
        self.stream.flush()

    def close(self) -> None:
        self.stream.write("\r" + " " * (len(self.label) + self.width + 12) + "\r")
        self.stream.flush()


def report(r, d) -> dict:
    """The JSON object of one render."""
    dd = d.to_dict()
    return {
        "input": r.input,
        "output": r.output,
        "sidecar": r.sidecar,
        "rate": r.rate_hz,
        "channels": r.channels,
        "format": r.format,
        "subtype": r.subtype,
        "input_subtype": r.input_subtype,
        "frames": r.frames,
        "duration_seconds": r.audio_seconds,
        "f0_hz": dd["f0_hz"],
        "q": dd["q"],
        "order": dd["order"],
        "alignment": dd["alignment"],
        "highpass_hz": dd["highpass_hz"],
        "sections": dd["sections"],
        "method": r.method,
        "dither": {"kind": "tpdf" if r.dither else "none", "peak_lsb": 1.0 if r.dither else 0.0,
                   "bits": r.dither_bits, "seed": r.seed},
        "peak_dbfs": r.peak_dbfs,
        "clipped_samples": r.clipped_samples,
        "trim_db": r.trim_db,
        "input_sha256": r.input_sha256,
        "seconds": r.seconds,
        "realtime_factor": r.realtime_factor,
    }


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
    return "\n".join([
        f"rendered {j['input']} -> {j['output']}",
        f"  {j['format']} {j['subtype']}, {j['rate']:g} Hz, {j['channels']} channel(s), "
        f"{j['frames']:,} frames ({_clock(j['duration_seconds'])})",
        f"  filter: {len(j['sections'])} section(s) by the {j['method']} method"
        + (f", f0 {j['f0_hz']:,.1f} Hz" if j["f0_hz"] else "") + (f", Q {j['q']:.4g}" if j["q"] else ""),
        f"  dither: {dither}",
        f"  sample peak of the output: {peak} (full scale = 0 dBFS), {j['clipped_samples']:,} sample(s) "
        "beyond full scale",
        f"  took {j['seconds']:.2f} s ({j['realtime_factor']:,.0f}x real time)",
        f"  record: {j['sidecar']}" if j["sidecar"] else "  record: none",
    ])


def run(args) -> int:
    from audition import audiofile
    from audition.render import render_file

    info = audiofile.info(args.input)
    d, record_extra = resolve_design(args, info)
    bar = None
    if not args.quiet and not args.json and sys.stderr.isatty() and info.seconds > PROGRESS_MIN_SECONDS:
        bar = ProgressBar("rendering")
    try:
        r = render_file(args.input, args.output, d, subtype=args.subtype, dither=args.dither, seed=args.seed,
                        overwrite=args.overwrite, progress=bar, record_extra=record_extra or None)
    finally:
        if bar is not None:
            bar.close()
    j = report(r, d)
    if r.clipped_samples:
        trim = math.ceil(r.trim_db * 10.0 + 1e-9) / 10.0
        float_out = r.subtype in ("FLOAT", "DOUBLE")
        what = "kept beyond full scale (float output)" if float_out else "clipped at full scale"
        print(f"audition render: warning: {r.clipped_samples:,} sample(s) {what}; lower the level by {trim:.1f} dB "
              f"(e.g. --gain-db {-trim:.1f}) and render again", file=sys.stderr)
    if args.json:
        print(json.dumps(j, indent=2))
    elif not args.quiet:
        print(format_summary(j))
    return 0
