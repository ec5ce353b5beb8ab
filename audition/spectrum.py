"""The spectral survey: streaming Welch PSD, the noise reference, fractional-octave bands, crossover.

Pure on the blocks it is handed: blocks of (frames, channels) float64 samples
(full scale ±1.0) arrive in order, of any size, and memory stays flat however
long the file is (one pass; the state is a partial segment, one accumulated
spectrum per 0.25 dB level step and 13 bytes per analysis segment, about
0.5 MB for an hour at 48 kHz).

Welch PSD (P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2), 1967)
----------------------------------------------------------------------
Segments of N samples (:func:`segment_length`: a power of two near 0.171 s,
8192 at 44.1 and 48 kHz), hop N/2 (50 % overlap), each with its mean removed and
a periodic Hann window w applied; the one-sided density of one segment is

.. math:: P(f_k) = c_k\\,\\frac{|\\sum_n w_n x_n e^{-2\\pi j k n/N}|^2}{f_s \\sum_n w_n^2},
          \\qquad c_k = 2 \\text{ except } c_0 = c_{N/2} = 1

in full-scale units²/Hz, and the estimate is the mean over segments. This is
what ``scipy.signal.welch(x, fs, window="hann", nperseg=N,
detrend="constant", scaling="density")`` computes, to the single precision of
the transform (see :class:`Segmenter`; tests/test_survey.py checks it), so
Σ P(f_k)·Δf is the mean square (Parseval) and 10·log10 of it is the level in
dBFS as 20·log10(rms). Only whole segments count; a trailing
partial segment is dropped, as scipy does. Channels are averaged: the PSD of a
multichannel file is the mean of its channels' PSDs, so levels read from it are
per-channel levels (a -50 dBFS hiss in each channel of a stereo file reads
-50 dBFS, not -47).

The noise reference
-------------------
Given as time spans (a segment belongs to a span when it lies wholly inside
it), as a separate noise-only clip, or found automatically. For the automatic
search every segment gets a *balanced level* L: the mean over the octave bands
of IEC 61260-1 that are at least 16 bins wide (from about 90 Hz at 48 kHz) of
10·log10(band power). Every octave weighs alike, so programme in any one octave
lifts L even where the hiss is weak (the bass of white or tape hiss); for steady
hiss L varies by about 0.2 dB (standard deviation) from segment to segment. The
floor L_f is the level below which the quietest ``min_noise_seconds`` (0.5 s) of
segments lie, an order statistic in the spirit of minimum statistics (R. Martin,
IEEE Trans. Speech Audio Process. 9(5), 2001) but per segment rather than per
bin, so the result is a set of time spans one can listen to. The noise segments
are those with L_f - 6 dB <= L <= L_f + ``threshold_db`` (1 dB, five standard
deviations of steady hiss; on the 0.25 dB grid of :data:`LEVEL_STEP_DB`). Below
L_f - 6 dB lie dropouts and fades, not the floor; segments under -200 dBFS are
digital silence; both are left out of noise and programme alike. The search
fails (:class:`~audition.errors.BadInputFile`) when the quiet segments do not
lie at least ``min_separation_db`` (3 dB, broadband) below the median level of
the rest: then there is no floor to find (a steady signal, or hiss alone) and
the user must give a span. The confidence grade (:class:`NoiseConfidence`)
says how far the result can be trusted. These thresholds are our own
engineering choices (no source), checked against synthesised clips whose hiss
is known (tests/test_survey.py).

Because each segment's density is added to the accumulator of its level step,
the automatic search needs only one pass: once the floor is known, the noise
PSD is the sum of the accumulators inside the window and the programme's the
sum of those above it, exactly the Welch averages over those segments.

Programme estimate: the Welch PSD of every segment outside the noise reference
minus the noise PSD (the hiss is assumed stationary and uncorrelated with the
programme, so their powers add), averaged over a sliding 1/3 octave before it
is floored at zero (:func:`programme_estimate` says why).

Bands: IEC 61260-1:2014 base-10 fractional-octave bands (:func:`band_centres`).
Crossover: :func:`crossover`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterable, Iterator

import numpy as np

from audition.errors import BadInputFile, BadParameter

#: Width of the level steps of the automatic search, dB.
LEVEL_STEP_DB = 0.25
#: Segments whose windowed mean square is below this are digital silence (-200 dBFS).
SILENT_POWER = 1e-20
#: Segments per FFT batch: bounds the working memory whatever the block size.
_BATCH_SEGMENTS = 32
#: Frames taken from a block at a time: the carry stays small even for a huge block.
_FEED_FRAMES = 65536
#: IEC 61260-1:2014 octave frequency ratio, base 10: G = 10^(3/10) (clause 5.2).
G = 10.0 ** 0.3
#: IEC 61260-1:2014 reference frequency, 1000 Hz (clause 5.4).
REFERENCE_HZ = 1000.0
DEFAULT_FRACTION = 3
DEFAULT_LOW_HZ = 20.0
DEFAULT_THRESHOLD_DB = 1.0
DEFAULT_BELOW_DB = 6.0
DEFAULT_MIN_NOISE_SECONDS = 0.5
DEFAULT_MIN_SEPARATION_DB = 3.0
NOISE_SPAN_HINT = "give --noise-span START:END"


def segment_length(rate_hz: float) -> int:
    """Welch segment length for a rate: the power of two nearest 8192·rate/48000 (about 0.171 s).

    8192 at 44.1 and 48 kHz (5.9 Hz resolution at 48 kHz), 16384 at 96 kHz,
    4096 at 22.05 kHz, 1024 at 8 kHz.
    """
    return 2 ** int(round(math.log2(rate_hz * 8192.0 / 48000.0)))


def _as_2d(block, channels: int | None, what: str = "block") -> np.ndarray:
    x = np.asarray(block, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2 or x.shape[1] < 1:
        raise BadParameter(f"{what} of shape {np.shape(block)!r}: need (frames,) or (frames, channels)")
    if channels is not None and x.shape[1] != channels:
        raise BadParameter(f"{what} of {x.shape[1]} channel(s) where {channels} were expected")
    return x


class Segmenter:
    """Cuts blocks fed in order into Welch segments and returns their periodograms.

    Parameters
    ----------
    rate_hz : float
    channels : int
    nperseg : int, optional
        Segment length (even, >= 16); default :func:`segment_length`.

    Attributes
    ----------
    nperseg, hop : int
        Segment length and hop (nperseg // 2), frames.
    freqs_hz : ndarray
        The nperseg/2 + 1 bin frequencies 0 .. rate/2.
    df_hz : float
        Bin spacing, rate / nperseg.
    frames : int
        Frames fed so far.
    segments : int
        Whole segments cut so far; segment i covers frames [i·hop, i·hop + nperseg).

    Notes
    -----
    Speed (the survey must keep up with reading the file): the windowed
    segments are transformed in single precision (float32 in, complex64 out),
    about three times less work than double, and everything else is summed in
    double. Bin by bin the result agrees with ``scipy.signal.welch`` in double
    precision to about 2e-7 (relative); the rounding of the float32 transform
    spreads a floor about 135 dB under the segment's total power (measured: a
    -4 dBFS sine leaves -142 dBFS above 3 kHz, where double precision leaves
    the Hann window's own leakage at -151 dBFS), far under any hiss a transfer
    carries (16-bit dither alone is -101 dBFS). tests/test_survey.py checks
    both.

    The mean of each segment is not subtracted sample by sample: the periodic
    Hann window's DFT is non-zero only at bins 0 and ±1, so removing the mean
    changes only bins 0 and 1, which are corrected by mean·W_k (the segment
    sums are taken in double precision from half-segment sums).
    """

    def __init__(self, rate_hz: float, channels: int, nperseg: int | None = None):
        if not (isinstance(rate_hz, (int, float)) and math.isfinite(rate_hz) and rate_hz > 0):
            raise BadParameter(f"rate={rate_hz!r}: the sample rate must be a positive number of Hz")
        n = segment_length(rate_hz) if nperseg is None else nperseg
        if not isinstance(n, (int, np.integer)) or n < 16 or n % 2:
            raise BadParameter(f"nperseg={nperseg!r}: the segment length must be an even whole number >= 16")
        if not isinstance(channels, (int, np.integer)) or isinstance(channels, bool) or channels < 1:
            raise BadParameter(f"channels={channels!r}: must be a whole number, 1 or more")
        self.rate_hz = float(rate_hz)
        self.channels = int(channels)
        self.nperseg = int(n)
        self.hop = self.nperseg // 2
        # Periodic ("DFT-even") Hann, w_n = 1/2 - 1/2·cos(2πn/N), as scipy.signal.welch uses
        # (get_window("hann", N)); written out so the survey need not import scipy.signal (1 s).
        self.window = 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(self.nperseg) / self.nperseg)
        self._window32 = self.window.astype(np.float32)
        # DFT of the window at bins 0 and 1 (the only non-zero ones of a periodic Hann): the mean correction.
        self._w01 = np.fft.rfft(self.window)[:2].astype(np.complex128)
        self.scale = 1.0 / (self.rate_hz * float(np.sum(self.window ** 2)))
        self.freqs_hz = np.fft.rfftfreq(self.nperseg, 1.0 / self.rate_hz)
        self.df_hz = self.rate_hz / self.nperseg
        self.frames = 0
        self.segments = 0
        # Carry buffer (channels, frames), float32 for the FFT; frame 0 is always a segment start.
        self._cap = self.nperseg + _FEED_FRAMES
        self._buf = np.zeros((self.channels, self._cap), dtype=np.float32)
        self._half = np.zeros((self.channels, self._cap // self.hop + 1))
        self._fill = 0
        self._work = np.empty((self.channels, _BATCH_SEGMENTS, self.nperseg), dtype=np.float32)

    def periodograms(self, block) -> Iterator[tuple[int, np.ndarray]]:
        """Feed one block; yield ``(first_index, P)`` for the segments it completes.

        ``P`` is (n, nperseg/2 + 1) float64: the channel-averaged one-sided
        densities of segments ``first_index .. first_index + n - 1``. The
        iterator must be consumed before the next block is fed (it carries the
        partial segment).

        Raises
        ------
        BadParameter
            A block of the wrong shape, or one holding NaN or infinite samples.
        """
        x = _as_2d(block, self.channels)
        for start in range(0, len(x), _FEED_FRAMES):
            part = x[start:start + _FEED_FRAMES]
            m = len(part)
            f0 = self._fill
            self._buf[:, f0:f0 + m] = part.T
            self._fill = f0 + m
            self.frames += m
            used = self._fill
            n = (used - self.nperseg) // self.hop + 1 if used >= self.nperseg else 0
            if n:
                # Sums in double of each half segment (hop frames) of what the FFT sees, for the segment means.
                k = n + 1
                np.add.reduce(self._buf[:, :k * self.hop].reshape(self.channels, k, self.hop), axis=2,
                              dtype=np.float64, out=self._half[:, :k])
            for s0 in range(0, n, _BATCH_SEGMENTS):
                s1 = min(n, s0 + _BATCH_SEGMENTS)
                yield self.segments + s0, self._batch(s0, s1)
            self.segments += n
            if n:
                keep = used - n * self.hop
                self._buf[:, :keep] = self._buf[:, n * self.hop:used]
                self._fill = keep

    def _batch(self, s0: int, s1: int) -> np.ndarray:
        from numpy.lib.stride_tricks import sliding_window_view
        from scipy import fft

        nb, npg, hop = s1 - s0, self.nperseg, self.hop
        seg = sliding_window_view(self._buf[:, s0 * hop:(s1 - 1) * hop + npg], npg, axis=1)[:, ::hop]
        work = self._work[:, :nb]
        np.multiply(seg, self._window32, out=work)
        spec = fft.rfft(work, axis=2)  # complex64 (channels, nb, npg/2 + 1)
        mean = (self._half[:, s0:s1] + self._half[:, s0 + 1:s1 + 1]) / npg  # (channels, nb), double
        # Constant detrend: the DFT of (x - mean)·w differs from that of x·w by mean·W_k at k = 0, 1 only.
        head = spec[:, :, :2].astype(np.complex128) - mean[:, :, None] * self._w01
        p = np.square(spec.real, dtype=np.float32)
        p += np.square(spec.imag, dtype=np.float32)
        p[:, :, :2] = (head.real ** 2 + head.imag ** 2)
        p = np.add.reduce(p, axis=0, dtype=np.float64) * (self.scale / self.channels)
        p[:, 1:-1] *= 2.0  # one-sided: every bin but DC and Nyquist (nperseg is even)
        if not np.isfinite(p).all():
            raise BadParameter("block holds NaN or infinite samples; only finite samples can be surveyed")
        return p


def _check_spans_shape(spans, name: str) -> list[tuple[float, float]]:
    out = []
    for s in spans:
        try:
            a, b = (float(v) for v in s)
        except (TypeError, ValueError):
            raise BadParameter(f"{name}={s!r}: a span is START:END in seconds") from None
        if not (math.isfinite(a) and math.isfinite(b)):
            raise BadParameter(f"{name}={a!r}:{b!r}: start and end must be finite seconds")
        if not b > a:
            raise BadParameter(f"{name}={a!r}:{b!r}: empty span; the end must come after the start")
        out.append((a, b))
    return out


def check_spans(spans, seconds: float | None = None, name: str = "noise-span") -> tuple[tuple[float, float], ...]:
    """Validate time spans [start, end] in seconds; merge overlapping ones; sort.

    Spans that merely touch stay apart (a segment must lie wholly inside one span).

    Raises
    ------
    BadParameter
        An empty span (end <= start), no spans, or, when ``seconds`` is given, a span outside 0 .. seconds.
    """
    spans = _check_spans_shape(spans, name)
    if not spans:
        raise BadParameter(f"{name}: no spans given; give START:END in seconds")
    if seconds is not None:
        for a, b in spans:
            if a < 0 or b > seconds * (1 + 1e-12) + 1e-9:
                raise BadParameter(f"{name}={a:g}:{b:g}: outside the file (0 .. {seconds:g} s)")
    merged: list[list[float]] = []
    for a, b in sorted(spans):
        if merged and a < merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], b)
        else:
            merged.append([a, b])
    return tuple((a, b) for a, b in merged)


def span_frames(spans, rate_hz: float) -> np.ndarray:
    """Spans in seconds -> (n, 2) int64 frame bounds [start, end) at ``rate_hz``."""
    return np.array([[round(a * rate_hz), round(b * rate_hz)] for a, b in spans], dtype=np.int64).reshape(-1, 2)


def classify_segments(first: int, n: int, seg: Segmenter, bounds: np.ndarray) -> np.ndarray:
    """Per segment: 1 wholly inside one span, 2 partly inside, 0 outside all."""
    starts = (first + np.arange(n, dtype=np.int64)) * seg.hop
    ends = starts + seg.nperseg
    inside = np.zeros(n, dtype=bool)
    touch = np.zeros(n, dtype=bool)
    for a, b in bounds:
        inside |= (starts >= a) & (ends <= b)
        touch |= (starts < b) & (ends > a)
    return np.where(inside, 1, np.where(touch, 2, 0)).astype(np.int8)


class WelchPSD:
    """Streaming Welch PSD, optionally of only the frames inside (or outside) time spans.

    Parameters
    ----------
    rate_hz : float
    channels : int
    nperseg : int, optional
        Default :func:`segment_length` (rate).
    spans : sequence of (start_s, end_s), optional
        Time spans in seconds; with ``inside=True`` only segments lying wholly
        inside one span count, with ``inside=False`` only segments touching no
        span. Without spans every segment counts.
    inside : bool

    Examples
    --------
    >>> import numpy as np
    >>> w = WelchPSD(48000, 1)
    >>> for block in np.array_split(np.random.default_rng(0).standard_normal(96000) * 0.1, 7):
    ...     w.feed(block)
    >>> f, p = w.result()
    >>> round(float(10 * np.log10(np.sum(p) * (f[1] - f[0]))), 1)   # 0.1 rms = -20 dBFS
    -20.0
    """

    def __init__(self, rate_hz: float, channels: int, nperseg: int | None = None, *, spans=None, inside: bool = True):
        self._seg = Segmenter(rate_hz, channels, nperseg)
        self._spans = None if spans is None else span_frames(check_spans(spans), rate_hz)
        self._want = 1 if inside else 0
        self._sum = np.zeros(len(self._seg.freqs_hz))
        self.segments = 0

    @property
    def freqs_hz(self) -> np.ndarray:
        return self._seg.freqs_hz

    @property
    def nperseg(self) -> int:
        return self._seg.nperseg

    def feed(self, block) -> None:
        """Add one block (frames, channels) or (frames,); blocks must come in order."""
        for first, p in self._seg.periodograms(block):
            if self._spans is not None:
                p = p[classify_segments(first, len(p), self._seg, self._spans) == self._want]
            self._sum += p.sum(axis=0)
            self.segments += len(p)

    @property
    def psd(self) -> np.ndarray:
        """Mean of the counted segments' densities (units²/Hz); zeros before the first segment."""
        return self._sum / self.segments if self.segments else np.zeros_like(self._sum)

    def result(self) -> tuple[np.ndarray, np.ndarray]:
        """``(freqs_hz, psd)``."""
        return self.freqs_hz.copy(), self.psd


def welch_psd(data, rate_hz: float, nperseg: int | None = None, *, spans=None,
              inside: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """One-shot :class:`WelchPSD` of an array (frames,) or (frames, channels)."""
    x = _as_2d(data, None, "data")
    w = WelchPSD(rate_hz, x.shape[1], nperseg, spans=spans, inside=inside)
    w.feed(x)
    return w.result()


# ---------------------------------------------------------------------------
# Fractional-octave bands, IEC 61260-1:2014
# ---------------------------------------------------------------------------


def _check_fraction(fraction) -> int:
    if not isinstance(fraction, (int, np.integer)) or isinstance(fraction, bool) or not 1 <= fraction <= 48:
        raise BadParameter(f"fraction={fraction!r}: the band fraction b (1/b octave) must be a whole number 1 .. 48")
    return int(fraction)


def band_centre(x, fraction: int = DEFAULT_FRACTION):
    """Exact mid-band frequency of band number x (x = 0 is the 1 kHz band), Hz.

    IEC 61260-1:2014 clause 5.5, base 10: f_m = f_r·G^(x/b) for odd b and
    f_m = f_r·G^((2x+1)/(2b)) for even b, with G = 10^(3/10), f_r = 1000 Hz.
    """
    b = _check_fraction(fraction)
    x = np.asarray(x, dtype=float)
    e = x / b if b % 2 else (2 * x + 1) / (2 * b)
    return REFERENCE_HZ * G ** e


def band_edges(centres_hz, fraction: int = DEFAULT_FRACTION) -> tuple[np.ndarray, np.ndarray]:
    """Exact band edges f_m·G^(-1/(2b)) and f_m·G^(+1/(2b)) (IEC 61260-1:2014 clause 5.6)."""
    b = _check_fraction(fraction)
    c = np.asarray(centres_hz, dtype=float)
    k = G ** (1.0 / (2 * b))
    return c / k, c * k


def band_centres(fraction: int = DEFAULT_FRACTION, lo_hz: float = DEFAULT_LOW_HZ,
                 hi_hz: float = 20000.0) -> np.ndarray:
    """Exact mid-band frequencies of the bands whose upper edge is above ``lo_hz`` and lower edge below ``hi_hz``.

    For b = 3 and the defaults: the 31 bands labelled 20, 25, 31.5 … 20000 Hz.
    """
    b = _check_fraction(fraction)
    if not (0 < lo_hz < hi_hz):
        raise BadParameter(f"band range {lo_hz!r} .. {hi_hz!r} Hz: need 0 < low < high")
    # x range from the logarithm, then trimmed exactly by the edges
    x0 = math.floor(b * math.log(lo_hz / REFERENCE_HZ, G)) - 2
    x1 = math.ceil(b * math.log(hi_hz / REFERENCE_HZ, G)) + 2
    c = band_centre(np.arange(x0, x1 + 1), b)
    lo, hi = band_edges(c, b)
    return c[(hi > lo_hz * (1 + 1e-12)) & (lo < hi_hz * (1 - 1e-12))]


def _cumulative(freqs_hz: np.ndarray, psd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Bin edges and the integral of the PSD up to each edge.

    The density is piecewise constant: bin k covers f_k ± Δf/2, the DC and
    Nyquist bins only their half inside 0 .. rate/2 at twice their density (a
    one-sided density's end bins are not doubled), so the integral over 0 ..
    rate/2 is Σ P_k·Δf, the Parseval sum of scipy.signal.welch.
    """
    df = freqs_hz[1] - freqs_hz[0]
    edges = np.concatenate([[0.0], freqs_hz[:-1] + df / 2, [freqs_hz[-1]]])
    widths = np.diff(edges)
    dens = psd.copy()
    dens[0] *= 2.0
    dens[-1] *= 2.0
    return edges, np.concatenate([[0.0], np.cumsum(dens * widths)])


def band_levels(freqs_hz, psd, fraction: int = DEFAULT_FRACTION, *, lo_hz: float = DEFAULT_LOW_HZ,
                hi_hz: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Integrate a one-sided PSD over IEC 61260-1 fractional-octave bands.

    Parameters
    ----------
    freqs_hz : ndarray
        Uniform bin frequencies 0 .. rate/2 (as from :class:`WelchPSD`).
    psd : ndarray (..., n_bins)
        One or more PSDs (units²/Hz) on those bins (last axis).
    fraction : int
        b of 1/b-octave bands (default 3).
    lo_hz : float
        Lowest band kept: the one whose upper edge passes ``lo_hz`` (default 20 Hz).
    hi_hz : float, optional
        Upper limit for the bands' upper edges; default and at most Nyquist.

    Returns
    -------
    centres_hz : ndarray
        Exact mid-band frequencies of the bands lying wholly below ``hi_hz``.
    band_power : ndarray (..., n_bands)
        Mean-square power in each band (units²); a bin cut by a band edge is
        split in proportion to the part inside (the PSD is taken as constant over each bin).
    """
    f = np.asarray(freqs_hz, dtype=float)
    p = np.asarray(psd, dtype=float)
    if f.ndim != 1 or f.size < 3 or p.shape[-1] != f.size:
        raise BadParameter(f"band_levels: {f.size} frequencies for a PSD of shape {p.shape!r}")
    nyq = f[-1]
    top = nyq if hi_hz is None else min(hi_hz, nyq)
    c = band_centres(fraction, lo_hz, top)
    lo, hi = band_edges(c, fraction)
    c, lo, hi = c[hi <= top * (1 + 1e-12)], lo[hi <= top * (1 + 1e-12)], hi[hi <= top * (1 + 1e-12)]
    flat = p.reshape(-1, f.size)
    out = np.empty((flat.shape[0], c.size))
    for i, row in enumerate(flat):
        edges, cum = _cumulative(f, row)
        out[i] = np.interp(hi, edges, cum) - np.interp(lo, edges, cum)
    return c, np.maximum(out, 0.0).reshape(p.shape[:-1] + (c.size,))


def crossover(centres_hz, programme_band, noise_band, margin_db: float = 0.0) -> float | None:
    """The lowest band centre from which the programme stays under the noise up to the top band.

    A band is *under* when 10·log10(programme/noise) < -margin_db (so
    ``margin_db`` > 0 asks the programme to sink that far below the noise); a
    band with neither programme nor noise counts as under, one with programme
    but no noise as over. The crossover is the centre of the lowest band of the
    unbroken run of under-bands that reaches the top band.

    Returns
    -------
    float or None
        None when the top band is not under (the programme reaches the top of
        the spectrum above the noise, so it never sinks into it).
    """
    c = np.asarray(centres_hz, dtype=float)
    ps = np.asarray(programme_band, dtype=float)
    ns = np.asarray(noise_band, dtype=float)
    if not (c.shape == ps.shape == ns.shape) or c.ndim != 1 or c.size == 0:
        raise BadParameter(f"crossover: {c.shape!r} centres, {ps.shape!r} programme and {ns.shape!r} noise bands")
    if not math.isfinite(margin_db):
        raise BadParameter(f"margin-db={margin_db!r}: must be a finite number of dB")
    limit = 10.0 ** (-margin_db / 10.0)
    under = np.where(ns > 0, ps < limit * ns, ps <= 0)
    if not under[-1]:
        return None
    over = np.flatnonzero(~under)
    return float(c[0] if over.size == 0 else c[over[-1] + 1])


# ---------------------------------------------------------------------------
# The survey
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class NoiseConfidence:
    """How far the noise reference can be trusted.

    Attributes
    ----------
    grade : {"high", "medium", "low"}
        high: separation >= 20 dB, >= 0.75 s of noise, level spread <= 0.5 dB
        and shape spread <= 1.5 dB; medium: >= 10 dB, >= 0.5 s, <= 1 dB,
        <= 3 dB; low otherwise (our own thresholds, no source).
    separation_db : float or None
        Median level of the programme segments minus that of the noise segments, dB.
    noise_seconds : float
        Time covered by the noise segments (the clip's for a noise clip), s.
    noise_fraction : float or None
        noise_seconds over the file's length (None for a separate noise clip).
    level_spread_db : float
        Standard deviation of the noise segments' levels, dB (small for steady hiss).
    shape_spread_db : float or None
        RMS over octave bands (>= 16 bins wide) of the dB difference between
        the PSDs of the quieter and the louder half of the noise segments: how
        steady the noise spectrum is; None with too few segments to split.
    noise_segments, programme_segments, silent_segments, excluded_segments : int
        Welch segments in the noise reference, in the programme, of digital
        silence, and left out (straddling a span edge, or a dropout below the floor).
    """

    grade: str
    separation_db: float | None
    noise_seconds: float
    noise_fraction: float | None
    level_spread_db: float
    shape_spread_db: float | None
    noise_segments: int
    programme_segments: int
    silent_segments: int
    excluded_segments: int

    def to_dict(self) -> dict:
        return {k: getattr(self, k) for k in self.__dataclass_fields__}

    def describe(self) -> str:
        """One line for a report, e.g. "high: 31.2 dB below the programme, 0.9 s (9 % of the file), …"."""
        parts = [f"{self.grade}:"]
        if self.separation_db is not None:
            parts.append(f"{self.separation_db:.1f} dB below the programme,")
        frac = "" if self.noise_fraction is None else f" ({100 * self.noise_fraction:.1f} % of the file)"
        parts.append(f"{self.noise_seconds:.2f} s{frac}, level spread {self.level_spread_db:.2f} dB")
        if self.shape_spread_db is not None:
            parts[-1] += f", spectrum spread {self.shape_spread_db:.2f} dB"
        return " ".join(parts)


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


_SILENT_STEP = int(np.iinfo(np.int32).min)


def balance_matrix(freqs_hz: np.ndarray, min_bins: int = 16) -> np.ndarray:
    """(n_bins, n_octaves) 0/1 matrix summing bins into the IEC 61260-1 octave bands used by the search.

    Only octaves at least ``min_bins`` bins wide and wholly below Nyquist are
    used, so a pure-noise segment's band powers are steady; with none, the
    whole spectrum is one band.
    """
    f = np.asarray(freqs_hz, dtype=float)
    df = f[1] - f[0]
    c = band_centres(1, max(df, 1.0), f[-1])
    lo, hi = band_edges(c, 1)
    ok = ((hi - lo) >= min_bins * df) & (hi <= f[-1])
    lo, hi = lo[ok], hi[ok]
    if lo.size == 0:
        return np.ones((f.size, 1))
    return ((f[:, None] >= lo[None, :]) & (f[:, None] < hi[None, :])).astype(np.float64)


class _LevelAccumulator:
    """Per (class, level step): the sum of the segments' densities and their count.

    The level a segment is filed under is its *balanced level*: the mean over
    octave bands (:func:`balance_matrix`) of 10·log10(band power), so every
    octave weighs alike and programme in any one octave lifts it, even where
    the hiss is weak (the bass of white or tape hiss). Its broadband level
    (10·log10 of the windowed mean square, dBFS) is kept too.
    """

    def __init__(self, freqs_hz: np.ndarray):
        self.nfreq = len(freqs_hz)
        self.df = float(freqs_hz[1] - freqs_hz[0])
        self.bands = balance_matrix(freqs_hz)
        self._row: dict = {}      # (class, step) -> row of the tables
        self._sums = np.zeros((16, self.nfreq))
        self._counts = np.zeros(16, dtype=np.int64)
        self.levels: list = []    # per batch: broadband level, float32 dBFS (-inf for silence)
        self.balanced: list = []  # per batch: balanced level, float32 dB
        self.steps: list = []     # per batch: int32 step of the balanced level (_SILENT_STEP for silence)
        self.classes: list = []   # per batch: int8 class

    @property
    def sums(self) -> dict:
        """(class, step) -> sum of the densities filed there (views into the table)."""
        return {k: self._sums[r] for k, r in self._row.items()}

    @property
    def counts(self) -> dict:
        """(class, step) -> number of segments filed there."""
        return {k: int(self._counts[r]) for k, r in self._row.items()}

    def _new_row(self, k) -> int:
        r = self._row[k] = len(self._row)
        if r == len(self._counts):  # grow the tables (doubling: amortised O(1) per key)
            self._sums = np.concatenate([self._sums, np.zeros_like(self._sums)])
            self._counts = np.concatenate([self._counts, np.zeros_like(self._counts)])
        return r

    def add(self, p: np.ndarray, cls: np.ndarray | None = None) -> None:
        power = p.sum(axis=1) * self.df
        silent = power < SILENT_POWER
        level = np.where(silent, -np.inf, 10.0 * np.log10(np.maximum(power, SILENT_POWER)))
        bal = np.mean(10.0 * np.log10(np.maximum((p @ self.bands) * self.df, 1e-30)), axis=1)
        bal = np.where(silent, -np.inf, bal)
        step = np.where(silent, _SILENT_STEP, np.floor(np.where(silent, 0.0, bal) / LEVEL_STEP_DB)).astype(np.int64)
        cls = np.zeros(len(p), dtype=np.int8) if cls is None else cls
        # A row add per segment: cheaper than any grouped numpy form for a few dozen segments.
        for i, k in enumerate(zip(cls.tolist(), step.tolist())):
            r = self._row.get(k)
            if r is None:
                r = self._new_row(k)
            self._sums[r] += p[i]
            self._counts[r] += 1
        self.levels.append(level.astype(np.float32))
        self.balanced.append(bal.astype(np.float32))
        self.steps.append(step.astype(np.int32))
        self.classes.append(cls)

    def finish(self):
        """Per segment: broadband level, balanced level (float32 dB), level step (int32), class (int8)."""
        def cat(parts, dtype):
            return np.concatenate(parts) if parts else np.zeros(0, dtype)

        return (cat(self.levels, np.float32), cat(self.balanced, np.float32), cat(self.steps, np.int32),
                cat(self.classes, np.int8))

    def mean(self, keep) -> tuple[np.ndarray, int]:
        """Mean density and count over the keys (cls, step) for which keep(cls, step) is true."""
        rows = [r for k, r in self._row.items() if keep(*k)]
        s = self._sums[rows].sum(axis=0) if rows else np.zeros(self.nfreq)
        n = int(self._counts[rows].sum()) if rows else 0
        return (s / n if n else s), n



def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """[first, last] indices of the runs of True."""
    if not mask.any():
        return []
    d = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1))


def _covered_seconds(mask: np.ndarray, seg: Segmenter) -> tuple[float, tuple]:
    spans = []
    total = 0
    for i, j in _runs(mask):
        a, b = int(i) * seg.hop, int(j) * seg.hop + seg.nperseg
        spans.append((a / seg.rate_hz, b / seg.rate_hz))
        total += b - a
    return total / seg.rate_hz, tuple(spans)


def _shape_spread(acc: _LevelAccumulator, noise_keys: list, freqs: np.ndarray, df: float) -> float | None:
    """RMS dB difference between the PSDs of the quieter and louder halves of the noise segments."""
    keys = sorted(noise_keys, key=lambda k: k[1])
    total = sum(acc.counts[k] for k in keys)
    if total < 4 or len(keys) < 2:
        return None
    run, split = 0, None
    for i, k in enumerate(keys):
        run += acc.counts[k]
        if run >= total / 2:
            split = i + 1
            break
    if split is None or split >= len(keys):
        split = len(keys) - 1
    halves = []
    for part in (keys[:split], keys[split:]):
        n = sum(acc.counts[k] for k in part)
        halves.append(sum(acc.sums[k] for k in part) / n)
    c, bp = band_levels(freqs, np.stack(halves), 1)
    lo, hi = band_edges(c, 1)
    ok = ((hi - lo) >= 16 * df) & (bp[0] > 0) & (bp[1] > 0)
    if not ok.any():
        return None
    d = 10.0 * np.log10(bp[1][ok] / bp[0][ok])
    return float(np.sqrt(np.mean(d * d)))


def _grade(sep, noise_seconds, level_spread, shape_spread) -> str:
    sep = math.inf if sep is None else sep
    shape = 0.0 if shape_spread is None else shape_spread
    if sep >= 20.0 and noise_seconds >= 0.75 and level_spread <= 0.5 and shape <= 1.5:
        return "high"
    if sep >= 10.0 and noise_seconds >= 0.5 and level_spread <= 1.0 and shape <= 3.0:
        return "medium"
    return "low"


#: Width of the sliding band over which the programme estimate is averaged before
#: its floor at zero, octaves (1/3 octave: the survey's own band width).
PROGRAMME_SMOOTHING_OCTAVES = 1.0 / 3.0


def programme_estimate(freqs_hz, outside_psd, noise_psd,
                       smoothing_octaves: float = PROGRAMME_SMOOTHING_OCTAVES) -> np.ndarray:
    """The programme's PSD alone, from the PSD outside the noise reference and the noise PSD.

    Parameters
    ----------
    freqs_hz : ndarray
        Uniform bin frequencies 0 .. rate/2.
    outside_psd, noise_psd : ndarray
        Welch PSDs (units²/Hz) of the programme segments (programme plus hiss) and
        of the noise reference.
    smoothing_octaves : float
        Width of the sliding band, octaves (default 1/3).

    Returns
    -------
    ndarray
        Non-negative programme PSD on ``freqs_hz``.

    Notes
    -----
    Powers of uncorrelated signals add, so D(f) = S_outside(f) - S_noise(f) is an
    unbiased estimate of the programme's PSD; but bin by bin it scatters by
    about 1/sqrt(K) of the hiss level (K the number of Welch segments averaged,
    often only ten to twenty in a noise reference of a second or two), and
    flooring each bin at zero keeps the upward half of that scatter: where the
    programme has sunk into the hiss, a per-bin floored estimate reads about
    0.4/sqrt(K) of the hiss level (some 10 dB under the hiss) instead of the
    programme's true, far lower, level, and the planner then sees treble that is
    not there. Here D is first averaged over a sliding band of
    ``smoothing_octaves`` around each bin (M bins: the scatter falls by about
    sqrt(M), some 20 times at 10 kHz), floored at zero only then, and spread
    back over the bins in the shape of the outside PSD:

    .. math:: \\hat S_p(f) = \\max(\\bar D(f), 0)\\,\\frac{S_{outside}(f)}{\\bar S_{outside}(f)}

    (bars: the sliding-band means). Where the programme dominates, the shape
    factor restores its harmonic lines (and the estimate equals D bin by bin
    when the band holds one bin, at low frequencies); where the hiss dominates,
    the factor is one plus zero-mean scatter. Our own estimator (no source).
    """
    f = np.asarray(freqs_hz, dtype=float)
    o = np.asarray(outside_psd, dtype=float)
    n = np.asarray(noise_psd, dtype=float)
    if not (f.shape == o.shape == n.shape) or f.ndim != 1 or f.size < 2:
        raise BadParameter(f"programme_estimate: {f.shape!r} frequencies, {o.shape!r} outside and {n.shape!r} noise")
    if not (smoothing_octaves >= 0 and math.isfinite(smoothing_octaves)):
        raise BadParameter(f"smoothing_octaves={smoothing_octaves!r}: must be a non-negative number of octaves")
    half = 2.0 ** (smoothing_octaves / 2.0)
    df = f[1] - f[0]
    # Window of bin k: bins whose centres lie within [f_k / half, f_k * half], at least bin k itself.
    lo = np.minimum(np.searchsorted(f, f / half - 1e-9 * df, side="left"), np.arange(f.size))
    hi = np.maximum(np.searchsorted(f, f * half + 1e-9 * df, side="right"), np.arange(f.size) + 1)
    count = hi - lo
    d_cum = np.concatenate([[0.0], np.cumsum(o - n)])
    o_cum = np.concatenate([[0.0], np.cumsum(o)])
    d_bar = (d_cum[hi] - d_cum[lo]) / count
    o_bar = (o_cum[hi] - o_cum[lo]) / count
    with np.errstate(divide="ignore", invalid="ignore"):
        shape = np.where(o_bar > 0, o / o_bar, 0.0)
    return np.maximum(d_bar, 0.0) * shape


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
        in order, any sizes (e.g. ``audition.audiofile.blocks(path)``). Read once.
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
        Welch segment length; default :func:`segment_length`.
    fraction : int
        Bands of the crossover, 1/b octave (default 3).
    margin_db : float
        Crossover margin (see :func:`crossover`).
    threshold_db, min_noise_seconds, min_separation_db : float
        The automatic search (module notes): noise segments lie within
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
    df = seg.df_hz
    acc = _LevelAccumulator(seg.freqs_hz)
    span_bounds = None if spans is None else span_frames(spans, rate_hz)

    def feed(block):
        for i0, p in seg.periodograms(block):
            cls = None if span_bounds is None else classify_segments(i0, len(p), seg, span_bounds)
            acc.add(p, cls)

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
        source = "clip"
        nseg = Segmenter(rate_hz, channels, seg.nperseg)
        nacc = _LevelAccumulator(seg.freqs_hz)
        for block in noise_blocks:
            for _, p in nseg.periodograms(_as_2d(block, channels, "noise clip block")):
                nacc.add(p)
        nlev, nbal, _, _ = nacc.finish()
        if nseg.segments == 0:
            raise BadInputFile(f"noise clip: {nseg.frames / rate_hz:.3f} s long; it must hold at least one "
                               f"analysis segment ({seg.nperseg / rate_hz:.3f} s)")
        noise_keys = [k for k in nacc.sums if k[1] != _SILENT_STEP]
        if not noise_keys:
            raise BadInputFile("noise clip: digital silence (every sample zero); it holds no noise to measure")
        noise_psd, n_noise = nacc.mean(lambda c, s: s != _SILENT_STEP)
        outside_psd, n_prog = acc.mean(lambda c, s: s != _SILENT_STEP)
        noise_lv = nlev[np.isfinite(nlev)]
        prog_lv = levels[~silent]
        noise_seconds = nseg.frames / rate_hz
        noise_fraction = None
        out_spans = ()
        excluded = 0
        shape_acc = nacc
    elif spans is not None:
        source = "spans"
        is_noise = (classes == 1) & ~silent
        is_prog = (classes == 0) & ~silent
        if not is_noise.any():
            raise BadInputFile(f"{what}the noise span(s) {_fmt_spans(spans)} hold no whole analysis segment "
                               f"({seg.nperseg / rate_hz:.3f} s) of non-silent audio; {NOISE_SPAN_HINT} "
                               "over a longer stretch of hiss")
        if not is_prog.any():
            raise BadInputFile(f"{what}nothing outside the noise span(s) {_fmt_spans(spans)} to survey as programme")
        noise_psd, n_noise = acc.mean(lambda c, s: c == 1 and s != _SILENT_STEP)
        outside_psd, n_prog = acc.mean(lambda c, s: c == 0 and s != _SILENT_STEP)
        noise_keys = [k for k in acc.sums if k[0] == 1 and k[1] != _SILENT_STEP]
        noise_lv, prog_lv = levels[is_noise], levels[is_prog]
        noise_seconds, _ = _covered_seconds(is_noise, seg)
        noise_fraction = noise_seconds / seconds
        out_spans = spans
        excluded = int(((classes == 2) & ~silent).sum())
        shape_acc = acc
    else:
        source = "auto"
        step = steps.astype(np.int64)
        live = np.sort(step[~silent])
        k = max(1, math.ceil(min_noise_seconds * rate_hz / seg.hop))
        if live.size <= k:
            raise BadInputFile(f"{what}too short ({seconds:.2f} s) to find quiet frames by itself; "
                               f"{NOISE_SPAN_HINT}")
        floor_step = int(live[k - 1])
        lo_step = floor_step - int(round(DEFAULT_BELOW_DB / LEVEL_STEP_DB))
        hi_step = floor_step + int(round(threshold_db / LEVEL_STEP_DB))
        is_noise = (step >= lo_step) & (step <= hi_step) & ~silent
        is_prog = (step > hi_step) & ~silent
        noise_lv, prog_lv = levels[is_noise], levels[is_prog]
        noise_seconds, out_spans = _covered_seconds(is_noise, seg)
        if not is_prog.any():
            raise BadInputFile(f"{what}no quiet frames found: the whole file lies within {threshold_db:g} dB of "
                               f"its quietest {min_noise_seconds:g} s (about {float(np.median(noise_lv)):.1f} dBFS), "
                               f"with no programme above a floor; {NOISE_SPAN_HINT}")
        sep = float(np.median(prog_lv) - np.median(noise_lv))
        if sep < min_separation_db:
            raise BadInputFile(f"{what}no quiet frames found: the quietest {min_noise_seconds:g} s lie only "
                               f"{sep:.1f} dB below the median level of the rest ({min_separation_db:g} dB needed); "
                               f"{NOISE_SPAN_HINT}")
        if noise_seconds < min_noise_seconds:
            raise BadInputFile(f"{what}no quiet frames found: only {noise_seconds:.2f} s sit near the floor "
                               f"({min_noise_seconds:g} s needed); {NOISE_SPAN_HINT}")
        noise_psd, n_noise = acc.mean(lambda c, s: s != _SILENT_STEP and lo_step <= s <= hi_step)
        outside_psd, n_prog = acc.mean(lambda c, s: s != _SILENT_STEP and s > hi_step)
        noise_keys = [kk for kk in acc.sums if kk[1] != _SILENT_STEP and lo_step <= kk[1] <= hi_step]
        noise_fraction = noise_seconds / seconds
        excluded = int(((step < lo_step) & ~silent).sum())
        shape_acc = acc

    sep = float(np.median(prog_lv) - np.median(noise_lv)) if prog_lv.size and noise_lv.size else None
    level_spread = float(np.std(noise_lv.astype(np.float64))) if noise_lv.size else 0.0
    shape = _shape_spread(shape_acc, noise_keys, seg.freqs_hz, df)
    conf = NoiseConfidence(grade=_grade(sep, noise_seconds, level_spread, shape), separation_db=sep,
                           noise_seconds=noise_seconds, noise_fraction=noise_fraction,
                           level_spread_db=level_spread, shape_spread_db=shape, noise_segments=int(n_noise),
                           programme_segments=int(n_prog), silent_segments=int(silent.sum()),
                           excluded_segments=excluded)
    programme_psd = programme_estimate(seg.freqs_hz, outside_psd, noise_psd)
    c, bp = band_levels(seg.freqs_hz, np.stack([programme_psd, noise_psd]), fraction)
    xo = crossover(c, bp[0], bp[1], margin_db)
    for a in (noise_psd, programme_psd, outside_psd, total_psd):
        a.setflags(write=False)
    freqs = seg.freqs_hz.copy()
    freqs.setflags(write=False)
    return Survey(freqs_hz=freqs, noise_psd=noise_psd, programme_psd=programme_psd, outside_psd=outside_psd,
                  total_psd=total_psd, spans=tuple(out_spans), noise_source=source, confidence=conf,
                  rate_hz=float(rate_hz), channels=int(channels), frames=int(n_frames), nperseg=seg.nperseg,
                  fraction=int(fraction), margin_db=float(margin_db), crossover_hz=xo)


def survey_array(data, rate_hz: float, *, block_frames: int = 65536, **kwargs) -> Survey:
    """:func:`survey_blocks` of an in-memory array (frames,) or (frames, channels)."""
    x = _as_2d(data, None, "data")
    return survey_blocks((x[i:i + block_frames] for i in range(0, len(x), block_frames)), rate_hz, x.shape[1],
                         frames=len(x), **kwargs)


def _fmt_spans(spans) -> str:
    return ", ".join(f"{a:g}:{b:g}" for a, b in spans)
