"""Filter options shared by every subcommand that takes a filter.

``add_filter_options`` adds them to a parser; ``design_from_args`` turns them
into a :class:`~audition.design.Design` at the rate of the file at hand, so
an f0 above that file's Nyquist is refused with the limit for that rate.
"""

from __future__ import annotations

import argparse

from audition.errors import BadParameter

ALIGNMENT_CHOICES = ("butterworth", "bessel", "linkwitz-riley")
METHOD_CHOICES = ("bilinear", "matched")


def parse_section(text: str) -> tuple[float, float | None]:
    """``"F0:Q"`` -> (f0_hz, q); ``"F0"`` alone is a first-order section."""
    f0_text, _, q_text = text.partition(":")
    try:
        f0 = float(f0_text)
        q = float(q_text) if q_text else None
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r}: a section is F0:Q in Hz and plain number (e.g. 9000:0.707), "
                                         "or F0 alone for a first-order section") from None
    return f0, q


def add_filter_options(parser: argparse.ArgumentParser, *, title: str = "filter") -> argparse._ArgumentGroup:
    g = parser.add_argument_group(title, "a low-pass: --f0 with --q (second order), or --order with --alignment, "
                                         "or explicit --section F0:Q cascades")
    g.add_argument("--f0", type=float, metavar="HZ", help="cutoff (natural frequency f0) in Hz")
    g.add_argument("--q", type=float, metavar="Q", help="Q of a second-order low-pass (default 0.7071, Butterworth)")
    g.add_argument("--order", type=int, default=2, metavar="N", help="filter order (default 2)")
    g.add_argument("--alignment", choices=ALIGNMENT_CHOICES,
                   help="named alignment for --order (Bessel is normalised to -3.01 dB at f0)")
    g.add_argument("--section", action="append", type=parse_section, metavar="F0:Q",
                   help="one second-order section (repeat for a cascade); F0 alone is first order")
    g.add_argument("--gain-db", type=float, default=0.0, metavar="DB", help="passband gain H0 in dB (default 0)")
    g.add_argument("--highpass", type=float, metavar="HZ", help="add a second-order rumble high-pass at HZ")
    g.add_argument("--method", choices=METHOD_CHOICES, default="bilinear",
                   help="digitising method: prewarped bilinear (default) or magnitude-matched")
    return g


def has_filter(args: argparse.Namespace) -> bool:
    return getattr(args, "f0", None) is not None or bool(getattr(args, "section", None))


def design_from_args(args: argparse.Namespace, rate_hz: float):
    """The design the filter options describe at ``rate_hz``, or None when none were given."""
    from audition import design

    if not has_filter(args):
        if args.q is not None or args.alignment is not None or args.order != 2:
            raise BadParameter("--q, --order and --alignment need --f0 HZ")
        return None
    if args.section:
        if args.f0 is not None or args.q is not None or args.alignment is not None or args.order != 2:
            raise BadParameter("--section gives the whole cascade: leave out --f0, --q, --order and --alignment")
        return design.from_sections(args.section, rate_hz, gain_db=args.gain_db, method=args.method,
                                    highpass_hz=args.highpass)
    return design.lowpass(args.f0, rate_hz, q=args.q, order=args.order, alignment=args.alignment,
                          gain_db=args.gain_db, method=args.method, highpass_hz=args.highpass)
