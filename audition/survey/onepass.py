"""The survey of a recording in one streaming pass: noise reference, programme estimate, crossover.

Pure on the blocks it is handed: blocks of (frames, channels) float64 samples
(full scale ±1.0) arrive in order, of any size, and memory stays flat however
long the file is (one pass; the state is a partial segment, one accumulated
spectrum per 0.25 dB level step and 13 bytes per analysis segment, about
0.5 MB for an hour at 48 kHz).

The pass (:func:`survey_blocks`): every block is cut into Welch segments
(:mod:`audition.survey.segments`), each segment's density is filed under its
level step (:mod:`audition.survey.levels`); at the end the noise reference is
taken from spans, a clip or the quietest frames and graded
(:mod:`audition.survey.noise`), the programme is estimated and the crossover
found (:mod:`audition.survey.programme`, on the bands of
:mod:`audition.survey.bands`). The result is a :class:`Survey`.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field
from typing import Iterable

import numpy as np

from audition.errors import BadInputFile, BadParameter

from audition.survey.bands import DEFAULT_FRACTION, DEFAULT_LOW_HZ, _check_fraction, band_levels, band_matrix
from audition.survey.levels import SILENT_POWER, _LevelAccumulator
from audition.survey.noise import (DEFAULT_MIN_NOISE_SECONDS, DEFAULT_MIN_SEPARATION_DB, DEFAULT_THRESHOLD_DB,
                                   NoiseConfidence, find_quiet_frames, noise_confidence, noise_from_clip,
                                   noise_from_spans)
from audition.survey.programme import crossover, programme_estimate
from audition.survey.segments import Segmenter, _as_2d, check_spans, classify_segments, span_frames


@dataclass(frozen=True)
class Survey:
    """The spectra of a recording: noise reference, programme estimate, crossover.

    All PSDs are one-sided, channel-averaged, in full-scale units²/Hz on
    ``freqs_hz`` (uniform, 0 .. rate/2): Σ psd·Δf is a per-channel mean square.

    Attributes
    ----------
    freqs_hz : ndarray
    noise_psd : ndarray
        Welch PSD of the noise reference.
    programme_psd : ndarray
        The programme alone, estimated: outside_psd - noise_psd averaged over a
        sliding 1/3 octave, then floored at zero (:func:`programme_estimate`).
    outside_psd : ndarray
        Welch PSD of every segment outside the noise reference (programme + noise).
    total_psd : ndarray
        Welch PSD of every segment of the file.
    spans : tuple of (start_s, end_s)
        The noise reference's time spans in the file (empty for a noise clip).
    noise_source : {"auto", "spans", "clip"}
    confidence : NoiseConfidence
    rate_hz, channels, frames, nperseg
    fraction : int
        b of the 1/b-octave bands of the crossover.
    margin_db : float
    crossover_hz : float or None
        See :func:`crossover`.
    band_frames : ndarray (T, B) or None
        One-third-octave band power (float32) of every analysis segment that is not digital silence
        (the bands of :meth:`bands`), in time order: what the planner judges hearing on.
    """

    freqs_hz: np.ndarray
    noise_psd: np.ndarray
    programme_psd: np.ndarray
    outside_psd: np.ndarray
    total_psd: np.ndarray
    spans: tuple
    noise_source: str
    confidence: NoiseConfidence
    rate_hz: float
    channels: int
    frames: int
    nperseg: int
    fraction: int
    margin_db: float
    crossover_hz: float | None
    band_frames: np.ndarray | None = field(default=None, repr=False, compare=False)

    @property
    def seconds(self) -> float:
        return self.frames / self.rate_hz

    @property
    def df_hz(self) -> float:
        return float(self.freqs_hz[1] - self.freqs_hz[0])

    @property
    def noise_power(self) -> float:
        """Mean square of the noise reference per channel (flat, unweighted)."""
        return float(np.sum(self.noise_psd) * self.df_hz)

    @property
    def programme_power(self) -> float:
        """Mean square of the programme estimate per channel (flat, unweighted)."""
        return float(np.sum(self.programme_psd) * self.df_hz)

    @property
    def noise_rms_dbfs(self) -> float:
        """Unweighted noise level, dBFS as 20·log10(rms) (a full-scale sine reads -3.01)."""
        return _dbfs(self.noise_power)

    @property
    def programme_rms_dbfs(self) -> float:
        """Unweighted programme level (estimate, during the programme), dBFS as 20·log10(rms)."""
        return _dbfs(self.programme_power)

    def bands(self, fraction: int | None = None, lo_hz: float = DEFAULT_LOW_HZ) -> dict:
        """Band powers (units²) of every spectrum: keys centres_hz, noise, programme, outside, total."""
        c, bp = band_levels(self.freqs_hz, np.stack([self.noise_psd, self.programme_psd, self.outside_psd,
                                                     self.total_psd]), fraction or self.fraction, lo_hz=lo_hz)
        return {"centres_hz": c, "noise": bp[0], "programme": bp[1], "outside": bp[2], "total": bp[3]}

    @functools.cached_property
    def hearing_bands(self):
        """The frames, hiss and spectra in one-third-octave bands, as the planner takes them
        (:class:`audition.plan.audible.Bands`)."""
        from audition.plan.audible import Bands
        from audition.survey.bands import band_edges

        b = self.bands(3)
        lo, hi = band_edges(b["centres_hz"], 3)
        frames = self.band_frames if self.band_frames is not None else np.zeros((0, len(lo)))
        return Bands(b["centres_hz"], lo, hi, frames, b["noise"], self.programme_psd, self.noise_psd,
                     self.freqs_hz, self.rate_hz)

    def to_dict(self) -> dict:
        """JSON-ready summary (no spectra): spans, levels, confidence, crossover."""
        return {
            "rate_hz": self.rate_hz, "channels": self.channels, "frames": self.frames, "seconds": self.seconds,
            "nperseg": self.nperseg, "resolution_hz": self.df_hz,
            "noise": {"source": self.noise_source, "spans": [[a, b] for a, b in self.spans],
                      "rms_dbfs_flat": self.noise_rms_dbfs, "confidence": self.confidence.to_dict()},
            "programme": {"rms_dbfs_flat": self.programme_rms_dbfs},
            "crossover_hz": self.crossover_hz, "margin_db": self.margin_db, "band_fraction": self.fraction,
        }


def _dbfs(power: float) -> float:
    return 10.0 * math.log10(power) if power > 0 else -math.inf


def survey_blocks(blocks: Iterable, rate_hz: float, channels: int | None = None, *, frames: int | None = None,
                  noise_spans=None, noise_blocks: Iterable | None = None, noise_rate_hz: float | None = None,
                  nperseg: int | None = None, fraction: int = DEFAULT_FRACTION, margin_db: float = 0.0,
                  threshold_db: float = DEFAULT_THRESHOLD_DB, min_noise_seconds: float = DEFAULT_MIN_NOISE_SECONDS,
                  min_separation_db: float = DEFAULT_MIN_SEPARATION_DB, name: str | None = None,
                  noise_name: str | None = None) -> Survey:
    """Survey a recording in one streaming pass: noise reference, programme estimate, crossover.

    Parameters
    ----------
    blocks : iterable of ndarray
        The file's blocks, (frames, channels) or (frames,), float64 full scale,
        in order, any sizes (e.g. ``audition.io.reader.blocks(path)``). Read once.
    rate_hz : float
        The file's sample rate.
    channels : int, optional
        Expected channel count (default: that of the first block).
    frames : int, optional
        The file's length, if known: spans are then checked before reading.
    noise_spans : sequence of (start_s, end_s), optional
        The noise reference as time spans (``--noise-span START:END``).
    noise_blocks : iterable of ndarray, optional
        The noise reference as a separate noise-only clip (``--noise-clip``),
        with the same channel count; ``noise_rate_hz`` its rate (must equal ``rate_hz``).
    nperseg : int, optional
        Welch segment length; default :func:`~audition.survey.segments.segment_length`.
    fraction : int
        Bands of the crossover, 1/b octave (default 3).
    margin_db : float
        Crossover margin (see :func:`crossover`).
    threshold_db, min_noise_seconds, min_separation_db : float
        The automatic search (:mod:`audition.survey.noise`): noise segments lie within
        ``threshold_db`` above the floor, the floor is the level under which the
        quietest ``min_noise_seconds`` lie, and the noise must sit at least
        ``min_separation_db`` below the median level of the rest.
    name, noise_name : str, optional
        The names of the file and of the noise clip, for error messages.

    Returns
    -------
    Survey

    Raises
    ------
    BadParameter
        Both a span and a clip given, a span outside the file or empty, a noise
        clip of another rate or channel count, blocks of the wrong shape.
    BadInputFile
        Digital silence (every segment below -200 dBFS), a file shorter than one
        segment, spans or a clip holding no whole segment, nothing outside the
        noise reference, or no quiet frames for the automatic search
        ("no quiet frames found; give --noise-span START:END").
    """
    what = f"{name!r}: " if name else ""
    if noise_spans is not None and noise_blocks is not None:
        raise BadParameter("give the noise reference as spans or as a clip, not both")
    for nm, v in (("threshold-db", threshold_db), ("min-noise-seconds", min_noise_seconds),
                  ("min-separation-db", min_separation_db)):
        if not (isinstance(v, (int, float)) and math.isfinite(v) and v > 0):
            raise BadParameter(f"{nm}={v!r}: must be a positive number")
    if not (isinstance(margin_db, (int, float)) and math.isfinite(margin_db)):
        raise BadParameter(f"margin-db={margin_db!r}: must be a finite number of dB")
    _check_fraction(fraction)
    if noise_blocks is not None and noise_rate_hz is not None and float(noise_rate_hz) != float(rate_hz):
        clip = f"noise clip {noise_name!r}" if noise_name else "noise clip"
        target = repr(name) if name else "the file"
        raise BadParameter(f"{clip} at {noise_rate_hz:g} Hz for {target} at {rate_hz:g} Hz: the rates "
                           "must agree (a hiss spectrum does not carry over between rates)")
    spans = None
    if noise_spans is not None:
        try:
            spans = check_spans(noise_spans, None if frames is None else frames / rate_hz)
        except BadParameter as exc:
            raise BadParameter(f"{what}{exc}") from None

    it = iter(blocks)
    first = next(it, None)
    if first is None:
        raise BadInputFile(f"{what}no audio frames to survey")
    first = _as_2d(first, channels)
    channels = first.shape[1]
    seg = Segmenter(rate_hz, channels, nperseg)
    acc = _LevelAccumulator(seg.freqs_hz)
    span_bounds = None if spans is None else span_frames(spans, rate_hz)

    to_bands = band_matrix(seg.freqs_hz, 3).astype(np.float32)  # kept per frame: float32 (7 digits) halves the store
    frame_bands = []

    def feed(block):
        for i0, p in seg.periodograms(block):
            cls = None if span_bounds is None else classify_segments(i0, len(p), seg, span_bounds)
            acc.add(p, cls)
            live = p.sum(axis=1) * seg.df_hz > SILENT_POWER
            frame_bands.append(p[live].astype(np.float32) @ to_bands)

    feed(first)
    for block in it:
        feed(block)
    n_frames = seg.frames
    seconds = n_frames / rate_hz
    if spans is not None:
        try:
            spans = check_spans(spans, seconds)
        except BadParameter as exc:
            raise BadParameter(f"{what}{exc}") from None
    levels, balanced, steps, classes = acc.finish()
    silent = ~np.isfinite(levels)
    if seg.segments == 0:
        raise BadInputFile(f"{what}{seconds:.3f} s long; the survey needs at least one analysis segment "
                           f"({seg.nperseg / rate_hz:.3f} s at {rate_hz:g} Hz)")
    if silent.all():
        raise BadInputFile(f"{what}digital silence: every sample is zero (or a constant); there is no hiss "
                           "or programme to survey")
    total_psd, _ = acc.mean(lambda c, s: True)

    if noise_blocks is not None:
        ref = noise_from_clip(noise_blocks, seg, acc, levels, silent, rate_hz=rate_hz, channels=channels)
    elif spans is not None:
        ref = noise_from_spans(spans, seg, acc, levels, classes, silent, seconds=seconds, rate_hz=rate_hz,
                               what=what)
    else:
        ref = find_quiet_frames(seg, acc, levels, steps, silent, seconds=seconds, rate_hz=rate_hz,
                                threshold_db=threshold_db, min_noise_seconds=min_noise_seconds,
                                min_separation_db=min_separation_db, what=what)
    noise_psd, outside_psd = ref.noise_psd, ref.outside_psd
    conf = noise_confidence(ref, silent, seg)
    programme_psd = programme_estimate(seg.freqs_hz, outside_psd, noise_psd)
    c, bp = band_levels(seg.freqs_hz, np.stack([programme_psd, noise_psd]), fraction)
    xo = crossover(c, bp[0], bp[1], margin_db)
    for a in (noise_psd, programme_psd, outside_psd, total_psd):
        a.setflags(write=False)
    freqs = seg.freqs_hz.copy()
    freqs.setflags(write=False)
    return Survey(freqs_hz=freqs, noise_psd=noise_psd, programme_psd=programme_psd, outside_psd=outside_psd,
                  total_psd=total_psd, spans=tuple(ref.spans), noise_source=ref.source, confidence=conf,
                  rate_hz=float(rate_hz), channels=int(channels), frames=int(n_frames), nperseg=seg.nperseg,
                  fraction=int(fraction), margin_db=float(margin_db), crossover_hz=xo,
                  band_frames=np.concatenate(frame_bands) if frame_bands else None)


def survey_array(data, rate_hz: float, *, block_frames: int = 65536, **kwargs) -> Survey:
    """:func:`survey_blocks` of an in-memory array (frames,) or (frames, channels)."""
    x = _as_2d(data, None, "data")
    return survey_blocks((x[i:i + block_frames] for i in range(0, len(x), block_frames)), rate_hz, x.shape[1],
                         frames=len(x), **kwargs)
