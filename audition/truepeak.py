"""True-peak level of a signal, streamed block by block (ITU-R BS.1770-4, Annex 2).

The sample peak misses the crests that fall between samples: a full-scale sine at a
quarter of the sampling rate, sampled at 45 degrees, has every sample at 0.7071 of
its crest and reads -3.01 dBFS. A converter reconstructs the crest. Annex 2 of
ITU-R BS.1770-4 estimates it by oversampling four times with a 48-tap interpolating
filter (the order-48, four-phase FIR it tabulates) and taking the largest magnitude.

What this meter computes
------------------------
For every input sample index ``i`` and phase ``k`` (0..3)::

    y_k[i] = sum_{j=0}^{11} h_k[j] * x[i - j]                (BS.1770-4 Annex 2, 4x polyphase FIR)

with ``h_k`` the tabulated phase ``k``, ``x`` zero before the first sample and, once
:meth:`TruePeakMeter.finish` is called, zero for 11 samples after the last (so the
output is the full convolution of the zero-stuffed signal with the 48-tap filter, as
:func:`scipy.signal.upfirdn` computes it). The reading is::

    true peak = max( max_i |x[i]|, max_{i,k} |y_k[i]| )

The Annex reads only the oversampled stream. The tabulated filter has even length
(48, centred on tap 23.5), so its four phases fall nominally 1/8, 3/8, 5/8 and 7/8
of a sample after an input sample and none on it; the input samples are points of
the same reconstructed waveform, so they are included: the reading is never below
the sample peak.

Oversampling ratio
------------------
The Annex asks for 4x at 48 kHz (an oversampled rate of at least 192 kHz) and
permits higher ratios; at 88.2/96 kHz 2x would do and above that none. This meter
uses the tabulated 4x filter at every rate: the Annex tabulates no 2x filter, one
filter means one code path and one set of tests, the interpolator is defined in
normalised frequency (so its accuracy at ``f/fs`` is the same at any rate), and
with the screen below the cost is set by the number of windows near the running
peak, not by the number of phases. At 96 kHz and above the reading is therefore
slightly more accurate than the Annex requires, never less.

Speed: an exact screen
----------------------
A full 4x pass costs 48 multiply-adds per sample, more than the rest of a render.
Most windows cannot raise the running maximum ``T``, and a bound proves it.
Writing each sample of the window as the centre sample plus the first differences
between them (summation by parts)::

    y_k[i] = g_k * x[i - m_k] + sum_{l} c_{k,l} * (x[i-l] - x[i-l-1])
    |y_k[i]| <= |g_k| * |x[i - m_k]| + (sum_l |c_{k,l}|) * max_l |x[i-l] - x[i-l-1]|

where ``g_k = sum_j h_k[j]`` (the phase's gain at DC), ``m_k`` the lag of its largest
tap (6 for phases 0 and 1, 5 for phases 2 and 3) and ``c_{k,l}`` partial sums of
``h_k`` (computed in :func:`_screen_constants`, not typed in). For the tabulated
filter ``max |g_k| = 1.0016`` and ``max sum |c| = 0.861``. So::

    B[i] = 1.0016 * max(|x[i-6]|, |x[i-5]|) + 0.861 * max of |first differences| in the window

bounds every phase of window ``i``. Only windows with ``B[i] >= T`` are gathered and
interpolated (``T`` starts each block at the larger of the running maximum and the
block's sample peak). This is a proof, not a guess: the reading equals the full
computation (tests/test_truepeak.py checks equality on random, tonal and
block-split signals). The plainer bound ``sum_j |h_k[j]| * max|x|`` is loose by a
factor of two near every smooth crest (``sum |h_1| = 2.02``); the difference form is
tight there, where a band-limited signal's differences are small. A steady pure tone
has every crest at the peak and still needs most of its crests interpolated.

References
----------
Recommendation ITU-R BS.1770-4 (10/2015), "Algorithms to measure audio programme
loudness and true-peak audio level", Annex 2 (true-peak level), and its table of
the order-48, 4-phase FIR interpolating filter.
"""

from __future__ import annotations

import math

import numpy as np

from audition.annex2 import HISTORY, _Scratch
from audition.errors import BadParameter


