"""argparse ``type=`` functions for numbers: finite, in a stated range, one line naming the option.

argparse prefixes the message with the option (``argument --gain-db: ...``) and
:class:`audition.cli.OneLineParser` prints it on one line with exit status 2, so
``nan``, ``inf``, ``1e300`` and negative counts never reach the code that would
choke on them. The range of a value that depends on the file (a frequency
against its Nyquist) is checked later, against that file.
"""

from __future__ import annotations

import argparse
import math


def number(lo: float | None = None, hi: float | None = None, *, lo_open: bool = False, hi_open: bool = False,
           unit: str = "", why: str = ""):
    """A ``type=`` for a finite float within ``[lo, hi]`` (an end left out is unbounded; ``*_open`` excludes it)."""

    def parse(text: str) -> float:
        try:
            v = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
        u = f" {unit}" if unit else ""
        if not math.isfinite(v):
            raise argparse.ArgumentTypeError(f"{text!r}: must be a finite number" + (f" ({unit})" if unit else ""))
        bad = ((lo is not None and (v < lo or (lo_open and v == lo)))
               or (hi is not None and (v > hi or (hi_open and v == hi))))
        if bad:
            raise argparse.ArgumentTypeError(f"{text!r}: must satisfy {_range(lo, hi, lo_open, hi_open)}{u}"
                                             + (f"; {why}" if why else ""))
        return v

    parse.__name__ = "number"  # argparse names the type in its own messages
    return parse


def integer(lo: int | None = None, hi: int | None = None, *, why: str = ""):
    """A ``type=`` for an integer within ``[lo, hi]``."""

    def parse(text: str) -> int:
        try:
            v = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if (lo is not None and v < lo) or (hi is not None and v > hi):
            raise argparse.ArgumentTypeError(f"{text!r}: must satisfy {_range(lo, hi, False, False)}"
                                             + (f"; {why}" if why else ""))
        return v

    parse.__name__ = "integer"
    return parse


def _range(lo, hi, lo_open, hi_open) -> str:
    if lo is not None and hi is not None:
        return f"{lo:g} {'<' if lo_open else '<='} value {'<' if hi_open else '<='} {hi:g}"
    if lo is not None:
        return f"value {'>' if lo_open else '>='} {lo:g}"
    if hi is not None:
        return f"value {'<' if hi_open else '<='} {hi:g}"
    return "any finite value"


#: Any finite number: for options whose range the code they feed checks (with the file's rate, say),
#: one source of truth for plan files and options alike; this only keeps out nan and inf.
FINITE = number()
#: Seeds: numpy's generators take any non-negative integer (numpy.random.SeedSequence).
SEED = integer(0, why="a seed is a whole number, 0 or more")
