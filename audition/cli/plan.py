"""``audition plan``: which cutoff and Q to set, and why."""

from __future__ import annotations

import json

from audition.cli.noiseopts import add_noise_options

HELP = "suggest a hiss filter from the survey: the best SNR gain within a treble-loss budget"


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
PLAN_OPTIONS = ("budget_db", "weighting", "orders", "max_peak_db")


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

    g.add_argument("--budget-db", type=float, default=default(1.0), metavar="B",
                   help="most programme treble (dB) the filter may take (default 1.0)")
    g.add_argument("--weighting", choices=("flat", "a", "itu468"), default=default("itu468"),
                   help="the weighting whose SNR gain is maximised (default itu468)")
    g.add_argument("--orders", type=parse_orders, default=default((2, 4)), metavar="2,4",
                   help="filter orders to search (default 2,4)")
    g.add_argument("--max-peak-db", type=float, default=default(1.5), metavar="DB",
                   help="largest resonant peak a candidate may have (default 1.5 dB: Q up to 1.0 at order 2)")
    if not with_auto:
        g.add_argument("--method", choices=("bilinear", "matched"), default="bilinear",
                       help="digitising method of the candidates (default bilinear)")
        g.add_argument("--highpass", type=float, metavar="HZ", help="add a rumble high-pass at HZ to every candidate")


def add_parser(sub) -> None:
    p = sub.add_parser("plan", help=HELP, description=(HELP[0].upper() + HELP[1:]) + ".")
    p.add_argument("input", metavar="IN", help="the recording")
    add_noise_options(p)
    add_plan_options(p)
    p.add_argument("--save", metavar="FILE.toml", help="write the choice as a plan file for render --plan")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--plot", metavar="FILE.png", help="draw the trade-off and the chosen filter over the spectra")
    p.set_defaults(run=run)


def settings_from_args(args):
    """The :class:`~audition.pipeline.PlanSettings` the planning options in ``args`` describe (defaults where not given)."""
    from audition.pipeline import PlanSettings

    base = PlanSettings()

    def pick(name):
        value = getattr(args, name, None)
        return getattr(base, name) if value is None else value

    return PlanSettings(budget_db=pick("budget_db"), weighting=pick("weighting"), orders=tuple(pick("orders")),
                        method=pick("method"), max_peak_db=pick("max_peak_db"),
                        highpass_hz=getattr(args, "highpass", None))


def make_plan(survey, args):
    """The plan for a survey with the planning options in ``args``."""
    from audition.cli.noiseopts import noise_from_args
    from audition.pipeline import plan_survey

    return plan_survey(survey, noise_from_args(args), settings_from_args(args))


def save_plan(pl, survey, path, source: str, overwrite: bool = True) -> None:
    """Write the choice as a plan file (atomically)."""
    from audition import presets, report
    from audition.errors import AuditionError

    if pl.choice is None:
        raise AuditionError(f"{path}: not written: no candidate meets the budget")
    import os

    name = os.path.splitext(os.path.basename(path))[0]
    spec = presets.FilterSpec.from_design(pl.choice.design, name, pl.explanation)
    text = spec.to_toml(
        predicted={"weighting": pl.weighting, "budget_db": pl.budget_db,
                   "snr_gain_db": pl.choice.snr_gain_db, "treble_loss_db": pl.choice.treble_loss_db},
        survey={"input": source, "crossover_hz": survey.crossover_hz, "noise_source": survey.noise_source,
                "noise_spans": [list(s) for s in survey.spans[:50]], "rate_hz": survey.rate_hz})
    report.write(path, text)


def format_plan(path, pl) -> str:
    w = pl.weighting
    lines = [f"{path}: plan for the best {w}-weighted SNR gain within {pl.budget_db:g} dB of treble loss "
             f"({pl.searched} candidates searched)"]
    if pl.choice is not None:
        c = pl.choice
        lines += ["", f"  choice: {c.label}", "", "  " + pl.explanation, ""]
    lines.append(f"  {'trade-off (best of each loss)':<36}{'SNR gain ' + w:>16}{'treble loss':>14}")
    shown = _near(pl)
    for cand in shown:
        mark = "  <- choice" if pl.choice is not None and cand.design is pl.choice.design else ""
        lines.append(f"  {cand.label:<36}{cand.snr_gain_db[w]:>13.2f} dB{cand.treble_loss_db:>11.2f} dB{mark}")
    for msg in pl.warnings:
        lines.append(f"  warning: {msg}")
    return "\n".join(lines)


def _near(pl, n: int = 7):
    """Up to n points of the Pareto front around the choice (or its gentle end)."""
    front = list(pl.front)
    if not front:
        return []
    at = 0
    if pl.choice is not None:
        losses = [c.treble_loss_db for c in front]
        at = min(range(len(front)), key=lambda i: abs(losses[i] - pl.choice.treble_loss_db))
        front[at] = pl.choice
    lo = max(0, at - n // 2)
    return front[lo:lo + n]


def run(args) -> int:
    from audition import audiofile
    from audition.cli.noiseopts import survey_file

    audiofile.info(args.input)
    if args.save:
        audiofile.check_output_path(args.save, inputs=(args.input,), overwrite=True)
    survey = survey_file(args.input, args)
    pl = make_plan(survey, args)
    if args.save:
        save_plan(pl, survey, args.save, str(args.input))
    if args.plot:
        from audition.plots.plan import plot_plan

        plot_plan(survey, pl, args.plot, title=str(args.input))
    if args.json:
        out = pl.to_dict()
        out["survey"] = survey.to_dict()
        print(json.dumps(out, indent=2))
    else:
        print(format_plan(args.input, pl))
        for what, p in (("plan", args.save), ("plot", args.plot)):
            if p:
                print(f"{what} written to {p}")
    return 0
