"""What a filter gains and loses, predicted from spectra and measured after a render.

Everything here works on one-sided power spectral densities (full-scale units²/Hz)
sampled at frequencies ``freqs_hz`` with a uniform spacing, as the survey's Welch
estimates give them. A power is the integral of a PSD over frequency, so its level
in dBFS is 10·log10(power) = 20·log10(rms) (a full-scale sine reads −3.01 dBFS).

Prediction
----------
For a filter H(f) and a weighting W(f) (flat, A or ITU-R BS.468-4 applied to the
power spectrum, i.e. RMS detection),

.. math::

    P_x = \\int S_x(f)\\,|W(f)|^2 df, \\qquad
    P_x' = \\int S_x(f)\\,|W(f)|^2\\,|H(f)|^2 df

for the programme estimate x = p and the noise reference x = n, and

    snr_gain_db = 10·log10[(P_p' / P_n') / (P_p / P_n)]

(how much the weighted programme-to-noise ratio improves), and

    treble_loss_db = -10·log10(1 - L / T),   L = ∫ S_p(f)·max(0, 1 - |H(f)|²) df

over ``treble_from_hz`` .. Nyquist, T the programme's power there: the share of
the programme's treble that the filter takes away, as a positive number of dB.
Only what is cut counts; a resonant peak that lifts one part of the treble does
not pay for what the slope removes above it (otherwise a low, peaky cutoff could
look free).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from audition.errors import BadParameter

DEFAULT_TREBLE_FROM_HZ = 2000.0
RESPONSE_POINTS_HZ = (10000.0, 15000.0)


@dataclass(frozen=True)
class Prediction:
    """Predicted effect of one filter on a surveyed recording.

    Attributes
    ----------
    snr_gain_db : dict
        Weighting name -> gain in weighted programme-to-noise ratio, dB (positive = better).
    treble_loss_db : float
        Share of the programme's power above ``treble_from_hz`` the filter takes away,
        dB (positive = lost; module notes).
    response_db : dict
        Filter magnitude at 10 kHz and 15 kHz (keys "10000", "15000"), dB; None above Nyquist.
    noise_before_dbfs, noise_after_dbfs : dict
        Weighted noise level before and after the filter, dBFS (RMS).
    treble_from_hz : float
    """

    snr_gain_db: dict
    treble_loss_db: float
    response_db: dict
    noise_before_dbfs: dict
    noise_after_dbfs: dict
    treble_from_hz: float

    def to_dict(self) -> dict:
        return {
            "snr_gain_db": dict(self.snr_gain_db),
            "treble_loss_db": self.treble_loss_db,
            "treble_from_hz": self.treble_from_hz,
            "response_db": dict(self.response_db),
            "noise_before_dbfs": dict(self.noise_before_dbfs),
            "noise_after_dbfs": dict(self.noise_after_dbfs),
            "noise_reduction_db": {k: (None if not (math.isfinite(b) and math.isfinite(self.noise_after_dbfs[k]))
                                       else b - self.noise_after_dbfs[k])
                                   for k, b in self.noise_before_dbfs.items()},
        }


def band_power(freqs_hz: np.ndarray, psd: np.ndarray, weight: np.ndarray | None = None,
               lo_hz: float = 0.0, hi_hz: float = math.inf) -> float:
    """Power of a PSD over lo_hz <= f <= hi_hz, optionally times a power weight, by the rectangle rule.

    The rectangle rule with the bin spacing is how scipy.signal.welch's density is
    summed back to the signal's mean square (Parseval), so band powers add up.
    """
    freqs_hz = np.asarray(freqs_hz, dtype=float)
    if freqs_hz.size < 2:
        raise BadParameter("a spectrum needs at least two frequency bins")
    df = freqs_hz[1] - freqs_hz[0]
    p = np.asarray(psd, dtype=float)
    if weight is not None:
        p = p * weight
    sel = (freqs_hz >= lo_hz) & (freqs_hz <= hi_hz)
    return float(np.sum(p[sel]) * df)


def power_dbfs(power: float) -> float:
    """10·log10 of a mean-square power: dBFS as 20·log10(rms); −inf for zero."""
    return 10.0 * math.log10(power) if power > 0 else -math.inf


def filter_power_gain(design, freqs_hz: np.ndarray) -> np.ndarray:
    """|H(f)|² of the digital sections (what a render will do), at ``freqs_hz``."""
    return np.abs(design.digital_response(freqs_hz)) ** 2


def weighted_levels(freqs_hz, psd, weightings, gain=None) -> dict:
    """Weighted RMS level in dBFS of a PSD (optionally after a power gain |H|²), per weighting."""
    from audition.weighting import power_gain

    out = {}
    for name in weightings:
        w = power_gain(name, freqs_hz)
        if gain is not None:
            w = w * gain
        out[name] = power_dbfs(band_power(freqs_hz, psd, w))
    return out


def gains_and_losses(h2: np.ndarray, freqs_hz, programme_psd, noise_psd, weightings,
                     treble_from_hz: float = DEFAULT_TREBLE_FROM_HZ) -> tuple[dict, np.ndarray]:
    """Weighted SNR gain and treble loss for many filters at once.

    Parameters
    ----------
    h2 : ndarray (n_filters, n_bins)
        Power responses |H(f)|² of the filters on the PSDs' frequency grid.

    Returns
    -------
    gains : dict
        Weighting -> array (n_filters,) of SNR gains in dB (nan where a power is zero).
    loss : ndarray (n_filters,)
        Treble loss in dB (0 where the programme has no treble).
    """
    from audition.weighting import power_gain

    freqs_hz = np.asarray(freqs_hz, dtype=float)
    programme_psd = np.asarray(programme_psd, dtype=float)
    noise_psd = np.asarray(noise_psd, dtype=float)
    gains = {}
    for name in weightings:
        w = power_gain(name, freqs_hz)
        pp, pn = float(np.sum(programme_psd * w)), float(np.sum(noise_psd * w))
        pp2, pn2 = h2 @ (programme_psd * w), h2 @ (noise_psd * w)
        with np.errstate(divide="ignore", invalid="ignore"):
            g = 10.0 * np.log10((pp2 / pn2) / (pp / pn)) if pp > 0 and pn > 0 else np.full(len(h2), np.nan)
        gains[name] = np.where(np.isfinite(g), g, np.nan)
    return gains, treble_loss_db(h2, freqs_hz, programme_psd, treble_from_hz)


def treble_loss_db(h2: np.ndarray, freqs_hz, programme_psd, treble_from_hz: float) -> np.ndarray:
    """-10·log10(1 - L/T) of the module notes for each row of ``h2`` (n_filters, n_bins); 0 without treble."""
    treble = np.asarray(freqs_hz) >= treble_from_hz
    s = np.asarray(programme_psd, dtype=float)[treble]
    t0 = float(np.sum(s))
    if t0 <= 0:
        return np.zeros(len(h2))
    lost = np.maximum(0.0, 1.0 - h2[:, treble]) @ s
    with np.errstate(divide="ignore"):
        return -10.0 * np.log10(np.maximum(1.0 - lost / t0, 0.0))


def predict(freqs_hz, programme_psd, noise_psd, design, *, weightings=None,
            treble_from_hz: float = DEFAULT_TREBLE_FROM_HZ) -> Prediction:
    """Predict the weighted SNR gain and the treble loss of ``design`` from two spectra.

    Parameters
    ----------
    freqs_hz : ndarray
        Uniformly spaced bin frequencies 0 .. rate/2 of both PSDs.
    programme_psd, noise_psd : ndarray
        One-sided PSDs (full-scale²/Hz) of the programme estimate and the noise reference.
    design : audition.design.Design
        Its digital response at the file's rate is used (what the render does).
    weightings : sequence of str, optional
        Default: all of :data:`audition.weighting.WEIGHTINGS`.
    treble_from_hz : float
        Lower edge of the treble band for the loss figure, Hz.

    Returns
    -------
    Prediction

    Raises
    ------
    BadParameter
        When the treble band starts at or above Nyquist.
    """
    from audition.weighting import WEIGHTINGS

    weightings = tuple(weightings or WEIGHTINGS)
    freqs_hz = np.asarray(freqs_hz, dtype=float)
    nyq = freqs_hz[-1]
    if not 0 < treble_from_hz < nyq:
        raise BadParameter(f"treble-from={treble_from_hz!r} Hz: must lie between 0 and Nyquist ({nyq:g} Hz)")
    h2 = filter_power_gain(design, freqs_hz)
    gains, loss = gains_and_losses(h2[None, :], freqs_hz, programme_psd, noise_psd, weightings, treble_from_hz)
    response = {f"{f:.0f}": (float(20 * np.log10(abs(design.digital_response(f)))) if f < design.rate_hz / 2 else None)
                for f in RESPONSE_POINTS_HZ}
    return Prediction(
        snr_gain_db={k: (None if np.isnan(v[0]) else float(v[0])) for k, v in gains.items()},
        treble_loss_db=float(loss[0]),
        response_db=response,
        noise_before_dbfs=weighted_levels(freqs_hz, noise_psd, weightings),
        noise_after_dbfs=weighted_levels(freqs_hz, noise_psd, weightings, gain=h2),
        treble_from_hz=float(treble_from_hz),
    )


@dataclass(frozen=True)
class Measured:
    """Figures measured on a rendered file against its input.

    Attributes
    ----------
    noise_reduction_db : dict
        Weighting -> how far the noise reference's weighted level fell, dB (positive = quieter).
    noise_after_dbfs : dict
        Weighting -> weighted level of the noise reference in the output, dBFS.
    treble_loss_db : float
        Share of the programme's power above ``treble_from_hz`` taken away, dB
        (module notes), measured on the programme estimates (noise subtracted) of
        input and output.
    snr_gain_db : dict
        Weighting -> measured gain in weighted programme-to-noise ratio, dB: the
        programme estimates' weighted power ratio (output over input) minus the
        noise reference's, the measured counterpart of :attr:`Prediction.snr_gain_db`.
    """

    noise_reduction_db: dict
    noise_after_dbfs: dict
    treble_loss_db: float
    treble_from_hz: float
    snr_gain_db: dict | None = None

    def to_dict(self) -> dict:
        return {
            "snr_gain_db": dict(self.snr_gain_db or {}),
            "noise_reduction_db": dict(self.noise_reduction_db),
            "noise_after_dbfs": dict(self.noise_after_dbfs),
            "treble_loss_db": self.treble_loss_db,
            "treble_from_hz": self.treble_from_hz,
        }


def measure(freqs_hz, noise_in_psd, noise_out_psd, programme_in_psd, programme_out_psd, *, weightings=None,
            treble_from_hz: float = DEFAULT_TREBLE_FROM_HZ) -> Measured:
    """Compare the surveyed spectra of an input and its rendered output.

    The noise PSDs come from the same noise reference spans in both files; the
    programme PSDs are the survey's programme estimates (noise subtracted).
    """
    from audition.weighting import WEIGHTINGS, power_gain

    weightings = tuple(weightings or WEIGHTINGS)
    reduction, after, gain = {}, {}, {}
    for name in weightings:
        w = power_gain(name, freqs_hz)
        p_in, p_out = band_power(freqs_hz, noise_in_psd, w), band_power(freqs_hz, noise_out_psd, w)
        after[name] = power_dbfs(p_out)
        reduction[name] = 10.0 * math.log10(p_in / p_out) if p_in > 0 and p_out > 0 else None
        s_in, s_out = band_power(freqs_hz, programme_in_psd, w), band_power(freqs_hz, programme_out_psd, w)
        # (S_out/N_out)/(S_in/N_in) = (S_out/S_in)·(N_in/N_out)
        gain[name] = (10.0 * math.log10(s_out / s_in) + reduction[name]
                      if s_in > 0 and s_out > 0 and reduction[name] is not None else None)
    # The render's power response seen through the two programme estimates, bin by bin.
    p_in = np.asarray(programme_in_psd, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(p_in > 0, np.asarray(programme_out_psd, dtype=float) / p_in, 1.0)
    loss = float(treble_loss_db(ratio[None, :], freqs_hz, p_in, treble_from_hz)[0])
    return Measured(reduction, after, loss, float(treble_from_hz), gain)
