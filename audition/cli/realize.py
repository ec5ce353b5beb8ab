"""``audition realize``: a filter taken to the bench, as standard parts or DSP coefficients."""

from __future__ import annotations

import json
import os

from audition.cli.filteropts import add_filter_options, add_source_options
from audition.cli.values import FINITE, SEED, number

HELP = "realise a filter as preferred-value parts (series RLC, Sallen-Key) or DSP coefficients, with the error"
TARGET_HELP = ("series-rlc: passive R-L-C section (output across C) per second-order section, RC for first order; "
               "sallen-key: unity-gain Sallen-Key op-amp section per second-order section, buffered RC for first "
               "order; coefficients: the digital sections in double, single, Q1.15, Q1.31, Q2.14 and Q2.30")


def add_parser(sub) -> None:
    p = sub.add_parser("realize", help=HELP, description=HELP[0].upper() + HELP[1:] + ".")
    add_filter_options(p)
    add_source_options(p)
    p.add_argument("--as", dest="target", metavar="TARGET", help=TARGET_HELP)
    a = p.add_argument_group("analog parts")
    a.add_argument("--series", default="E24", metavar="E12|E24|E96",
                   help="IEC 60063 preferred-number series of the resistors (default E24; E6 also offered)")
    a.add_argument("--cap-series", metavar="SERIES", help="series of the capacitors (default: --series)")
    a.add_argument("--inductor-series", default="E12", metavar="SERIES", help="series of the inductors (default E12)")
    a.add_argument("--impedance-ohm", type=FINITE, metavar="OHM",
                   help="impedance level: sqrt(L/C) for series-rlc (default 600), the resistors for sallen-key "
                        "(default 10000); R of a first-order stage")
    a.add_argument("--source-ohm", type=FINITE, default=0.0, metavar="OHM",
                   help="output impedance of whatever drives the filter; adds to the first R (default 0)")
    a.add_argument("--load-ohm", type=FINITE, metavar="OHM",
                   help="load across the last capacitor (series-rlc); default: open")
    a.add_argument("--tolerance-pct", type=FINITE, default=5.0, metavar="PCT",
                   help="tolerance of resistors and capacitors for the Monte Carlo, percent (default 5); the "
                        "1, 2, 5 and 10 %% classes are also compared side by side")
    a.add_argument("--inductor-tolerance-pct", type=FINITE, default=10.0, metavar="PCT",
                   help="tolerance of inductors, percent (default 10)")
    a.add_argument("--trials", type=int, default=2000, metavar="N", help="Monte Carlo builds (default 2000; 0: none)")
    a.add_argument("--seed", type=SEED, default=0, metavar="N", help="seed of the Monte Carlo (default 0)")
    c = p.add_argument_group("DSP coefficients")
    c.add_argument("--rate", type=FINITE, default=48000.0, metavar="HZ", help="sample rate in Hz (default 48000)")
    c.add_argument("--max-deviation-db", type=number(0.0, 60.0, lo_open=True, unit="dB"), default=0.1, metavar="DB",
                   help="flag a format unsafe above this response deviation (default 0.1 dB)")
    c.add_argument("--header", metavar="FILE.h", help="write the coefficients as a C header (our own layout)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of the table")
    p.add_argument("--plot", metavar="FILE.png", help="draw the real response against the target")
    p.add_argument("--circuit", metavar="FILE.png|FILE.svg", help="draw the circuit with its part values "
                   "(series-rlc or sallen-key; needs schemdraw: pip install 'audition[circuit]')")
    p.add_argument("--overwrite", action="store_true", help="replace an existing --header or --plot file "
                   "(never the plan file)")
    p.set_defaults(run=run)


# ---------------------------------------------------------------------------
# Input
# ---------------------------------------------------------------------------


def _design(args, rate_hz):
    """``(design, header, plot)``: the filter at ``rate_hz`` and the checked outputs (guard Targets or None)."""
    from audition.plan import presets
    from audition.cli.filteropts import filter_source, no_filter

    spec, _ = filter_source(args)
    if spec is None:
        raise no_filter()
    header, plot = _targets(args, spec.source)
    return presets.check_design(spec, rate_hz), header, plot


