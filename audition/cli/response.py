"""``audition response``: the figures and picture of one filter design."""

from __future__ import annotations

import json

from audition.cli.filteropts import add_filter_options, add_source_options

HELP = "show a filter design: digital sections, deviation from the analog response, figures"


def add_parser(sub) -> None:
    p = sub.add_parser("response", help=HELP, description=(HELP[0].upper() + HELP[1:]) + ".")
    add_filter_options(p)
    add_source_options(p)
    from audition.cli.values import FINITE

    p.add_argument("--rate", type=FINITE, default=48000.0, metavar="HZ", help="sample rate in Hz (default 48000)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of the table")
    p.add_argument("--plot", metavar="FILE.png", help="draw magnitude and phase, analog against digital")
    p.add_argument("--overwrite", action="store_true", help="replace an existing --plot file (never the plan file)")
    p.set_defaults(run=run)


def report(d) -> dict:
    """The JSON object of a design: its sections and figures, and every method's deviation."""
    from audition.design import METHODS

    fig = d.figures()
    lows = [s for s in d.sections if s.kind == "lowpass"]
    out = {
        "rate": d.rate_hz,
        "method": d.method,
        "f0_hz": d.f0_hz,
        # one section's Q is the design's; a cascade has no single Q (its sections' are listed)
        "q": d.q if len(lows) == 1 else None,
        "ripple_db": d.ripple_db,
        "order": d.order,
        "alignment": d.alignment,
        "highpass_hz": d.highpass_hz,
        "gain_db": d.passband_gain_db,
        "analog_sections": d.to_dict()["analog_sections"],
        "sections": d.to_dict()["sections"],
        "max_deviation_db": fig.max_deviation_db,
        "max_deviation_hz": fig.max_deviation_hz,
        "deviation_band_hz": list(fig.deviation_band_hz),
        "minus3db_hz": fig.minus3db_hz,
        "peak_gain_db": fig.peak_gain_db,
        "peak_hz": fig.peak_hz,
        "overshoot_pct": fig.overshoot_pct,
        "prototype_overshoot_pct": fig.prototype_overshoot_pct,
        "group_delay_ms": {"1000": fig.group_delay_ms_1k, "f0": fig.group_delay_ms_f0},
        "methods": {},
    }
    for m in METHODS:
        dev_db, dev_hz = (fig.max_deviation_db, fig.max_deviation_hz) if m == d.method else d.with_method(m).max_deviation()
        out["methods"][m] = {"max_deviation_db": dev_db, "max_deviation_hz": dev_hz}
    return out


def format_table(r: dict) -> str:
    def hz(v):
        return "—" if v is None else f"{v:,.1f} Hz"

    def coeffs(values):
        return ", ".join(f"{round(x, 10) + 0.0:+.10f}" for x in values)  # + 0.0: no "-0.0000000000"

    def db(v):
        return f"{round(v, 2) + 0.0:+.2f} dB"  # + 0.0: no "-0.00" for a flat passband

    n_low = sum(a["kind"] == "lowpass" for a in r["analog_sections"])
    if r["alignment"]:
        what = f"order {r['order']} {r['alignment']}" + (f", {r['ripple_db']:g} dB ripple" if r.get("ripple_db") else "")
    elif n_low > 1:
        what = f"order {r['order']}, a cascade of the sections below"
    else:
        what = f"order {r['order']}" + (f", Q {r['q']:.4g}" if r["q"] else "")
    lines = [
        f"low-pass f0 {r['f0_hz']:,.1f} Hz, {what}, H0 {r['gain_db']:+.2f} dB"
        + (f", rumble high-pass {r['highpass_hz']:,.1f} Hz" if r["highpass_hz"] else ""),
        f"digitised at {r['rate']:,.0f} Hz by the {r['method']} method, {len(r['sections'])} section(s):",
    ]
    for i, (a, s) in enumerate(zip(r["analog_sections"], r["sections"]), 1):
        q = "first order" if a["q"] is None else f"Q {a['q']:.4f}"
        lines.append(f"  {i}. {a['kind']:<8} f0 {a['f0_hz']:>10,.1f} Hz  {q:<11}  "
                     f"b = [{coeffs(s['b'])}]  a = [{coeffs(s['a'])}]")
    lo, hi = r["deviation_band_hz"]
    lines += [
        "",
        f"  {'-3.01 dB (half power)':<28}{hz(r['minus3db_hz'])}",
        f"  {'peak gain':<28}{db(r['peak_gain_db'])} at {hz(r['peak_hz'])}",
        f"  {'step overshoot':<28}" + ("—" if r["overshoot_pct"] is None else
                                        f"{r['prototype_overshoot_pct']:.2f} % analog prototype, "
                                        f"{r['overshoot_pct']:.2f} % sample by sample"),
        f"  {'group delay at 1 kHz':<28}{r['group_delay_ms']['1000']:.4f} ms",
        f"  {'group delay at f0':<28}{r['group_delay_ms']['f0']:.4f} ms",
        f"  digital minus analog magnitude, worst point in {lo:,.0f} Hz .. {hi:,.0f} Hz:",
    ]
    for m, v in r["methods"].items():
        mark = "  (this design)" if m == r["method"] else ""
        lines.append(f"    {m:<10}{v['max_deviation_db']:+8.3f} dB at {hz(v['max_deviation_hz'])}{mark}")
    return "\n".join(lines)


def run(args) -> int:
    from audition.cli.filteropts import filter_source, no_filter
    from audition.design import check_rate
    from audition.plan import presets

    from audition.io import guard

    check_rate(args.rate)
    spec, _ = filter_source(args)
    if spec is None:
        raise no_filter()
    plot = guard.target(args.plot, inputs=(spec.source or None,), overwrite=args.overwrite, what="--plot")
    d = presets.check_design(spec, args.rate)
    r = report(d)
    if args.plot:
        from audition.plots.response import plot_response

        plot_response(d, plot)
    if args.json:
        print(json.dumps(r, indent=2))
    else:
        print(format_table(r))
        if args.plot:
            print(f"plot written to {args.plot}")
    return 0
