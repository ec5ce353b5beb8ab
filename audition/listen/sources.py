"""The versions to listen to: one region of a file, pre-rendered through each filter, loudness-matched.

Every version is rendered once, before playback, in float64 through
:class:`audition.streamfilter.StreamingFilter` (the filter of ``audition render``),
starting :data:`PREROLL_SECONDS` before the region so the filter has settled
when the region begins, and running :data:`TAIL_SECONDS` past its end (what the
player fades out at the loop wrap). For an output that runs at another rate
than the file, the rendered span is converted to that rate (:func:`convert_rate`)
before the loop is cut from it. The samples are then kept as float32, what
the sound card is fed.

Memory: a region may hold up to :data:`MAX_REGION_SAMPLES` samples per
version (frames x channels; 5 minutes of stereo at 48 kHz, 10 of mono), i.e.
at most 115 MB per version.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from audition.errors import BadParameter

PREROLL_SECONDS = 1.0
TAIL_SECONDS = 0.05
MAX_REGION_SAMPLES = 5 * 60 * 48000 * 2
#: The shortest region: loudness (BS.1770-4) needs at least one 400 ms gating block.
MIN_REGION_SECONDS = 1.0


@dataclass(frozen=True)
class Version:
    """One version of the region.

    Attributes
    ----------
    label : str
        The letter it is played by (A, B, C).
    name : str
        What it is ("original", "low-pass 9,000 Hz Q 0.707", a preset name ...).
    samples : ndarray (frames, channels), float32
        The region followed by its continuation (``tail_frames``).
    loudness_lkfs : float
        ITU-R BS.1770-4 integrated loudness of the region (without the tail).
    gain_db : float
        Gain applied when playing, dB (0 without matching).
    design : object or None
        The :class:`~audition.design.Design` used, None for the original.
    """

    label: str
    name: str
    samples: np.ndarray = field(repr=False)
    loudness_lkfs: float
    gain_db: float = 0.0
    design: object = None

    def to_dict(self) -> dict:
        return {"label": self.label, "name": self.name, "loudness_lkfs": self.loudness_lkfs,
                "gain_db": self.gain_db, "filter": None if self.design is None else self.design.to_dict()}


@dataclass(frozen=True)
class Region:
    """Where the loop lies in the file, and the versions of it.

    Attributes
    ----------
    rate_hz : float
        Sample rate of the versions' samples, Hz: what is played (the file's
        rate, or the output rate they were converted to).
    start_frame : int
        First frame of the loop in the file, at ``file_rate_hz``.
    region_frames, tail_frames : int
        Length of the loop and of the continuation after it, at ``rate_hz``.
    file_rate_hz : float
        Sample rate of the file, Hz (0 at construction means ``rate_hz``).
    """

    path: str
    rate_hz: float
    channels: int
    start_frame: int
    region_frames: int
    tail_frames: int
    versions: tuple[Version, ...]
    level_matched: bool
    file_rate_hz: float = 0.0

    def __post_init__(self):
        if not self.file_rate_hz:
            object.__setattr__(self, "file_rate_hz", self.rate_hz)

    @property
    def converted(self) -> bool:
        """True when the versions were converted from the file's rate to another one."""
        return self.rate_hz != self.file_rate_hz

    @property
    def start_seconds(self) -> float:
        return self.start_frame / self.file_rate_hz

    @property
    def seconds(self) -> float:
        return self.region_frames / self.rate_hz


