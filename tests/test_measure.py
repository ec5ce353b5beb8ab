"""Predicted and measured gains and losses against handbook results and scipy."""

import math

import numpy as np
import pytest
from scipy import signal

from audition import design, measure


def white_spectra(rate, n=8193):
    f = np.linspace(0, rate / 2, n)
    return f, np.ones(n)


@pytest.mark.parametrize("f0,q", [(1000.0, 0.7071), (2000.0, 0.5), (1500.0, 1.2), (800.0, 2.0)])
def test_white_noise_reduction_equals_noise_bandwidth(f0, q):
    # Noise-bandwidth result for the second-order low-pass: integral |H|^2 df = (pi/2) Q f0
    # (analog-electronics handbooks, e.g. H. W. Ott, "Noise Reduction Techniques in Electronic
    # Systems"; from memory). White noise over 0..rate/2 then falls by 10 log10((pi/2) Q f0 / (rate/2)).
    # f0 well below Nyquist keeps the bilinear deviation small.
    rate = 48000
    f, white = white_spectra(rate)
    d = design.lowpass(f0, rate, q=q)
    p = measure.predict(f, white, white, d)
    expected = -10 * math.log10((math.pi / 2) * q * f0 / (rate / 2))
    got = p.noise_before_dbfs["flat"] - p.noise_after_dbfs["flat"]
    assert got == pytest.approx(expected, abs=0.2)


def test_white_noise_reduction_measured_on_filtered_noise():
    # The same handbook result, measured: real white noise through sosfilt, PSDs by scipy.signal.welch.
    rate, f0, q = 48000, 1200.0, 0.9
    rng = np.random.default_rng(7)
    x = rng.standard_normal(rate * 20) * 0.01
    d = design.lowpass(f0, rate, q=q)
    y = signal.sosfilt(d.sos, x)
    f, pin = signal.welch(x, fs=rate, nperseg=8192)
    _, pout = signal.welch(y, fs=rate, nperseg=8192)
    m = measure.measure(f, pin, pout, pin, pout)
    expected = -10 * math.log10((math.pi / 2) * q * f0 / (rate / 2))
    assert m.noise_reduction_db["flat"] == pytest.approx(expected, abs=0.2)


def test_same_spectrum_gives_no_snr_gain():
    # Invariant: a filter cannot change the ratio of two signals with the same spectrum.
    f, white = white_spectra(44100)
    shaped = white / (1 + (f / 3000.0) ** 2)
    p = measure.predict(f, shaped, 1e-4 * shaped, design.lowpass(6000, 44100, q=0.8))
    for name, g in p.snr_gain_db.items():
        assert g == pytest.approx(0.0, abs=1e-9), name


def test_treble_loss_zero_without_treble_and_positive_with():
    f, white = white_spectra(44100)
    low_only = np.where(f < 1500, 1.0, 0.0)
    d = design.lowpass(5000, 44100, q=0.7071)
    assert measure.predict(f, low_only, white, d).treble_loss_db == 0.0
    p = measure.predict(f, white, white, d)
    assert p.treble_loss_db > 3.0
    # Direct: a monotone low-pass (Q <= 1/sqrt 2) never lifts, so the power lost is exactly
    # before minus after, and -10 log10(1 - lost/before) = 10 log10(before/after).
    h2 = np.abs(d.digital_response(f)) ** 2
    sel = f >= 2000
    assert p.treble_loss_db == pytest.approx(10 * math.log10(white[sel].sum() / (white[sel] * h2[sel]).sum()), abs=1e-9)


def test_resonant_peak_does_not_pay_for_the_slope():
    # Only what is cut counts: a peaky filter loses at least as much as its cut-only part.
    f, white = white_spectra(44100)
    d = design.lowpass(3000, 44100, q=2.0)
    h2 = np.abs(d.digital_response(f)) ** 2
    sel = f >= 2000
    lost = (white[sel] * np.maximum(0, 1 - h2[sel])).sum()
    expected = -10 * math.log10(1 - lost / white[sel].sum())
    got = measure.predict(f, white, white, d).treble_loss_db
    assert got == pytest.approx(expected, abs=1e-9)
    assert got > 10 * math.log10(white[sel].sum() / (white[sel] * h2[sel]).sum())


def test_many_equals_one_by_one():
    f, white = white_spectra(48000, 4097)
    prog = 1 / (1 + (f / 2000.0) ** 4)
    noise = 1e-5 * (1 + f / 5000.0)
    ds = [design.lowpass(f0, 48000, q=q) for f0 in (4000.0, 8000.0) for q in (0.6, 1.0)]
    h2 = np.array([np.abs(d.digital_response(f)) ** 2 for d in ds])
    gains, loss = measure.gains_and_losses(h2, f, prog, noise, ("flat", "a", "itu468"))
    for i, d in enumerate(ds):
        p = measure.predict(f, prog, noise, d)
        assert p.treble_loss_db == pytest.approx(loss[i], abs=1e-12)
        for name in gains:
            assert p.snr_gain_db[name] == pytest.approx(gains[name][i], abs=1e-12)
    # Hiss above the programme: a lower cutoff gains more (same Q).
    assert gains["flat"][0] > gains["flat"][2]


def test_response_points_and_bad_treble_band():
    f, white = white_spectra(22050)
    d = design.lowpass(3000, 22050, q=0.7071)
    p = measure.predict(f, white, white, d)
    assert p.response_db["15000"] is None
    assert p.response_db["10000"] == pytest.approx(20 * math.log10(abs(d.digital_response(10000.0))), abs=1e-12)
    with pytest.raises(Exception, match="treble-from"):
        measure.predict(f, white, white, d, treble_from_hz=20000.0)


def test_power_dbfs_convention():
    # dBFS as 20 log10(rms): a full-scale sine has mean square 1/2 and reads -3.01 dBFS (GUIDE convention).
    assert measure.power_dbfs(0.5) == pytest.approx(-3.0103, abs=1e-4)
    assert measure.power_dbfs(0.0) == -math.inf
