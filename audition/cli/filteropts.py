"""Filter options shared by every subcommand that takes a filter, and where a filter comes from.

``add_filter_options`` adds them to a parser; ``design_from_args`` turns them
into a :class:`~audition.design.Design` at the rate of the file at hand, so
an f0 above that file's Nyquist is refused with the limit for that rate.
``add_source_options`` adds the other ways of giving a filter (``--plan``,
``--preset`` and, where a command plans, ``--auto``), and ``filter_source`` is
the one place that decides which way was taken and refuses a mixture.
"""

from __future__ import annotations

import argparse

from audition.cli.values import FINITE
from audition.errors import BadParameter

#: Kept equal to audition.design.checks.MAX_GAIN_DB (tests check it), so the help needs no numpy import.
MAX_GAIN_DB = 60.0

ALIGNMENT_CHOICES = ("butterworth", "bessel", "linkwitz-riley", "chebyshev")
METHOD_CHOICES = ("bilinear", "matched")


def parse_section(text: str) -> tuple[float, float | None]:
    """``"F0:Q"`` -> (f0_hz, q); ``"F0"`` alone is a first-order section."""
    f0_text, _, q_text = text.partition(":")
    try:
        f0 = FINITE(f0_text)
        q = FINITE(q_text) if q_text else None
    except argparse.ArgumentTypeError as exc:
        raise argparse.ArgumentTypeError(f"{text!r}: a section is F0:Q in Hz and plain number (e.g. 9000:0.707), "
                                         f"or F0 alone for a first-order section ({exc})") from None
    return f0, q


def add_filter_options(parser: argparse.ArgumentParser, *, title: str = "filter") -> argparse._ArgumentGroup:
    g = parser.add_argument_group(title, "a low-pass: --f0 with --q (second order), or --order with --alignment, "
                                         "or explicit --section F0:Q cascades")
    g.add_argument("--f0", type=FINITE, metavar="HZ", help="cutoff (natural frequency f0) in Hz")
    g.add_argument("--q", type=FINITE, metavar="Q", help="Q of a second-order low-pass (default 0.7071, Butterworth)")
    g.add_argument("--order", type=int, default=2, metavar="N", help="filter order (default 2)")
    g.add_argument("--alignment", choices=ALIGNMENT_CHOICES,
                   help="named alignment for --order (Butterworth, Bessel and Chebyshev are -3.01 dB at f0, "
                        "Linkwitz-Riley -6.02 dB)")
    g.add_argument("--ripple-db", type=FINITE, metavar="DB",
                   help="passband ripple of the Chebyshev (type I) alignment, dB (needed with it)")
    g.add_argument("--section", action="append", type=parse_section, metavar="F0:Q",
                   help="one second-order section (repeat for a cascade); F0 alone is first order")
    g.add_argument("--gain-db", type=FINITE, default=0.0, metavar="DB",
                   help=f"passband gain H0 in dB, within +-{MAX_GAIN_DB:g} (default 0)")
    g.add_argument("--highpass", type=FINITE, metavar="HZ", help="add a second-order rumble high-pass at HZ")
    # None marks "not given", so a --method mixed with --plan/--preset is caught, not silently dropped
    g.add_argument("--method", choices=METHOD_CHOICES,
                   help="digitising method: prewarped bilinear (default) or magnitude-matched")
    return g


def has_filter(args: argparse.Namespace) -> bool:
    return getattr(args, "f0", None) is not None or bool(getattr(args, "section", None))


def _check_combination(args: argparse.Namespace) -> None:
    """Refuse filter options that contradict each other (their values are checked against a rate later)."""
    if not has_filter(args):
        if args.q is not None or args.alignment is not None or args.order != 2 or args.ripple_db is not None:
            raise BadParameter("--q, --order, --alignment and --ripple-db need --f0 HZ")
    elif args.section:
        if (args.f0 is not None or args.q is not None or args.alignment is not None or args.order != 2
                or args.ripple_db is not None):
            raise BadParameter("--section gives the whole cascade: leave out --f0, --q, --order, --alignment and "
                               "--ripple-db")


def design_from_args(args: argparse.Namespace, rate_hz: float):
    """The design the filter options describe at ``rate_hz``, or None when none were given."""
    _check_combination(args)
    spec = spec_from_options(args)
    return None if spec is None else spec.design(rate_hz)