def region_frames_for(info, start_seconds: float | None, end_seconds: float | None) -> tuple[int, int]:
    """(start_frame, frames) of the region asked for in a file of ``info``, checked."""
    rate = info.rate_hz
    start = 0.0 if start_seconds is None else float(start_seconds)
    end = info.seconds if end_seconds is None else float(end_seconds)
    if not (math.isfinite(start) and 0.0 <= start < info.seconds):
        raise BadParameter(f"--start {start:g}: must lie in 0 ... {info.seconds:.3f} s (the length of {info.path!r})")
    if not (math.isfinite(end) and start < end):
        raise BadParameter(f"--end {end:g}: must come after --start {start:g} s")
    end = min(end, info.seconds)
    a, b = int(round(start * rate)), int(round(end * rate))
    if b - a < MIN_REGION_SECONDS * rate:
        raise BadParameter(f"region {start:g} ... {end:g} s of {info.path!r}: at least {MIN_REGION_SECONDS:g} s "
                           "is needed (loudness matching measures 400 ms blocks)")
    max_frames = MAX_REGION_SAMPLES // info.channels
    if b - a > max_frames:
        raise BadParameter(f"region {start:g} ... {end:g} s of {info.path!r}: at most {max_frames / rate:.0f} s "
                           f"fit in memory for {info.channels} channel(s) at {rate:g} Hz; choose a shorter one "
                           "with --start/--end")
    return a, b - a


def read_span(path, first: int, frames: int) -> np.ndarray:
    """Frames [first, first + frames) of a file as float64 (fewer at its end)."""
    from audition.io.formats import BLOCK_FRAMES
    from audition.io.reader import AudioReader

    parts, pos = [], 0
    with AudioReader(path, hash_input=False) as r:
        while pos < first + frames:
            x = r.read(min(BLOCK_FRAMES, first + frames - pos))
            if not len(x):
                break
            lo, hi = max(first - pos, 0), len(x)
            if lo < hi:
                parts.append(x[lo:hi])
            pos += len(x)
        channels = r.channels
    return np.concatenate(parts, axis=0) if parts else np.zeros((0, channels))


def render_version(span: np.ndarray, design) -> np.ndarray:
    """The span through ``design``'s sections (one pass, filter at rest before the span)."""
    from audition.streamfilter import StreamingFilter

    if design is None:
        return span
    return StreamingFilter(design.sos, span.shape[1])(span)


#: Conversion filter of :func:`convert_rate`: Kaiser-windowed sinc, this many input samples
#: each side of an output sample, cut off at this fraction of the lower rate's Nyquist
#: frequency, Kaiser beta (about 100 dB of stopband attenuation).
CONVERT_HALF_TAPS = 64
CONVERT_CUTOFF = 0.95
CONVERT_KAISER_BETA = 10.0


def rate_ratio(from_hz: float, to_hz: float) -> tuple[int, int]:
    """(up, down): the conversion from ``from_hz`` to ``to_hz`` as the smallest whole ratio."""
    from fractions import Fraction

    if not all(float(r).is_integer() and 1000 <= r <= 768000 for r in (from_hz, to_hz)):
        raise BadParameter(f"rates {from_hz:g} -> {to_hz:g} Hz: sample-rate conversion needs whole rates "
                           "of 1,000 ... 768,000 Hz")
    ratio = Fraction(int(to_hz), int(from_hz))
    if max(ratio.numerator, ratio.denominator) > 4000:
        raise BadParameter(f"rates {from_hz:g} -> {to_hz:g} Hz: the ratio {ratio.numerator}/{ratio.denominator} "
                           "is too awkward to convert (choose a common rate such as 44100 or 48000 Hz)")
    return ratio.numerator, ratio.denominator


def convert_rate(x: np.ndarray, from_hz: float, to_hz: float) -> np.ndarray:
    """``x`` (frames, channels) converted from ``from_hz`` to ``to_hz`` by polyphase filtering.

    Notes
    -----
    ``scipy.signal.resample_poly`` with a Kaiser-windowed sinc of
    ``2 * CONVERT_HALF_TAPS * max(up, down) + 1`` taps at the intermediate rate,
    cut off at ``CONVERT_CUTOFF`` of the lower Nyquist frequency. Between 44.1 and
    48 kHz (160/147) that is flat within 0.01 dB up to 20 kHz, -7 dB at 21 kHz and
    at least 99 dB down above 22.05 kHz (its ``scipy.signal.freqz``, computed here).
    The samples outside ``x`` count as silence, so the caller converts a span with
    some margin before and after the part it keeps.
    """
    from scipy.signal import firwin, resample_poly

    up, down = rate_ratio(from_hz, to_hz)
    if up == down:
        return x
    m = max(up, down)
    h = firwin(2 * CONVERT_HALF_TAPS * m + 1, CONVERT_CUTOFF / m, window=("kaiser", CONVERT_KAISER_BETA))
    return resample_poly(x, up, down, axis=0, window=h)  # resample_poly scales h by up itself


