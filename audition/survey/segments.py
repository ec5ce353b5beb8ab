"""Welch segments: cutting blocks into them, their periodograms, and which lie inside time spans.

Pure on the blocks it is handed: blocks of (frames, channels) float64 samples
(full scale ±1.0) arrive in order, of any size; the state carried from one
block to the next is one partial segment.

The periodogram of a segment (P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2), 1967)
-----------------------------------------------------------------------------------------
Segments of N samples (:func:`segment_length`: a power of two near 0.171 s,
8192 at 44.1 and 48 kHz), hop N/2 (50 % overlap), each with its mean removed and
a periodic Hann window w applied; the one-sided density of one segment is

.. math:: P(f_k) = c_k\\,\\frac{|\\sum_n w_n x_n e^{-2\\pi j k n/N}|^2}{f_s \\sum_n w_n^2},
          \\qquad c_k = 2 \\text{ except } c_0 = c_{N/2} = 1

in full-scale units²/Hz, averaged over the channels (:class:`Segmenter`). The
Welch estimate, the mean of these densities over segments, is
:mod:`audition.survey.welch`.

Time spans
----------
Spans [start, end) in seconds (:func:`check_spans`, :func:`span_frames`); a
segment belongs to a span when it lies wholly inside it
(:func:`classify_segments`). The noise reference given as time spans
(:mod:`audition.survey.noise`) and :class:`~audition.survey.welch.WelchPSD`
with spans both rest on them.
"""

from __future__ import annotations

import math
from typing import Iterator

import numpy as np

from audition.errors import BadParameter

#: Segments per FFT batch: bounds the working memory whatever the block size.
_BATCH_SEGMENTS = 32
#: Frames taken from a block at a time: the carry stays small even for a huge block.
_FEED_FRAMES = 65536


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