def _check(args):
    from audition.errors import BadParameter
    from audition.realize import TARGETS

    if args.target is None:
        raise BadParameter(f"give a target with --as: {', '.join(TARGETS)}")
    if args.target not in TARGETS:
        raise BadParameter(f"as={args.target!r}: allowed targets are {', '.join(TARGETS)}")
    if args.header and args.target != "coefficients":
        raise BadParameter(f"header={args.header!r}: a C header is written for --as coefficients only")
    if args.target == "coefficients":
        for name in ("impedance_ohm", "load_ohm", "cap_series"):
            if getattr(args, name) is not None:
                raise BadParameter(f"--{name.replace('_', '-')} applies to the analog targets, not to coefficients")
        if args.source_ohm:
            raise BadParameter("--source-ohm applies to the analog targets, not to coefficients")
    if args.circuit:
        if args.target == "coefficients":
            raise BadParameter(f"circuit={args.circuit!r}: a circuit is drawn for series-rlc and sallen-key, "
                               "not for coefficients")
        if not args.circuit.lower().endswith((".png", ".svg")):
            raise BadParameter(f"circuit={args.circuit!r}: give a file name ending in .png or .svg")
        from audition.plots.circuit import _schemdraw

        _schemdraw()  # a missing schemdraw is said before any work
    if args.trials < 0:
        raise BadParameter(f"trials={args.trials!r}: must be 0 (no Monte Carlo) or a positive integer")
    for opt, path, ext in (("header", args.header, ".h"), ("plot", args.plot, ".png")):
        if path:
            if os.path.isdir(path):
                raise BadParameter(f"{path!r} is a folder: give a file name ending in {ext}")
            if not path.lower().endswith(ext):
                raise BadParameter(f"{opt}={path!r}: give a file name ending in {ext} (the file is written as {ext})")


def _targets(args, spec_source):
    """The --header and --plot outputs, checked (never the plan file, no existing file without --overwrite)."""
    from audition.io import guard

    inputs = (spec_source or None,)
    header = guard.target(args.header, inputs=inputs, overwrite=args.overwrite, what="--header")
    plot = guard.target(args.plot, inputs=inputs, overwrite=args.overwrite, what="--plot")
    guard.check_distinct([header, plot])
    return header, plot


# ---------------------------------------------------------------------------
# Output
# ---------------------------------------------------------------------------

_PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ"), (1e-9, "n"), (1e-12, "p"),
             (1e-15, "f"))


def eng(value: float | None, unit: str) -> str:
    """A value with an SI prefix and three significant figures: 4.7 kΩ, 33 nF, 10 mH."""
    if value is None:
        return "—"
    for scale, prefix in _PREFIXES:
        if abs(value) >= scale * 0.9995:
            return f"{value / scale:.3g} {prefix}{unit}"
    return f"{value:.3g} {unit}"


_PART_UNITS = (("_ohm", "Ω"), ("_henry", "H"), ("_farad", "F"))


def _parts_text(stage: dict) -> str:
    out = []
    for k, v in stage.items():
        if k in ("source_ohm", "load_ohm", "r_total_ohm"):
            continue
        for suffix, unit in _PART_UNITS:
            if k.endswith(suffix) and isinstance(v, (int, float)):
                out.append(f"{k[: -len(suffix)].upper()} {eng(v, unit)}")
    return "  ".join(out)


def _figs(b: dict) -> str:
    return f"f0 {b['f0_hz']:,.1f} Hz" + ("" if b["q"] is None else f", Q {b['q']:.4f}") + f", H0 {b['h0_db']:+.2f} dB"


def _source_load_lines(s: dict) -> list[str]:
    """What the source and the load do to one stage: the same parts with each taken away."""
    key = "r1_ohm" if "r1_ohm" in s else "r_ohm"
    name = key[: -len("_ohm")].upper()
    out = []
    if s["source_ohm"]:
        out.append(f"source {eng(s['source_ohm'], 'Ω')} adds to {name}: {eng(s[key], 'Ω')} + "
                   f"{eng(s['source_ohm'], 'Ω')} = {eng(s['r_total_ohm'], 'Ω')} in series; without it: "
                   + _figs(s["without_source"]))
    if s["load_ohm"] is not None:
        out.append(f"load {eng(s['load_ohm'], 'Ω')} across C: H0 {s['achieved']['h0_db']:+.2f} dB; without it: "
                   + _figs(s["without_load"]))
    if s["source_ohm"] and s["load_ohm"] is not None:
        out.append("without source and load: " + _figs(s["without_source_and_load"]))
    return out


