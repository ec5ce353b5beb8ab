"""``audition synth``: a test clip of programme plus hiss with known truth, and its stems.

The mix goes to OUT in the container its ending names, at ``--subtype``
(PCM_16 by default, TPDF-dithered with the clip's seed). With ``--stems DIR``
the programme alone and the hiss alone are written beside it as
``DIR/<stem>.programme.wav`` and ``DIR/<stem>.hiss.wav``, sample-aligned with the
mix, always as 32-bit float WAV: float carries the truth undisturbed by dither
or quantisation (the float32 rounding error is 2^-24 of each sample, more than
140 dB under it), whatever the mix's word length. The mix written at PCM_16 is
``programme + hiss`` plus its dither (about -101 dBFS RMS). Everything streams,
so an hour-long clip needs no more memory than a short one; the files appear
only when all are complete.
"""

from __future__ import annotations

import os

HELP = "synthesise a test clip: programme plus hiss of known colour and level, with stems"


def add_parser(sub) -> None:
    p = sub.add_parser("synth", help=HELP, description=(HELP[0].upper() + HELP[1:]) + ". The programme is our own "
                       "scenario, silent during the lead-in: by default (--programme broadband) four voices, "
                       "hi-hats, crash cymbals and sibilants whose long-term spectrum follows the IEC 60268-1 "
                       "simulated programme signal, with treble bursts to 16 kHz; --programme dark gives the "
                       "four voices alone rolling off above --programme-top. Deterministic for a seed.")
    p.add_argument("out", metavar="OUT.wav", help="the mix (container from the ending: .wav, .flac, .aiff, ...)")
    p.add_argument("--seconds", type=float, default=10.0, metavar="S", help="length in seconds (default 10)")
    p.add_argument("--rate", type=int, default=44100, metavar="HZ", help="sample rate in Hz (default 44100)")
    p.add_argument("--channels", type=int, default=2, metavar="N", help="channels (default 2)")
    p.add_argument("--hiss-dbfs", type=float, default=-50.0, metavar="L",
                   help="hiss RMS per channel in dBFS, 20*log10(rms), -140 .. -30 (default -50)")
    p.add_argument("--hiss", choices=("white", "pink", "tape"), default="tape",
                   help="hiss colour: white, pink (1/f) or tape (white with a +12 dB treble shelf, "
                        "1.3 to 5.3 kHz; default)")
    p.add_argument("--lead-in", type=float, default=1.0, metavar="S",
                   help="seconds of hiss alone before the programme (default 1)")
    p.add_argument("--programme", choices=("broadband", "dark"), default="broadband",
                   help="broadband (default): long-term spectrum of IEC 60268-1's simulated programme signal, "
                        "transient treble to 16 kHz; dark: harmonic voices only, falling steeply above "
                        "--programme-top (the former default)")
    p.add_argument("--programme-top", type=float, default=None, metavar="HZ",
                   help="where the programme rolls off at 24 dB/octave (default: 16000 or 0.45*rate if lower "
                        "for broadband, 5000 for dark)")
    p.add_argument("--seed", type=int, default=0, metavar="N", help="seed of every random choice (default 0)")
    p.add_argument("--stems", metavar="DIR", help="also write DIR/<stem>.programme.wav and DIR/<stem>.hiss.wav "
                                                  "(32-bit float, sample-aligned)")
    p.add_argument("--subtype", default="PCM_16", metavar="SUBTYPE",
                   help="mix word length: PCM_16 (default), PCM_24, PCM_32, FLOAT, DOUBLE")
    p.add_argument("--overwrite", action="store_true", help="replace existing output files")
    p.set_defaults(run=run)


def stem_paths(out: str, stems_dir: str) -> tuple[str, str]:
    """``DIR/<stem>.programme.wav`` and ``DIR/<stem>.hiss.wav`` for the mix ``out``."""
    stem = os.path.splitext(os.path.basename(out))[0]
    return (os.path.join(stems_dir, stem + ".programme.wav"), os.path.join(stems_dir, stem + ".hiss.wav"))


