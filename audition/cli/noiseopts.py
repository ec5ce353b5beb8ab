"""Noise-reference options shared by survey, plan, render and batch, and the survey of one file."""

from __future__ import annotations

import argparse
import math

from audition.cli.values import FINITE, number


def parse_span(text: str) -> tuple[float, float]:
    """``"START:END"`` in seconds -> (start, end)."""
    a, sep, b = text.partition(":")
    try:
        if not sep:
            raise ValueError
        start, end = float(a), float(b)
        if not (math.isfinite(start) and math.isfinite(end)):  # the order and the file's length are checked later
            raise ValueError
        return start, end
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r}: a noise span is START:END in finite seconds, "
                                         "e.g. 0.2:1.5") from None


def add_noise_options(parser: argparse.ArgumentParser, *, auto: bool = False) -> None:
    """The noise-reference options; ``auto`` for a command with --auto (adds --accept-doubtful-noise)."""
    g = parser.add_argument_group("noise reference", "where the hiss alone is heard; found automatically "
                                  "from the quietest frames when neither option is given")
    g.add_argument("--noise-span", action="append", type=parse_span, metavar="START:END",
                   help="a stretch of hiss alone, in seconds (repeatable), e.g. tape leader before the music")
    g.add_argument("--noise-clip", metavar="FILE", help="a separate noise-only recording (leader, run-out groove)")
    g.add_argument("--margin-db", type=number(-60.0, 60.0, unit="dB"), default=0.0, metavar="DB",
                   help="the programme counts as heard in a band where it stands this far above the hiss "
                        "(default 0); the crossover likewise")
    g.add_argument("--treble-from", type=FINITE, default=2000.0, metavar="HZ",
                   help="lowest band whose cut counts as treble loss (default 2000 Hz)")
    g.add_argument("--listening-level", type=number(0.0, 140.0, unit="dB SPL"), default=100.0, metavar="DB",
                   help="sound pressure level (dB SPL) at which a full-scale sine would play: what is heard "
                        "depends on it (default 100, so programme near -20 dBFS plays near 80 dB SPL; common "
                        "practice for calibrated monitoring, not a standard)")
    if auto:
        g.add_argument("--accept-doubtful-noise", action="store_true",
                       help="with --auto, plan even when the noise reference found automatically is doubtful "
                            "(confidence low); without it --auto stops and says which spans it found")


def noise_from_args(args):
    """The :class:`~audition.pipeline.NoiseReference` the noise options in ``args`` describe."""
    from audition.pipeline import NoiseReference

    spans = getattr(args, "noise_span", None)
    return NoiseReference(spans=None if not spans else tuple(tuple(s) for s in spans),
                          clip=getattr(args, "noise_clip", None) or None,
                          margin_db=getattr(args, "margin_db", 0.0), treble_from_hz=getattr(args, "treble_from", 2000.0),
                          listening_level_db=getattr(args, "listening_level", 100.0),
                          accept_doubtful=bool(getattr(args, "accept_doubtful_noise", False)))


def gave_noise(args) -> bool:
    """True when any noise-reference option differs from its default."""
    return bool(getattr(args, "noise_span", None) or getattr(args, "noise_clip", None)
                or getattr(args, "margin_db", 0.0) != 0.0 or getattr(args, "treble_from", 2000.0) != 2000.0
                or getattr(args, "listening_level", 100.0) != 100.0)


def survey_file(path, args, *, name: str | None = None):
    """Survey the file at ``path`` with the noise options in ``args`` (streaming, flat memory)."""
    from audition.pipeline import survey_path

    return survey_path(path, noise_from_args(args))