def _pct(v):
    # Round first so that a tiny negative error does not print as "-0.00 %".
    return "—" if v is None else f"{round(v, 2) + 0.0:+.2f} %"


def _q(v):
    return "—" if v is None else f"{v:.4f}"


def format_analog(r: dict) -> str:
    t, a, e = r["target"], r["achieved"], r["error"]
    topo = {"series-rlc": "passive series RLC (R, L in series, output across C)",
            "sallen-key": "unity-gain Sallen–Key (C1 feedback from the R1–R2 junction to the output, "
                          "C2 from the op-amp input to ground)"}[r["as"]]
    series = ", ".join(f"{k}s {v}" for k, v in r["series"].items())
    load = "open" if r["load_ohm"] is None else eng(r["load_ohm"], "Ω")
    lines = [
        f"{topo}, {len(r['stages'])} stage(s); IEC 60063 {series}",
        f"target: f0 {t['f0_hz']:,.1f} Hz" + (f", Q {t['q']:.4f}" if t["q"] else f", order {t['order']}"
                                                + (f" {t['alignment']}" if t["alignment"] else ""))
        + f", H0 {t['h0_db']:+.2f} dB;  impedance level {eng(r['impedance_ohm'], 'Ω')}, source "
          f"{eng(r['source_ohm'], 'Ω') if r['source_ohm'] else '0 Ω'}, load {load}",
        "",
    ]
    tol = r.get("tolerance")
    for i, s in enumerate(r["stages"]):
        st, sa, se = s["target"], s["achieved"], s["error"]
        kind = {"series-rlc": "RLC", "rc": "RC", "sallen-key": "Sallen–Key",
                "buffered-rc": "RC + buffer"}[s["topology"]]
        lines.append(f"stage {s['index']} ({kind}):  {_parts_text(s)}")
        qtext = "first order" if st["q"] is None else f"Q {_q(sa['q'])} (target {_q(st['q'])}, {_pct(se['q_pct'])})"
        lines.append(f"    f0 {sa['f0_hz']:>10,.1f} Hz (target {st['f0_hz']:,.1f}, {_pct(se['f0_pct'])})   "
                     f"{qtext}   H0 {sa['h0_db']:+.2f} dB ({se['h0_db']:+.2f} dB)")
        lines += ["    " + t for t in _source_load_lines(s)]
        ne = s["nearest_of_each"]["error"]
        lines.append(f"    nearest value of each part instead: {_parts_text(s['nearest_of_each']['parts'])}  "
                     f"-> f0 {_pct(ne['f0_pct'])}" + ("" if st["q"] is None else f", Q {_pct(ne['q_pct'])}"))
        if tol:
            ts = tol["stages"][i]
            txt = f"    tolerance 5th / 50th / 95th percentile: f0 {ts['f0_hz']['p5']:,.0f} / " \
                  f"{ts['f0_hz']['p50']:,.0f} / {ts['f0_hz']['p95']:,.0f} Hz"
            if ts["q"]:
                txt += f", Q {ts['q']['p5']:.3f} / {ts['q']['p50']:.3f} / {ts['q']['p95']:.3f}"
            lines.append(txt)
    lo, hi = a["deviation_band_hz"]
    lines += [
        "",
        f"overall: f0 {a['f0_hz']:,.1f} Hz ({_pct(e['f0_pct'])})" + (f", Q {a['q']:.4f} ({_pct(e['q_pct'])})"
                                                                    if a["q"] else "")
        + f", H0 {a['h0_db']:+.2f} dB ({e['h0_db']:+.2f} dB)",
        f"real circuit minus target, worst point in {lo:,.0f} .. {hi:,.0f} Hz: {a['max_deviation_db']:+.3f} dB at "
        f"{a['max_deviation_hz']:,.0f} Hz",
    ]
    if tol:
        md = tol["max_deviation_db"]
        lines.append(f"with parts within ±{tol['tolerance_pct']:g} % (R, C)"
                     + (f", ±{tol['inductor_tolerance_pct']:g} % (L)" if r["as"] == "series-rlc" else "")
                     + f", {tol['trials']} builds (seed {tol['seed']}, uniform): worst deviation 50th "
                       f"{md['p50']:.2f} dB, 95th percentile {md['p95']:.2f} dB")
    classes = r.get("tolerance_classes")
    if classes:
        lines.append("spread by tolerance class: error against the target, 5th .. 95th percentile"
                     + (" (lowest and highest over the stages)" if len(classes[0]["stages"]) > 1 else "")
                     + (f"; L stays ±{classes[0]['inductor_tolerance_pct']:g} %" if r["as"] == "series-rlc" else "")
                     + "; the same builds scaled")
        for c in classes:
            f5 = min(st["f0_pct"]["p5"] for st in c["stages"])
            f95 = max(st["f0_pct"]["p95"] for st in c["stages"])
            qs = [st["q_pct"] for st in c["stages"] if st["q_pct"]]
            txt = f"  ±{c['tolerance_pct']:>4g} % R, C:  f0 {f5:+6.2f} .. {f95:+6.2f} %"
            if qs:
                txt += f"   Q {min(q['p5'] for q in qs):+6.2f} .. {max(q['p95'] for q in qs):+6.2f} %"
            md = c["max_deviation_db"]
            txt += f"   worst deviation 50th {md['p50']:.2f} dB, 95th {md['p95']:.2f} dB"
            lines.append(txt)
    for n in r["notes"]:
        lines.append(f"note: {n}")
    lines.append(r["caution"])
    return "\n".join(lines)