def spec_from_options(args: argparse.Namespace):
    """The filter options as a rate-free :class:`~audition.plan.presets.FilterSpec`, or None when none were given."""
    from audition.plan.presets import FilterSpec

    _check_combination(args)
    if not has_filter(args):
        return None
    return FilterSpec("command-line", "filter options given on the command line", f0_hz=args.f0, q=args.q,
                      order=args.order, alignment=args.alignment, sections=tuple(args.section or ()),
                      method=args.method or "bilinear", gain_db=args.gain_db, highpass_hz=args.highpass,
                      ripple_db=args.ripple_db)


def no_filter(*, auto: bool = False, what: str = "a filter") -> BadParameter:
    """The error for a command that needs a filter and was given none."""
    ways = "--plan FILE.toml, --preset NAME or --auto" if auto else "--plan FILE.toml or --preset NAME"
    return BadParameter(f"give {what}: --f0 HZ [--q Q | --order N --alignment NAME], --section F0:Q ..., {ways}")


def add_source_options(parser: argparse.ArgumentParser, *, auto_help: str | None = None,
                       title: str = "where the filter comes from") -> argparse._ArgumentGroup:
    """``--plan`` and ``--preset``, the written-down ways of giving the filter.

    With ``auto_help``, also ``--auto`` (plan the filter from a survey of each
    file) and the planning options that go with it.
    """
    ways = "the filter options, --plan, --preset" + (" or --auto" if auto_help else "")
    g = parser.add_argument_group(title, f"one of: {ways}")
    g.add_argument("--plan", metavar="FILE.toml", help="a plan file (from audition plan --save) or any preset file")
    g.add_argument("--preset", metavar="NAME", help="a preset by name (see audition presets)")
    if auto_help:
        from audition.cli.plan import add_plan_options

        g.add_argument("--auto", action="store_true", help=auto_help)
        add_plan_options(parser, with_auto=True)
    return g


def filter_source(args: argparse.Namespace):
    """Where the filter comes from: ``(spec, auto)``, at most one of them not None.

    ``spec`` is a :class:`~audition.plan.presets.FilterSpec` from the filter options,
    ``--plan`` or ``--preset``; ``auto`` the :class:`~audition.pipeline.PlanSettings`
    of ``--auto``. ``(None, None)`` when no filter was given: the caller decides
    whether that is an error (:func:`no_filter`).

    Raises
    ------
    BadParameter
        Two ways given at once, an option the chosen way ignores, or a planning
        option without --auto.
    """
    from audition.plan import presets
    from audition.cli.plan import PLAN_OPTIONS, settings_from_args

    plan_file, preset = getattr(args, "plan", None), getattr(args, "preset", None)
    auto = bool(getattr(args, "auto", False))
    given = [name for name, on in (("filter options (--f0/--section)", has_filter(args)), ("--plan", plan_file),
                                   ("--preset", preset), ("--auto", auto)) if on]
    if len(given) > 1:
        raise BadParameter(f"{' and '.join(given)}: give the filter one way only")
    if hasattr(args, "auto") and not auto:
        plan_given = [o for o in PLAN_OPTIONS if getattr(args, o, None) is not None]
        if plan_given:
            raise BadParameter(f"--{plan_given[0].replace('_', '-')} applies to --auto only")
    if auto:
        if (args.q is not None or args.alignment is not None or args.order != 2 or args.gain_db != 0.0
                or args.ripple_db is not None):
            raise BadParameter("--auto chooses the filter: leave out --q, --order, --alignment, --ripple-db and --gain-db "
                               "(use --orders to choose the orders searched)")
        return None, settings_from_args(args)
    if plan_file or preset:
        mixed = [o for o, on in (("--q", args.q is not None), ("--order", args.order != 2),
                                 ("--alignment", args.alignment is not None), ("--gain-db", args.gain_db != 0.0),
                                 ("--ripple-db", args.ripple_db is not None),
                                 ("--highpass", args.highpass is not None), ("--method", args.method is not None))
                 if on]
        if mixed:
            raise BadParameter(f"{mixed[0]}: the {'plan' if plan_file else 'preset'} gives the whole filter; "
                               "edit the file (or a copy) instead")
        return (presets.load(plan_file) if plan_file else presets.find(preset)), None
    return spec_from_options(args), None
