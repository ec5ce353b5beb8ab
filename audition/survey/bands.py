"""Fractional-octave bands of IEC 61260-1:2014 (base 10): centres, edges, and band powers of a PSD.

Mid-band frequencies f_m = f_r·G^(x/b) for odd b and f_r·G^((2x+1)/(2b)) for
even b (clause 5.5), edges f_m·G^(∓1/(2b)) (clause 5.6), with G = 10^(3/10)
and f_r = 1000 Hz (:func:`band_centre`, :func:`band_edges`,
:func:`band_centres`). :func:`band_levels` integrates a one-sided PSD over the
bands, splitting a bin cut by an edge in proportion.
"""

from __future__ import annotations

import math

import numpy as np

from audition.errors import BadParameter

#: IEC 61260-1:2014 octave frequency ratio, base 10: G = 10^(3/10) (clause 5.2).
G = 10.0 ** 0.3
#: IEC 61260-1:2014 reference frequency, 1000 Hz (clause 5.4).
REFERENCE_HZ = 1000.0
DEFAULT_FRACTION = 3
DEFAULT_LOW_HZ = 20.0


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


def _bin_edges(freqs_hz: np.ndarray) -> np.ndarray:
    """Edges of the bins as the band integration takes them: bin k covers f_k ± Δf/2, the end bins halved."""
    df = freqs_hz[1] - freqs_hz[0]
    return np.concatenate([[0.0], freqs_hz[:-1] + df / 2, [freqs_hz[-1]]])


def _bands_below(fraction: int, lo_hz: float, top_hz: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Centres and edges of the bands from ``lo_hz`` whose upper edge lies at or below ``top_hz``."""
    c = band_centres(fraction, lo_hz, top_hz)
    lo, hi = band_edges(c, fraction)
    keep = hi <= top_hz * (1 + 1e-12)
    return c[keep], lo[keep], hi[keep]


def band_matrix(freqs_hz, fraction: int = DEFAULT_FRACTION, lo_hz: float = DEFAULT_LOW_HZ) -> np.ndarray:
    """(bins, bands): a PSD row times it gives :func:`band_levels`'s band powers of that PSD.

    Band integration is linear in the PSD, so entry (k, b) is the overlap of bin k with band b
    (end bins at twice their density, as in :func:`_cumulative`); for a PSD per analysis segment
    this is one matrix product instead of a loop of interpolations.
    """
    f = np.asarray(freqs_hz, dtype=float)
    _, lo, hi = _bands_below(fraction, lo_hz, f[-1])
    edges = _bin_edges(f)
    overlap = np.clip(np.minimum(edges[1:, None], hi[None, :]) - np.maximum(edges[:-1, None], lo[None, :]), 0.0, None)
    overlap[0] *= 2.0
    overlap[-1] *= 2.0
    return overlap


def _cumulative(freqs_hz: np.ndarray, psd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Bin edges and the integral of the PSD up to each edge.

    The density is piecewise constant: bin k covers f_k ± Δf/2, the DC and
    Nyquist bins only their half inside 0 .. rate/2 at twice their density (a
    one-sided density's end bins are not doubled), so the integral over 0 ..
    rate/2 is Σ P_k·Δf, the Parseval sum of scipy.signal.welch.
    """
    edges = _bin_edges(freqs_hz)
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
        Uniform bin frequencies 0 .. rate/2 (as from :class:`~audition.survey.welch.WelchPSD`).
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
    c, lo, hi = _bands_below(fraction, lo_hz, top)
    flat = p.reshape(-1, f.size)
    out = np.empty((flat.shape[0], c.size))
    for i, row in enumerate(flat):
        edges, cum = _cumulative(f, row)
        out[i] = np.interp(hi, edges, cum) - np.interp(lo, edges, cum)
    return c, np.maximum(out, 0.0).reshape(p.shape[:-1] + (c.size,))