def format_coefficients(r: dict) -> str:
    t = r["target"]
    lo, hi = r["deviation_band_hz"]
    lines = [
        f"low-pass f0 {t['f0_hz']:,.1f} Hz" + (f", Q {t['q']:.4f}" if t["q"] else f", order {t['order']}"
                                              + (f" {t['alignment']}" if t["alignment"] else ""))
        + (f", high-pass {t['highpass_hz']:,.1f} Hz" if t["highpass_hz"] else "")
        + f", H0 {t['h0_db']:+.2f} dB; {len(r['stages'])} section(s) at {r['rate_hz']:,.0f} Hz ({r['method']})",
        f"deviation: rounded minus double magnitude, worst point in {lo:,.0f} .. {hi:,.0f} Hz (coefficient rounding);",
        "noise floor: the fixed-point arithmetic's rounding noise at the output, rms dBFS as 20·log10(rms) "
        "(a full-scale sine reads -3.01 dBFS); a white-noise estimate, a few dB optimistic at low f0/rate",
        "",
        f"  {'format':<8}{'bits':>5}  {'fits':<5}{'pole radius':>13}  {'max deviation':<26}{'noise floor':<14}verdict",
    ]
    for key, f in r["formats"].items():
        if f["fits"]:
            dev = ("unbounded" if f["max_deviation_db"] is None
                   else f"{f['max_deviation_db']:+.4f} dB at {f['max_deviation_hz']:,.0f} Hz")
            noise = "—" if f["noise_floor_dbfs"] is None else f"{f['noise_floor_dbfs']:.1f} dBFS"
            verdict = "safe" if f["safe"] else "UNSAFE: " + "; ".join(f["warnings"])
            lines.append(f"  {f['label']:<8}{f['word_bits']:>5}  {'yes':<5}{f['pole_radius']:>13.9f}  {dev:<26}"
                         f"{noise:<14}{verdict}")
        else:
            lines.append(f"  {f['label']:<8}{f['word_bits']:>5}  {'no':<5}{'—':>13}  {'—':<26}{'—':<14}"
                         f"{f['warnings'][0]}")
    lines.append("")
    lines.append("integer coefficients, b0 b1 b2 a1 a2 per section (a0 = 1 implied; denominator "
                 "1 + a1 z^-1 + a2 z^-2, so a1 and a2 are subtracted in the recursion):")
    for key, f in r["formats"].items():
        if f["fits"] and f["frac_bits"] is not None:
            for i, s in enumerate(f["sections"], 1):
                lines.append(f"  {f['label']:<6} section {i}: " + " ".join(str(v) for v in s["b_int"] + s["a_int"]))
    lines.append("fixed-point arithmetic assumed: " + r["arithmetic"])
    hr = r["headroom"]
    if hr["peak_gain_db"] > 0.005:
        lines.append(f"headroom: the gain up to section {hr['after_section']} peaks at {hr['peak_gain_db']:+.2f} dB "
                     f"at {hr['peak_hz']:,.0f} Hz (sine gain); in fixed point keep the input's peak below "
                     f"{-hr['peak_gain_db']:.2f} dB re full scale (peak, not rms) or that section's output saturates")
    else:
        lines.append(f"headroom: no section output rises above the input (peak gain {hr['peak_gain_db']:+.2f} dB)")
    rec = r["recommended"]
    lines.append(f"recommended: {r['formats'][rec]['label']} (shortest safe word)" if rec else
                 "no format is safe for this design at this rate: a higher f0/rate (a lower sample rate) or a "
                 "structure less sensitive to rounding is needed")
    return "\n".join(lines)


