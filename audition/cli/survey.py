"""``audition survey``: the hiss against the programme, and what a filter would do."""

from __future__ import annotations

import json
import sys

from audition.cli.filteropts import add_filter_options
from audition.cli.noiseopts import add_noise_options

HELP = "survey the noise floor against the programme; predict a filter's SNR gain and treble loss"
WEIGHTING_NOTE = ("A-weighting (IEC 61672-1) and ITU-R BS.468-4 weighting are applied to the power spectrum "
                  "(RMS detection, not the 468 quasi-peak meter); levels are dBFS as 20*log10(rms), "
                  "a full-scale sine reading -3.01 dBFS")


def add_parser(sub) -> None:
    p = sub.add_parser("survey", help=HELP, description=(HELP[0].upper() + HELP[1:]) + ".")
    p.add_argument("input", metavar="IN", help="the recording (any format libsndfile reads)")
    add_noise_options(p)
    add_filter_options(p, title="filter to predict (optional)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--plot", metavar="FILE.png", help="draw the spectra, the crossover and any filter")
    p.set_defaults(run=run)


def survey_report(s, design=None, treble_from_hz: float = 2000.0) -> dict:
    """The JSON object of a survey (and of a prediction when a design is given)."""
    from audition import measure
    from audition.weighting import WEIGHTINGS

    d = s.to_dict()
    d["noise"]["rms_dbfs"] = measure.weighted_levels(s.freqs_hz, s.noise_psd, WEIGHTINGS)
    d["programme"]["rms_dbfs"] = measure.weighted_levels(s.freqs_hz, s.programme_psd, WEIGHTINGS)
    d["weighting_note"] = WEIGHTING_NOTE
    d["warnings"] = noise_warnings(s)
    if design is not None:
        d["prediction"] = measure.predict(s.freqs_hz, s.programme_psd, s.noise_psd, design,
                                          treble_from_hz=treble_from_hz).to_dict()
        d["filter"] = design.to_dict()
    return d


def noise_warnings(s) -> list:
    """Warnings about the noise reference a technician must act on (empty when it looks sound)."""
    conf = s.confidence
    out = []
    if conf.grade == "low":
        why = []
        if conf.separation_db is not None and conf.separation_db < 10:
            why.append(f"only {conf.separation_db:.1f} dB below the programme")
        if conf.level_spread_db > 1.0:
            why.append(f"its level wanders by {conf.level_spread_db:.1f} dB")
        if conf.noise_seconds < 0.5:
            why.append(f"only {conf.noise_seconds:.2f} s long")
        if conf.shape_spread_db is not None and conf.shape_spread_db > 3.0:
            why.append(f"its spectrum changes by {conf.shape_spread_db:.1f} dB")
        where = {"auto": "the spans found", "spans": "the given spans", "clip": "the noise clip"}[s.noise_source]
        out.append("the noise reference is doubtful (" + ("; ".join(why) or "low confidence") + "): listen to "
                   f"{where}; if they hold programme, give --noise-span START:END over hiss alone "
                   "(tape leader, a pause) or --noise-clip FILE")
    return out


def format_report(path, r: dict) -> str:
    def lv(x):
        return "   —   " if x is None or x == float("-inf") else f"{x:7.1f}"

    n = r["noise"]
    conf = n["confidence"]
    spans = ", ".join(f"{a:.2f}–{b:.2f} s" for a, b in n["spans"][:6]) + (" …" if len(n["spans"]) > 6 else "")
    where = {"auto": f"found automatically: {spans}", "spans": f"given spans: {spans}",
             "clip": "a separate noise clip"}[n["source"]]
    lines = [
        f"{path}: {r['seconds']:.2f} s, {r['rate_hz']:,.0f} Hz, {r['channels']} channel(s)",
        f"noise reference, {where}",
        f"  confidence {conf['grade']}: " + (f"{conf['separation_db']:.1f} dB below the programme, "
                                              if conf["separation_db"] is not None else "")
        + f"{conf['noise_seconds']:.2f} s of hiss, level spread {conf['level_spread_db']:.2f} dB",
        "",
        f"  {'level (dBFS, RMS)':<22}{'flat':>8}{'A':>8}{'ITU-468':>9}",
        f"  {'hiss':<22}" + "".join(f"{lv(n['rms_dbfs'][k]):>8}" for k in ("flat", "a")) + f"{lv(n['rms_dbfs']['itu468']):>9}",
        f"  {'programme (estimate)':<22}" + "".join(f"{lv(r['programme']['rms_dbfs'][k]):>8}" for k in ("flat", "a"))
        + f"{lv(r['programme']['rms_dbfs']['itu468']):>9}",
        "",
        ("  the programme sinks below the hiss above about "
         f"{r['crossover_hz']:,.0f} Hz (1/{r['band_fraction']}-octave bands, margin {r['margin_db']:g} dB)"
         if r["crossover_hz"] else "  the programme stays above the hiss in every band"),
    ]
    if "prediction" in r:
        p = r["prediction"]
        g = p["snr_gain_db"]
        lines += [
            "",
            "  with the filter:",
            f"    SNR gain (dB)         flat {g['flat']:+.2f}   A {g['a']:+.2f}   ITU-468 {g['itu468']:+.2f}",
            f"    hiss after (dBFS)     flat {p['noise_after_dbfs']['flat']:.1f}   A {p['noise_after_dbfs']['a']:.1f}"
            f"   ITU-468 {p['noise_after_dbfs']['itu468']:.1f}",
            f"    treble loss           {p['treble_loss_db']:.2f} dB of programme above {p['treble_from_hz']:,.0f} Hz",
            "    response              " + "   ".join(
                f"{int(k) // 1000} kHz " + ("—" if v is None else f"{v:+.1f} dB") for k, v in p["response_db"].items()),
        ]
    lines += ["", "  " + WEIGHTING_NOTE]
    return "\n".join(lines)


def run(args) -> int:
    from audition import audiofile
    from audition.cli.filteropts import design_from_args

    inf = audiofile.info(args.input)
    d = design_from_args(args, inf.rate_hz)  # checked before the long read
    if args.plot:
        import os

        from audition.errors import OutputRefused

        folder = os.path.dirname(os.path.abspath(args.plot))
        if not os.path.isdir(folder):
            raise OutputRefused(f"{args.plot}: folder {folder!r} does not exist; the plot could not be written")
        if os.path.isdir(args.plot):
            raise OutputRefused(f"{args.plot}: is a folder; give the plot a file name ending in .png")
    from audition.cli.noiseopts import survey_file

    s = survey_file(args.input, args)
    r = survey_report(s, d, args.treble_from)
    if args.plot:
        from audition.plots.survey import plot_survey

        plot_survey(s, args.plot, design=d, title=str(args.input), prediction=r.get("prediction"))
    for w in r["warnings"]:
        print(f"audition survey: warning: {args.input}: {w}", file=sys.stderr)
    if args.json:
        print(json.dumps(r, indent=2))
    else:
        print(format_report(args.input, r))
        if args.plot:
            print(f"plot written to {args.plot}")
    return 0
