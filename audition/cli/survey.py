"""``audition survey``: the hiss against the programme, and what a filter would do."""

from __future__ import annotations

import json
import sys

from audition.cli.filteropts import add_filter_options
from audition.cli.noiseopts import add_noise_options

HELP = ("survey the noise floor against the programme and where the hiss is heard; predict what a filter "
        "takes from the programme and from the hiss heard")
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
    p.add_argument("--overwrite", action="store_true",
                   help="replace an existing --plot file (never IN or the noise clip)")
    p.set_defaults(run=run)


def survey_report(s, design=None, noise=None) -> dict:
    """The JSON object of a survey (and of a prediction when a design is given).

    ``noise`` is the :class:`~audition.pipeline.NoiseReference` the survey was made with (its
    listening level, margin and treble edge judge what is heard).
    """
    from audition import measure, pipeline
    from audition.plan.audible import audible_bands
    from audition.plan.choose import judge_nothing
    from audition.weighting import WEIGHTINGS

    noise = noise or pipeline.NoiseReference()
    d = s.to_dict()
    d["noise"]["rms_dbfs"] = measure.weighted_levels(s.freqs_hz, s.noise_psd, WEIGHTINGS)
    d["programme"]["rms_dbfs"] = measure.weighted_levels(s.freqs_hz, s.programme_psd, WEIGHTINGS)
    d["listening_level_db"] = noise.listening_level_db
    bands = s.hearing_bands
    heard = judge_nothing(bands, noise.listening_level_db)
    audible = audible_bands(bands, noise.listening_level_db, noise.margin_db, 0.0)
    d["hiss_heard"] = {"sone": heard.before_sone, "bands_hz": [float(f) for f in heard.bands_hz],
                       "audible_share": [float(x) for x in heard.share_before]}
    d["programme"]["heard_bands_hz"] = [float(f) for f in bands.centres_hz[audible]]
    d["weighting_note"] = WEIGHTING_NOTE
    d["warnings"] = noise_warnings(s)
    if design is not None:
        d["prediction"] = pipeline.predict(s, design, noise)
        d["filter"] = design.to_dict()
    return d


def noise_warnings(s) -> list:
    """Warnings about the noise reference a technician must act on (empty when it looks sound)."""
    conf = s.confidence
    out = []
    if conf.grade == "low":
        why = conf.doubts()
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
    lines += _heard_lines(r)
    if "prediction" in r:
        p = r["prediction"]
        g = p["snr_gain_db"]
        h = p["hiss_heard"]
        cut = (f"{p['treble_loss_db']:.2f} dB, the largest cut where the programme is heard"
               + (f" (in the {nominal(p['treble_loss_hz'])} band)" if p["treble_loss_hz"] else ""))
        lines += [
            "",
            "  with the filter:",
            f"    treble loss           {cut}",
            f"    hiss heard            {h['before_sone']:.2f} -> {h['after_sone']:.2f} sone "
            f"({h['reduction_pct']:.0f} % less; ISO 532-1 loudness the hiss adds, mean over the frames)",
            f"    SNR gain (dB)         flat {_signed(g['flat'])}   A {_signed(g['a'])}   ITU-468 {_signed(g['itu468'])}",
            f"    hiss after (dBFS)     flat {lv(p['noise_after_dbfs']['flat']).strip()}   "
            f"A {lv(p['noise_after_dbfs']['a']).strip()}   ITU-468 {lv(p['noise_after_dbfs']['itu468']).strip()}",
            "    response              " + "   ".join(
                f"{int(k) // 1000} kHz " + ("—" if v is None else f"{v:+.1f} dB") for k, v in p["response_db"].items()),
        ]
    lines += ["", "  " + WEIGHTING_NOTE]
    return "\n".join(lines)


def nominal(f_hz) -> str:
    from audition.plan.explain import nominal as _nominal

    return _nominal(f_hz)


def _signed(v) -> str:
    return "—" if v is None else f"{v:+.2f}"


def _heard_lines(r: dict) -> list[str]:
    """Where the hiss is heard over the programme, and where the programme is heard over the hiss."""
    h = r["hiss_heard"]
    share = h["audible_share"]
    heard = [(f, x) for f, x in zip(h["bands_hz"], share) if x >= 0.05]
    lines = ["", f"  at {r['listening_level_db']:g} dB SPL for a full-scale sine (--listening-level):"]
    if heard:
        top = max(heard, key=lambda fx: fx[1])
        lines.append(f"    the hiss adds {h['sone']:.2f} sone on average; it is heard in the bands from "
                     f"{nominal(heard[0][0])} to {nominal(heard[-1][0])}, most often in the "
                     f"{nominal(top[0])} band ({100 * top[1]:.0f} % of the time)")
    else:
        lines.append(f"    the hiss is not heard over the programme: under 5 % of the time in every band "
                     f"({h['sone']:.2f} sone on average)")
    hb = r["programme"]["heard_bands_hz"]
    lines.append("    the programme is heard above the hiss (loudest tenth of the time) "
                 + (f"up to the {nominal(hb[-1])} band" if hb else "in no band"))
    return lines


def run(args) -> int:
    from audition.cli.filteropts import design_from_args
    from audition.io import reader

    from audition.cli.plan import check_file_rate
    from audition.io import guard

    inf = reader.info(args.input)
    check_file_rate(args.input, inf.rate_hz)
    d = design_from_args(args, inf.rate_hz)  # checked before the long read
    plot = guard.target(args.plot, inputs=(args.input, args.noise_clip), overwrite=args.overwrite, what="--plot")
    from audition.cli.noiseopts import survey_file

    from audition.cli.noiseopts import noise_from_args

    s = survey_file(args.input, args)
    r = survey_report(s, d, noise_from_args(args))
    if args.plot:
        from audition.plots.survey import plot_survey

        plot_survey(s, plot, design=d, title=str(args.input), prediction=r.get("prediction"))
    for w in r["warnings"]:
        print(f"audition survey: warning: {args.input}: {w}", file=sys.stderr)
    if args.json:
        print(json.dumps(r, indent=2))
    else:
        print(format_report(args.input, r))
        if args.plot:
            print(f"plot written to {args.plot}")
    return 0