# ---------------------------------------------------------------------------
# Run
# ---------------------------------------------------------------------------


def run(args) -> int:
    from audition import __version__, realize
    from audition.design import check_rate
    from audition.io import sidecar

    _check(args)
    check_rate(args.rate)
    if args.target == "coefficients":
        d, header_target, plot = _design(args, args.rate)
        coeffs = realize.quantise(d, max_deviation_db=args.max_deviation_db)
        report = coeffs.to_dict()
        header = None
        if args.header:
            stem = os.path.splitext(os.path.basename(args.header))[0]
            header = realize.c_header(coeffs, stem, version=__version__)
        if args.plot:
            from audition.plots.realize import plot_coefficients

            plot_coefficients(coeffs, plot)
        if header is not None:
            sidecar.write_text(header_target, header, "header")
        if args.json:
            print(json.dumps(report, indent=2, allow_nan=False))
        else:
            print(format_coefficients(report))
            for path, what in ((args.header, "C header"), (args.plot, "plot")):
                if path:
                    print(f"{what} written to {path}")
        return 0

    # The analog values of the sections do not depend on a sample rate; digitise
    # at a rate high enough that any audio f0 is accepted.
    d, _, plot = _design(args, max(args.rate, 384000.0))
    impedance = args.impedance_ohm if args.impedance_ohm is not None else realize.DEFAULT_IMPEDANCE_OHM[args.target]
    options = dict(series=args.series, cap_series=args.cap_series, impedance_ohm=impedance,
                   source_ohm=args.source_ohm, load_ohm=args.load_ohm)
    if args.target == "series-rlc":
        options["inductor_series"] = args.inductor_series
    real = realize.realise(d, args.target, **options)
    tol = None
    if args.trials:
        tol = realize.monte_carlo(real, tolerance_pct=args.tolerance_pct,
                                  inductor_tolerance_pct=args.inductor_tolerance_pct, trials=args.trials,
                                  seed=args.seed)
    report = real.to_dict()
    report["tolerance"] = None if tol is None else tol.to_dict()
    report["tolerance_classes"] = None
    if args.trials:
        report["tolerance_classes"] = realize.tolerance_classes(
            real, inductor_tolerance_pct=args.inductor_tolerance_pct, trials=args.trials, seed=args.seed)
    if args.plot:
        from audition.plots.realize import plot_realisation

        plot_realisation(real, tol, plot)
    if args.circuit:
        from audition.io import guard
        from audition.plots.circuit import write_circuit

        write_circuit(real, guard.target(args.circuit, inputs=(), overwrite=args.overwrite, what="--circuit"))
    if args.json:
        print(json.dumps(report, indent=2, allow_nan=False))
    else:
        print(format_analog(report))
        if args.plot:
            print(f"plot written to {args.plot}")
        if args.circuit:
            print(f"circuit drawing written to {args.circuit}")
    return 0
