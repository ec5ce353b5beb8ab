"""The streaming Welch PSD: the mean of the segments' periodograms, optionally inside or outside time spans.

The estimate (P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2), 1967) is the
mean over segments of the one-sided densities P(f_k) of
:mod:`audition.survey.segments`. This is what ``scipy.signal.welch(x, fs,
window="hann", nperseg=N, detrend="constant", scaling="density")`` computes, to
the single precision of the transform (see
:class:`~audition.survey.segments.Segmenter`; tests/test_survey.py checks it),
so Σ P(f_k)·Δf is the mean square (Parseval) and 10·log10 of it is the level in
dBFS as 20·log10(rms). Only whole segments count; a trailing partial segment is
dropped, as scipy does. Channels are averaged: the PSD of a multichannel file
is the mean of its channels' PSDs, so levels read from it are per-channel
levels (a -50 dBFS hiss in each channel of a stereo file reads -50 dBFS, not
-47).
"""

from __future__ import annotations

import numpy as np

from audition.survey.segments import Segmenter, _as_2d, check_spans, classify_segments, span_frames


class WelchPSD:
    """Streaming Welch PSD, optionally of only the frames inside (or outside) time spans.

    Parameters
    ----------
    rate_hz : float
    channels : int
    nperseg : int, optional
        Default :func:`~audition.survey.segments.segment_length` (rate).
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
