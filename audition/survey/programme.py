"""The programme estimate and the crossover, where the programme sinks into the noise.

Programme estimate: the Welch PSD of every segment outside the noise reference
minus the noise PSD (the hiss is assumed stationary and uncorrelated with the
programme, so their powers add), averaged over a sliding 1/3 octave before it
is floored at zero (:func:`programme_estimate` says why).

Crossover: the lowest fractional-octave band (:mod:`audition.survey.bands`)
from which the programme stays under the noise up to the top band
(:func:`crossover`).
"""

from __future__ import annotations

import math

import numpy as np

from audition.errors import BadParameter

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