class TruePeakMeter:
    """A streaming true-peak meter (ITU-R BS.1770-4 Annex 2, 4x), state carried across blocks.

    Parameters
    ----------
    channels : int
    screen : bool
        Interpolate only the windows the bound cannot rule out (default True). False
        interpolates every window; the reading is the same, bit for bit, only slower.

    Attributes
    ----------
    peak : float
        Largest magnitude so far, in the units of the samples handed in (1.0 = full
        scale for float samples), the input samples included.
    windows_interpolated : int
        Windows gathered and interpolated so far (for measuring the screen; the compiled
        scan raises its threshold as it goes, so it interpolates fewer than the numpy one).
    windows_total : int
        Windows seen so far (one per input sample and channel, plus the flush).

    Notes
    -----
    Each block is joined to the last 11 samples of the one before, so every window
    is evaluated once whatever the block sizes. Call :meth:`finish` after the last
    block: it feeds 11 zero samples, so the crests between the last samples (and the
    ring of the file's end into silence) are measured too.

    Examples
    --------
    A full-scale sine at a quarter of the rate, sampled 45 degrees from its crests:

    >>> import numpy as np
    >>> x = np.sin(np.pi / 2 * np.arange(4800) + np.pi / 4)
    >>> m = TruePeakMeter(1)
    >>> m.process(x[:2001]); m.process(x[2001:]); m.finish()
    >>> print(f"samples {20 * np.log10(np.abs(x).max()):+.2f} dBFS, true peak {m.peak_dbtp:+.2f} dBTP")
    samples -3.01 dBFS, true peak +0.08 dBTP
    """

    def __init__(self, channels: int, *, screen: bool = True):
        if int(channels) < 1:
            raise BadParameter(f"channels={channels!r}: must be at least 1")
        self.channels = int(channels)
        self.screen = bool(screen)
        self.peak = 0.0
        self.windows_interpolated = 0
        self.windows_total = 0
        self._scratch = None
        self._finished = False

    @property
    def peak_dbtp(self) -> float | None:
        """``20*log10(peak)``, dB true peak (0 dBTP = full scale); None for digital silence."""
        return 20.0 * math.log10(self.peak) if self.peak > 0 else None

    def process(self, block, *, sample_peak: float | None = None) -> None:
        """Measure one (frames, channels) block (1-D for one channel).

        Parameters
        ----------
        block : array_like
            Samples in any real dtype (integers are fine: the reading is in their units).
        sample_peak : float, optional
            ``max |block|`` when the caller already knows it (saves a pass).
        """
        if self._finished:
            raise BadParameter("a finished TruePeakMeter takes no more blocks")
        x = np.asarray(block)
        if x.ndim == 1:
            x = x[:, None]
        if x.ndim != 2 or x.shape[1] != self.channels:
            raise BadParameter(f"block of shape {np.shape(block)!r} for a {self.channels}-channel meter")
        n = len(x)
        if n == 0:
            return
        from audition import kernels

        buf = self._buffers(n)
        # the stream: 11 samples of history, then the block (float64, frames x channels)
        xx = buf.xx[:n + HISTORY]
        xx[HISTORY:] = x
        self.windows_total += n * self.channels
        if sample_peak is None:
            sample_peak = float(np.abs(xx[HISTORY:]).max())
        t, count = kernels.true_peak_scan(xx, max(self.peak, float(sample_peak)), self.screen, buf)
        self.windows_interpolated += count
        self.peak = t
        # the last 11 samples are the next block's history (a copy: they may overlap when n < 11)
        buf.xx[:HISTORY] = xx[n:].copy() if n < HISTORY else xx[n:]

    def _buffers(self, n: int) -> "_Scratch":
        """Work arrays for a block of ``n`` frames, kept between blocks.

        A render hands over blocks of one size; allocating a dozen 1 MiB arrays per
        block made the kernel map and unmap them each time (measured: +0.6 s of system
        time per 5 minutes of 48 kHz stereo), so they are allocated once.
        """
        buf = self._scratch
        if buf is None or len(buf.xx) < n + HISTORY:
            history = buf.xx[:HISTORY].copy() if buf is not None else np.zeros((HISTORY, self.channels))
            buf = self._scratch = _Scratch(n + HISTORY, self.channels)
            buf.xx[:HISTORY] = history
        return buf

    def finish(self) -> None:
        """Feed the 11 zero samples after the end (measures the last crests); then no more blocks."""
        if not self._finished:
            self.process(np.zeros((HISTORY, self.channels)), sample_peak=0.0)
            self._finished = True


def true_peak(x, *, screen: bool = True) -> float:
    """True peak of a whole signal, full scale 1.0 (see :class:`TruePeakMeter`).

    Parameters
    ----------
    x : array_like, (frames,) or (frames, channels)
    screen : bool
        As in :class:`TruePeakMeter` (the result does not depend on it).
    """
    x = np.asarray(x, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    m = TruePeakMeter(x.shape[1], screen=screen)
    m.process(x)
    m.finish()
    return m.peak


def true_peak_dbtp(x) -> float | None:
    """True peak of a whole signal in dBTP (0 dBTP = full scale); None for digital silence."""
    p = true_peak(x)
    return 20.0 * math.log10(p) if p > 0 else None