def _make_folders(path: str) -> list[str]:
    """Make ``path`` and any missing parents; returns those made, outermost first (for removal on failure)."""
    from audition.errors import OutputRefused
    from audition.io.messages import _os_message

    missing = []
    p = os.path.abspath(path)
    while not os.path.isdir(p):
        missing.append(p)
        parent = os.path.dirname(p)
        if parent == p:
            break
        p = parent
    made = []
    for folder in reversed(missing):
        try:
            os.mkdir(folder)
        except OSError as exc:
            for m in reversed(made):
                try:
                    os.rmdir(m)
                except OSError:
                    pass
            raise OutputRefused(f"--stems {path!r}: the folder {folder!r} cannot be made "
                                f"({_os_message(exc)})") from None
        made.append(folder)
    return made


def run(args) -> int:
    import math

    import numpy as np

    from audition import synth
    from audition.errors import OutputRefused
    from audition.io import formats, writer

    p = synth.check_params(args.seconds, args.rate, args.channels, args.hiss_dbfs, args.hiss, args.lead_in,
                           args.seed, args.programme_top, args.programme)
    frames = int(round(p["seconds"] * p["rate_hz"]))
    fmt = formats.format_for_path(args.out)
    formats.check_output_subtype(args.subtype, fmt, args.out)
    targets = [(args.out, fmt, args.subtype, "mix")]
    if args.stems:
        if os.path.exists(args.stems) and not os.path.isdir(args.stems):
            raise OutputRefused(f"--stems {args.stems!r}: exists and is not a folder")
        targets += [(path, "WAV", "FLOAT", what) for path, what in zip(stem_paths(args.out, args.stems),
                                                                        ("programme", "hiss"))]
        seen = {}
        for path, *_ in targets:
            key = os.path.realpath(path)
            if key in seen:
                raise OutputRefused(f"{path!r}: the {seen[key]} would be written to the same file; "
                                    "name the mix or the stems folder differently")
            seen[key] = path
        # every check that needs no folder first, so a refusal leaves nothing behind
        for path, *_ in targets[1:]:
            if os.path.lexists(path) and not args.overwrite:
                raise OutputRefused(f"{path!r}: exists; give --overwrite to replace it")
    writer.check_output_path(args.out, overwrite=args.overwrite)
    made_dirs = _make_folders(args.stems) if args.stems else []

    writers = []
    sq = np.zeros(p["channels"])
    try:
        for path, f, subtype, _ in targets:
            writers.append(writer.AtomicWriter(path, p["rate_hz"], p["channels"], format=f, subtype=subtype,
                                               overwrite=args.overwrite, dither=True, seed=p["seed"],
                                               frames_hint=frames))
        for b in synth._blocks(p):
            writers[0].write(b.mix)
            if len(writers) > 1:
                writers[1].write(b.programme)
                writers[2].write(b.hiss)
            sq += np.sum(b.hiss * b.hiss, axis=0)
        for w in writers:
            w.finish()
        for w in writers:
            w.commit()
    except BaseException:
        for w in writers:
            w.abort()
        for folder in reversed(made_dirs):  # a refused or failed run leaves no empty folder behind
            try:
                os.rmdir(folder)
            except OSError:
                pass
        raise

    hiss_dbfs = 10 * math.log10(float(np.mean(sq)) / frames)

    def peak(w):
        v = w.stats.peak_dbfs
        return "silent" if v is None else f"{v:.1f} dBFS"

    clipped = writers[0].stats.clipped_samples
    print(f"wrote {args.out}: {p['seconds']:g} s, {p['rate_hz']:.0f} Hz, {p['channels']} ch, {args.subtype}; "
          f"{p['programme']} programme (top {p['programme_top_hz']:g} Hz, lead-in {p['lead_in_seconds']:g} s) "
          f"plus {p['hiss']} hiss at {p['hiss_dbfs']:g} dBFS RMS per channel (20*log10 rms, measured {hiss_dbfs:.2f}); "
          f"sample peak {peak(writers[0])}; seed {p['seed']}" + (f"; {clipped} samples clipped" if clipped else ""))
    if len(writers) > 1:
        print(f"wrote {targets[1][0]}: the programme alone, 32-bit float, sample peak {peak(writers[1])}")
        print(f"wrote {targets[2][0]}: the hiss alone, 32-bit float, {hiss_dbfs:.2f} dBFS RMS per channel "
              "(20*log10 rms)")
    return 0
