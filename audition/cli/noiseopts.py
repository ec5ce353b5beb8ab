"""Noise-reference options shared by survey, plan, render and batch, and the survey of one file."""

from __future__ import annotations

import argparse


def parse_span(text: str) -> tuple[float, float]:
    """``"START:END"`` in seconds -> (start, end)."""
    a, sep, b = text.partition(":")
    try:
        if not sep:
            raise ValueError
        return float(a), float(b)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r}: a noise span is START:END in seconds, e.g. 0.2:1.5") from None


def add_noise_options(parser: argparse.ArgumentParser) -> None:
    g = parser.add_argument_group("noise reference", "where the hiss alone is heard; found automatically "
                                  "from the quietest frames when neither option is given")
    g.add_argument("--noise-span", action="append", type=parse_span, metavar="START:END",
                   help="a stretch of hiss alone, in seconds (repeatable), e.g. tape leader before the music")
    g.add_argument("--noise-clip", metavar="FILE", help="a separate noise-only recording (leader, run-out groove)")
    g.add_argument("--margin-db", type=float, default=0.0, metavar="DB",
                   help="crossover margin: the programme must sit this far below the hiss (default 0)")
    g.add_argument("--treble-from", type=float, default=2000.0, metavar="HZ",
                   help="lower edge of the treble band whose loss is counted (default 2000 Hz)")


def survey_file(path, args, *, name: str | None = None):
    """Survey the file at ``path`` with the noise options in ``args`` (streaming, flat memory)."""
    from audition import audiofile, spectrum
    from audition.errors import BadParameter

    inf = audiofile.info(path)
    noise_blocks = noise_rate = None
    if getattr(args, "noise_clip", None):
        ninf = audiofile.info(args.noise_clip)
        if ninf.channels != inf.channels:
            raise BadParameter(f"{args.noise_clip}: the noise clip has {ninf.channels} channel(s), "
                               f"{path} has {inf.channels}; they must agree")
        noise_blocks, noise_rate = audiofile.blocks(args.noise_clip), ninf.rate_hz
    return spectrum.survey_blocks(audiofile.blocks(path), inf.rate_hz, inf.channels, frames=inf.frames,
                                  noise_spans=args.noise_span, noise_blocks=noise_blocks, noise_rate_hz=noise_rate,
                                  margin_db=args.margin_db, name=name or str(path))