def build_region(path, candidates, *, start_seconds=None, end_seconds=None, level_match: bool = True,
                 labels: str = "ABC", out_rate_hz: float | None = None) -> Region:
    """Read the region once and make every version of it.

    Parameters
    ----------
    path : str
        The sound file (only read).
    candidates : sequence of (name, design_or_None) pairs
        In playing order; a design is digitised at the file's rate by the caller
        (see :func:`designs_at_rate`), None means the original.
    start_seconds, end_seconds : float, optional
        The loop (default: the whole file).
    level_match : bool
        Give each version the gain that makes its BS.1770-4 integrated loudness
        over the region equal to that of the quietest version (so every gain is
        <= 0 dB and nothing is pushed into the limiter).
    out_rate_hz : float, optional
        Convert every version to this rate (:func:`convert_rate`), for an output
        that runs at another rate than the file. Loudness is measured on the
        converted versions, what is heard.

    Raises
    ------
    BadParameter
        A region too short or too long, or a silent region that has no loudness
        to match.
    """
    from audition.io import reader
    from audition.loudness import gain_to_match_db, integrated_lkfs

    info = reader.info(path)
    start, frames = region_frames_for(info, start_seconds, end_seconds)
    pre = min(start, int(round(PREROLL_SECONDS * info.rate_hz)))
    tail = int(round(TAIL_SECONDS * info.rate_hz))
    span = read_span(path, start - pre, pre + frames + tail)
    rate = info.rate_hz if out_rate_hz is None else float(out_rate_hz)
    out_pre, out_frames = pre, frames
    if rate != info.rate_hz:
        up, down = rate_ratio(info.rate_hz, rate)
        out_pre, out_frames = round(pre * up / down), round(frames * up / down)
    made = []
    for (name, d), label in zip(candidates, labels):
        # converted with the preroll, so the kept part starts on settled samples
        y = convert_rate(render_version(span, d), info.rate_hz, rate)[out_pre:]
        # loudness of what is played (a conversion down drops what lies above the new Nyquist)
        lkfs = integrated_lkfs(y[:out_frames], rate, channel_weights=_weights(info.channels))
        made.append((label, name, np.ascontiguousarray(y, dtype=np.float32), lkfs, d))
    if len(made) < len(candidates):
        raise BadParameter(f"at most {len(labels)} versions can be compared at once")
    gains = [0.0] * len(made)
    if level_match:
        finite = [m[3] for m in made if math.isfinite(m[3])]
        if len(finite) < len(made):
            raise BadParameter(f"region {start / info.rate_hz:g} s + {frames / info.rate_hz:g} s of {path!r}: "
                               "a version is silent (below -70 LKFS); no loudness to match (use --no-level-match "
                               "or another region)")
        target = min(finite)
        gains = [gain_to_match_db(m[3], target) for m in made]
    versions = tuple(Version(label, name, y, lkfs, g, d) for (label, name, y, lkfs, d), g in zip(made, gains))
    tail_frames = len(versions[0].samples) - out_frames
    return Region(str(path), rate, info.channels, start, out_frames, tail_frames, versions, level_match,
                  info.rate_hz)


def _weights(channels: int):
    # Channel layouts BS.1770-4 has no weights for (4, 7, 8 ... channels): weigh every channel
    # 1.0. Only the differences between versions of the same channels matter for matching.
    from audition.loudness import DEFAULT_CHANNEL_WEIGHTS

    return None if channels in DEFAULT_CHANNEL_WEIGHTS else [1.0] * channels
