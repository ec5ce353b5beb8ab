"""The planner's treble loss computed from clean stems alone, for the tests (no audition code).

Frames of the programme stem (scipy.signal.spectrogram, Hann, 50 % overlap), IEC 61260-1 base-10
one-third-octave bands written out here; a band counts where the programme's 90th-percentile frame level
stands above the hiss stem's level and above the threshold of hearing at the listening level (E. Terhardt
(1979), "Calculating virtual pitch", Hearing Research 1: the formula written out here); the cut in each band
from the stems filtered by scipy.signal.sosfilt (reference library).
"""

import math

import numpy as np
from scipy import signal

NPERSEG = 8192


def terhardt_db_spl(f_hz):
    k = np.asarray(f_hz) / 1000.0
    return 3.64 * k ** -0.8 - 6.5 * np.exp(-0.6 * (k - 3.3) ** 2) + 1e-3 * k ** 4


def iec_bands(nyq):
    c = 1000.0 * 10.0 ** (np.arange(-16, 14) / 10.0)
    lo, hi = c * 10 ** -0.05, c * 10 ** 0.05
    keep = hi <= nyq
    return c[keep], lo[keep], hi[keep]


def band_sum(f, p, lo, hi):
    return np.stack([p[(f >= a) & (f < b)].sum(axis=0) for a, b in zip(lo, hi)])


def mono(x):
    x = np.asarray(x, dtype=float)
    return x if x.ndim == 1 else x.mean(axis=1)


def audible_bands(programme, hiss, rate, listening_db=100.0, treble_from_hz=2000.0):
    """(centres, lo, hi, audible, above_hiss) from the stems (``programme`` without its lead-in)."""
    f, _, frames = signal.spectrogram(mono(programme), fs=rate, nperseg=NPERSEG, noverlap=NPERSEG // 2)
    _, pn = signal.welch(mono(hiss), fs=rate, nperseg=NPERSEG)
    centres, lo, hi = iec_bands(rate / 2)
    loud = np.percentile(band_sum(f, frames, lo, hi), 90, axis=1)
    noise = band_sum(f, pn, lo, hi)
    spl = 10 * np.log10(np.maximum(loud * (f[1] - f[0]), 1e-30)) + 10 * math.log10(2) + listening_db
    above = loud > noise
    return centres, lo, hi, above & (spl > terhardt_db_spl(centres)) & (centres >= treble_from_hz), above


def true_treble_loss(programme, hiss, sos, rate, start, listening_db=100.0):
    """The largest cut of the filter ``sos`` in a band where the programme is heard, dB (0 with none)."""
    centres, lo, hi, audible, _ = audible_bands(programme[start:], hiss, rate, listening_db)
    f, pp = signal.welch(mono(programme[start:]), fs=rate, nperseg=NPERSEG)
    _, pp2 = signal.welch(mono(signal.sosfilt(sos, programme, axis=0)[start:]), fs=rate, nperseg=NPERSEG)
    cut = 10 * np.log10(band_sum(f, pp, lo, hi) / band_sum(f, pp2, lo, hi))
    return float(max(0.0, cut[audible].max())) if audible.any() else 0.0
