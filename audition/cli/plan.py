"""``audition plan``: which cutoff and Q to set, and why."""

from __future__ import annotations

import json

from audition.cli.noiseopts import add_noise_options

HELP = ("suggest a hiss filter from the survey: the one that takes away the most hiss heard while cutting "
        "audible programme by no more than a budget, or none")


def parse_orders(text: str) -> tuple[int, ...]:
    import argparse

    try:
        orders = tuple(int(x) for x in text.split(","))
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r}: give orders as a comma list, e.g. 2,4") from None
    if not orders or any(o < 1 or o > 8 for o in orders):
        raise argparse.ArgumentTypeError(f"{text!r}: each order must be from 1 to 8")
    return orders


#: The planning options that only mean something to a planner (--method and --highpass are the filter's own).
PLAN_OPTIONS = ("budget_db", "objective", "weighting", "orders", "max_peak_db", "max_overshoot_pct")


def add_plan_options(p, *, with_auto: bool = False) -> None:
    """The planning options; ``with_auto`` for a command where they go with ``--auto``.

    There --method and --highpass are the filter options' own, and every default is
    None, meaning "not given", so :func:`audition.cli.filteropts.filter_source` can
    refuse a planning option given without --auto; :func:`settings_from_args` fills
    in the defaults.
    """
    g = p.add_argument_group("planning (with --auto)" if with_auto else "planning")

    def default(value):
        return None if with_auto else value

    from audition.cli.values import FINITE

    g.add_argument("--budget-db", type=FINITE, default=default(1.0), metavar="B",
                   help="treble-loss budget: the largest cut (dB) the filter may make in any one-third-octave band "
                        "where the programme is heard (default 1.0)")
    g.add_argument("--objective", choices=("heard", "snr"), default=default("heard"),
                   help="heard: take away the most hiss heard over the programme (default); snr: the best "
                        "weighted SNR gain (see --weighting)")
    g.add_argument("--weighting", choices=("flat", "a", "itu468"), default=default("itu468"),
                   help="the weighting of --objective snr (default itu468)")
    g.add_argument("--orders", type=parse_orders, default=default((1, 2, 3, 4, 5, 6, 7, 8)), metavar="1,2,4",
                   help="filter orders to search (default 1 to 8)")
    g.add_argument("--max-peak-db", type=FINITE, default=default(1.5), metavar="DB",
                   help="largest resonant peak or passband ripple a candidate may have (default 1.5 dB: Q up to "
                        "1.0 at order 2)")
    g.add_argument("--max-overshoot-pct", type=FINITE, default=default(15.0), metavar="PCT",
                   help="largest step overshoot (ringing on transients) a candidate may have, percent of the step "
                        "(default 15: every Bessel, Butterworth up to order 6)")
    if not with_auto:
        g.add_argument("--method", choices=("bilinear", "matched"), default="bilinear",
                       help="digitising method of the candidates (default bilinear)")
        g.add_argument("--highpass", type=FINITE, metavar="HZ", help="add a rumble high-pass at HZ to every candidate")


def add_parser(sub) -> None:
    p = sub.add_parser("plan", help=HELP, description=(HELP[0].upper() + HELP[1:]) + ".")
    p.add_argument("input", metavar="IN", help="the recording")
    add_noise_options(p)
    add_plan_options(p)
    p.add_argument("--save", metavar="FILE.toml", help="write the choice as a plan file for render --plan")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--plot", metavar="FILE.png", help="draw the trade-off and the chosen filter over the spectra")
    p.add_argument("--overwrite", action="store_true", help="replace an existing --save or --plot file (never IN "
                   "or the noise clip)")
    p.set_defaults(run=run)


def check_file_rate(path, rate_hz: float) -> None:
    """Refuse a file at a rate no filter can be designed for, as render does (before the long survey)."""
    from audition.design.checks import check_rate
    from audition.errors import BadParameter

    try:
        check_rate(rate_hz)
    except BadParameter as exc:
        raise BadParameter(f"{path!r} at {rate_hz:g} Hz: {exc}") from None


def settings_from_args(args):
    """The :class:`~audition.pipeline.PlanSettings` the planning options in ``args`` describe (defaults where not given)."""
    from audition.pipeline import PlanSettings

    base = PlanSettings()

    def pick(name):
        value = getattr(args, name, None)
        return getattr(base, name) if value is None else value

    return PlanSettings(budget_db=pick("budget_db"), weighting=pick("weighting"), orders=tuple(pick("orders")),
                        method=pick("method"), max_peak_db=pick("max_peak_db"),
                        max_overshoot_pct=pick("max_overshoot_pct"),
                        highpass_hz=getattr(args, "highpass", None), objective=pick("objective"))


def make_plan(survey, args):
    """The plan for a survey with the planning options in ``args``."""
    from audition.cli.noiseopts import noise_from_args
    from audition.pipeline import plan_survey

    return plan_survey(survey, noise_from_args(args), settings_from_args(args))


def save_plan(pl, survey, path, source: str, overwrite: bool = True) -> None:
    """Write the choice as a plan file (atomically); ``path`` may be an :class:`audition.io.guard.Target`."""
    from audition import report
    from audition.plan import presets
    from audition.errors import AuditionError

    if pl.choice is None:
        raise AuditionError(f"{path}: not written: the plan is no filter ({pl.no_filter_reason})")
    import os

    name = os.path.splitext(os.path.basename(os.fspath(path)))[0]
    spec = presets.FilterSpec.from_design(pl.choice.design, name, pl.explanation)
    pr = pl.choice.predicted()
    text = spec.to_toml(
        predicted={"objective": pl.objective, "budget_db": pl.budget_db, "listening_level_db": pl.listening_level_db,
                   "treble_loss_db": pr["treble_loss_db"], "treble_loss_hz": pr["treble_loss_hz"],
                   "hiss_heard_before_sone": pr["hiss_heard"]["before_sone"],
                   "hiss_heard_after_sone": pr["hiss_heard"]["after_sone"],
                   "hiss_heard_reduction_pct": pr["hiss_heard"]["reduction_pct"],
                   "snr_gain_db": pr["snr_gain_db"]},
        survey={"input": source, "crossover_hz": survey.crossover_hz, "noise_source": survey.noise_source,
                "noise_spans": [list(s) for s in survey.spans[:50]], "rate_hz": survey.rate_hz})
    report.write(path, text)


def wrap(text: str, indent: str = "  ") -> str:
    """Wrap a paragraph to the terminal's width (at most 100 columns), never inside a word."""
    import shutil
    import textwrap

    import re

    width = max(40, min(100, shutil.get_terminal_size((100, 24)).columns))
    # a number stays on the line of its unit ("26 %", "8.0 kHz", "0.90 dB", "1.09 sone")
    glued = re.sub(r"(\d) (%|k?Hz|dB|sone)(?!\w)", "\\1\0\\2", text)
    return textwrap.fill(glued, width=width, initial_indent=indent, subsequent_indent=indent,
                         break_long_words=False, break_on_hyphens=False).replace("\0", " ")


def _row(c, pl) -> str:
    from audition.plan.explain import nominal

    h = c.hiss_heard
    at = "" if c.treble_loss_hz is None else f" at {nominal(c.treble_loss_hz)}"
    snr = c.snr_gain_db.get(pl.weighting)
    return (f"  {c.label:<48.48}{c.treble_loss_db:>6.2f} dB{at:<12}{h.reduction_pct:>5.0f} %"
            f"{'' if snr is None else f'{snr:>8.2f} dB':>11}")


def format_plan(path, pl) -> str:
    what = ("the filter that takes away the most hiss heard" if pl.objective == "heard"
            else f"the best {pl.weighting}-weighted SNR gain")
    lines = [f"{path}: plan for {what} within {pl.budget_db:g} dB of treble loss, listening at "
             f"{pl.listening_level_db:g} dB SPL for a full-scale sine ({pl.searched:,} candidates searched)", ""]
    if pl.choice is not None:
        lines.append(f"  choice: {pl.choice.label}")
    else:
        lines.append("  choice: no filter")
    lines += ["", wrap(pl.explanation), ""]
    lines.append(f"  {'trade-off (best for each budget)':<48}{'treble loss':<20}{'hiss':>7}"
                 f"{'SNR ' + pl.weighting:>11}")
    lines.append(f"  {'':<48}{'(largest cut, band)':<20}{'heard':>7}{'(dB)':>11}")
    shown = list(pl.front)
    for c in shown:
        mark = "  <- choice" if pl.choice is not None and c.label == pl.choice.label else ""
        lines.append(_row(c, pl) + mark)
    if pl.choice is not None and not any(c.label == pl.choice.label for c in shown):
        lines.append(_row(pl.choice, pl) + "  <- choice")
    lines.append("  (hiss heard: the share of the heard hiss taken away, ISO 532-1 loudness over every frame)")
    for msg in pl.warnings:
        lines.append(wrap(f"warning: {msg}"))
    return "\n".join(lines)


def run(args) -> int:
    from audition.cli.noiseopts import survey_file
    from audition.io import guard, reader

    check_file_rate(args.input, reader.info(args.input).rate_hz)
    inputs = (args.input, args.noise_clip)
    save = guard.target(args.save, inputs=inputs, overwrite=args.overwrite, what="--save")
    plot = guard.target(args.plot, inputs=inputs, overwrite=args.overwrite, what="--plot")
    guard.check_distinct([save, plot])
    survey = survey_file(args.input, args)
    pl = make_plan(survey, args)
    saved = bool(args.save) and pl.choice is not None
    if saved:
        save_plan(pl, survey, save, str(args.input))
    if args.plot:
        from audition.plots.plan import plot_plan

        plot_plan(survey, pl, plot, title=str(args.input))
    if args.json:
        out = pl.to_dict()
        out["survey"] = survey.to_dict()
        print(json.dumps(out, indent=2))
    else:
        print(format_plan(args.input, pl))
        for what, p in (("plan", args.save if saved else None), ("plot", args.plot)):
            if p:
                print(f"{what} written to {p}")
    if args.save and not saved:
        import sys

        print(f"audition plan: {args.save}: no plan file written: the answer is no filter", file=sys.stderr)
    return 0
