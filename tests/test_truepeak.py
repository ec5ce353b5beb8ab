"""Tests of audition.truepeak: the ITU-R BS.1770-4 Annex 2 true-peak meter and its exact screen.

References: Recommendation ITU-R BS.1770-4 Annex 2 (the 4x interpolating filter and the
method: oversample, take the largest magnitude); scipy.signal.upfirdn (reference library:
the same filter applied as a plain polyphase upsampler, no screen, no blocks);
scipy.signal.resample_poly(x, 4, 1) (reference library with its own anti-imaging filter,
within ~0.2 dB on band-limited signals).
"""

from __future__ import annotations

import doctest
import itertools

import numpy as np
import pytest
import scipy.signal

from audition import annex2, truepeak
from audition.errors import BadParameter


@pytest.fixture(autouse=True)
def _each_implementation(impl):
    """Every check here runs on both implementations of the scan (audition.kernels: numpy and C)."""


def db(v):
    return 20 * np.log10(v)


def upfirdn_peak(x) -> float:
    """Reference: max(|samples|, |4x Annex 2 interpolation|) with scipy.signal.upfirdn (whole signal at once)."""
    x = np.asarray(x, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    y = scipy.signal.upfirdn(annex2.annex2_prototype(), x, up=4, axis=0)
    return max(float(np.abs(x).max()), float(np.abs(y).max()))


def metered(x, splits=None, screen=True) -> truepeak.TruePeakMeter:
    x = np.asarray(x, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    m = truepeak.TruePeakMeter(x.shape[1], screen=screen)
    edges = [0] + list(np.cumsum(splits or [])) + [len(x)]
    for a, b in zip(edges[:-1], edges[1:]):
        m.process(x[a:b])
    m.finish()
    return m


def fs4_sine(frames=4800, amplitude=1.0):
    # x[n] = A sin(pi/2 n + pi/4): a sine at a quarter of the rate whose samples all fall at
    # 45 degrees from its crests, so every sample is A/sqrt(2) (-3.01 dB below the crest)
    n = np.arange(frames)
    return amplitude * np.sin(np.pi / 2 * n + np.pi / 4)


def band_limited(frames, channels, seed, top=0.4, tones=40):
    """Seeded random-phase multitone below ``top`` x the rate, Hann-tapered so both ends are quiet."""
    rng = np.random.default_rng(seed)
    n = np.arange(frames)[:, None, None]
    f = rng.uniform(0.002, top, (1, tones, channels))
    ph = rng.uniform(0, 2 * np.pi, (1, tones, channels))
    a = rng.uniform(0.2, 1.0, (1, tones, channels))
    x = (a * np.sin(2 * np.pi * f * n + ph)).sum(axis=1)
    x *= np.hanning(frames)[:, None]
    return 0.9 * x / np.abs(x).max()


def signals():
    rng = np.random.default_rng(2024)
    t = np.arange(6000)
    return {
        "white noise": 0.3 * rng.standard_normal((6000, 2)),
        "low-passed noise": scipy.signal.sosfilt(scipy.signal.butter(4, 0.3, output="sos"),
                                                 rng.standard_normal((6000, 3)), axis=0),
        "tone and noise": (0.2 * np.sin(2 * np.pi * 997 / 48000 * t)[:, None] * [1.0, 0.7]
                           + 0.05 * rng.standard_normal((6000, 2))),
        "pure 1 kHz sine": 0.5 * np.sin(2 * np.pi * 1000 / 48000 * t)[:, None],
        "fs/4 sine at 45 degrees": fs4_sine(6000)[:, None],
        "near-Nyquist tones": band_limited(6000, 2, seed=3, top=0.49),
        "sparse clicks": np.where(rng.uniform(size=(6000, 1)) > 0.999, rng.choice([-1.0, 1.0], (6000, 1)), 0.0),
        "24-bit integer levels": np.rint(rng.standard_normal((6000, 2)) * 2 ** 21),
    }


# ---------------------------------------------------------------------------
# the filter is the tabulated one
# ---------------------------------------------------------------------------


def test_annex2_table_is_symmetric_and_a_4x_interpolator():
    # ITU-R BS.1770-4 Annex 2 tabulates a linear-phase (symmetric) 48-tap prototype: phase 3 is
    # phase 0 reversed and phase 2 is phase 1 reversed. A mistyped tap breaks this.
    h = annex2.ANNEX2_PHASES
    assert h.shape == (4, 12)
    np.testing.assert_array_equal(h[3], h[0][::-1])
    np.testing.assert_array_equal(h[2], h[1][::-1])
    proto = annex2.annex2_prototype()
    np.testing.assert_array_equal(proto, proto[::-1])
    # An interpolator by 4 has a DC gain of 4 over its zero-stuffed input (common practice, no
    # source): each phase passes DC at about unity.
    assert proto.sum() == pytest.approx(4.0, rel=0.02)
    # every tap is a multiple of 2**-16 as tabulated (the table's values are exact binary fractions)
    np.testing.assert_array_equal(h * 2 ** 16, np.rint(h * 2 ** 16))


def test_screen_constants_bound_every_phase():
    # The bound |y_k| <= g*|x_centre| + c*max|diff| must hold for the worst window: maximise
    # |y_k| over windows with |x_centre| <= 1 and |diffs| <= 1 by brute force over the vertices
    # (the maximum of a linear function over a box is at a vertex).
    # All 2**12 vertices are tried. The screen shares one gain and one difference constant between
    # the phases (the largest of each), so it is within a few per cent of the exact worst case.
    g, c = annex2.SCREEN_GAIN, annex2.SCREEN_DIFF
    signs = np.array(list(itertools.product([-1.0, 1.0], repeat=12)))  # centre, then 11 differences
    worst = 0.0
    for k, h in enumerate(annex2.ANNEX2_PHASES):
        m = annex2._CENTRES[k]
        # x at lags 0..11 from the centre lag m and the differences e_l = x[lag l] - x[lag l+1]
        x = np.empty((len(signs), 12))
        x[:, m] = signs[:, 0]
        for lag in range(m - 1, -1, -1):
            x[:, lag] = x[:, lag + 1] + signs[:, 1 + lag]
        for lag in range(m + 1, 12):
            x[:, lag] = x[:, lag - 1] - signs[:, lag]
        worst = max(worst, float(np.abs(x @ h).max()))
    assert worst <= g + c
    assert worst >= 0.98 * (g + c)


# ---------------------------------------------------------------------------
# the method's facts and the reference libraries
# ---------------------------------------------------------------------------


def test_fs4_sine_at_45_degrees_reads_its_crest_not_its_samples():
    # A fact of the method (ITU-R BS.1770-4 Annex 2: the sample peak under-reads crests that fall
    # between samples): a full-scale fs/4 sine sampled at 45 degrees has every sample at
    # 1/sqrt(2), -3.01 dBFS, and a crest of 0 dB.
    x = fs4_sine()
    assert db(np.abs(x).max()) == pytest.approx(-3.0103, abs=1e-4)
    m = metered(x)
    # The Annex 2 phases fall nominally 1/8 and 3/8 of a sample from the samples, 11.25 degrees
    # from the crest at fs/4 (cos 11.25 deg = -0.17 dB), and the tabulated phases' gains at fs/4
    # are -0.02 and +0.22 dB (computed from the table): the reading is within 0.25 dB of the
    # crest (it is +0.08 dB), 3 dB above the samples.
    assert m.peak_dbtp == pytest.approx(0.0, abs=0.25)
    # Reference library: scipy.signal.resample_poly(x, 4, 1), its own Kaiser-windowed filter.
    ref = db(np.abs(scipy.signal.resample_poly(x, 4, 1)[400:-400]).max())
    assert m.peak_dbtp == pytest.approx(ref, abs=0.2)
    # and the same filter through scipy.signal.upfirdn (reference library) gives the same number
    assert m.peak == pytest.approx(upfirdn_peak(x), rel=1e-12)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_band_limited_signals_agree_with_resample_poly(seed):
    # Reference library: scipy.signal.resample_poly(x, 4, 1). Different filters, so not equal,
    # but on signals below 0.4 x the rate both reconstruct the same waveform within ~0.2 dB.
    x = band_limited(8000, 2, seed)
    ref = np.abs(scipy.signal.resample_poly(x, 4, 1, axis=0)).max()
    tp = metered(x).peak
    assert db(tp) == pytest.approx(db(ref), abs=0.2)
    assert tp >= np.abs(x).max()  # the samples are part of the reading


@pytest.mark.parametrize("name", sorted(signals()))
def test_meter_equals_upfirdn_of_the_whole_signal(name):
    # Reference library: scipy.signal.upfirdn with the Annex 2 prototype over the whole signal at
    # once (the full computation, zero before and after the signal), plus the sample peak.
    x = signals()[name]
    assert metered(x, splits=[1, 7, 1000, 11, 12, 13, 4097]).peak == pytest.approx(upfirdn_peak(x), rel=1e-12)


# ---------------------------------------------------------------------------
# the screen is exact
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("name", sorted(signals()))
@pytest.mark.parametrize("splits", [None, [1, 1, 1, 5, 10, 11], [7] * 50, [4097], [11, 12, 13, 1], [2999, 1]])
def test_screened_reading_equals_the_full_computation_bit_for_bit(name, splits):
    # The screen only skips windows the bound proves cannot reach the running maximum, and a
    # window's value does not depend on which others are evaluated: the reading is identical
    # (==, not approximately) to interpolating every window, whatever the block sizes.
    x = signals()[name]
    full = metered(x, screen=False)
    assert full.windows_interpolated == full.windows_total == (len(x) + 11) * x.shape[1]
    for s in (None, splits):
        screened = metered(x, splits=s)
        assert screened.peak == full.peak
        assert screened.windows_total == full.windows_total


def test_screen_skips_most_windows_of_programme_like_signals():
    # What makes the meter cheap: on noise-like programme (a 997 Hz tone under low-passed noise,
    # the signal of benchmarks/bench_render.py) the bound rules out all but a few windows.
    rng = np.random.default_rng(1)
    t = np.arange(48000)
    x = 0.2 * np.sin(2 * np.pi * 997 / 48000 * t)[:, None] * [1.0, 0.7] + 0.05 * rng.standard_normal((48000, 2))
    x = scipy.signal.sosfilt(scipy.signal.butter(2, 8000, fs=48000, output="sos"), x, axis=0)
    m = metered(x, splits=[4096] * 11)
    assert m.windows_interpolated < 0.05 * m.windows_total
    assert m.peak == metered(x, screen=False).peak


# ---------------------------------------------------------------------------
# the object
# ---------------------------------------------------------------------------


def test_meter_edges():
    m = truepeak.TruePeakMeter(2)
    m.process(np.zeros((0, 2)))
    assert m.peak == 0.0 and m.peak_dbtp is None
    with pytest.raises(BadParameter, match="2-channel"):
        m.process(np.zeros((5, 3)))
    with pytest.raises(BadParameter, match="at least 1"):
        truepeak.TruePeakMeter(0)
    m.process(np.zeros((5, 2)))
    m.finish()
    m.finish()  # twice is harmless
    assert m.peak_dbtp is None  # digital silence
    with pytest.raises(BadParameter, match="finished"):
        m.process(np.zeros((5, 2)))
    # mono may be 1-D; a lone full-scale impulse: no tap of the filter exceeds 0.973, so the
    # impulse's own sample is the peak
    assert truepeak.true_peak(np.r_[np.zeros(20), 1.0, np.zeros(20)]) == 1.0
    assert truepeak.true_peak_dbtp(fs4_sine()) == pytest.approx(metered(fs4_sine()).peak_dbtp, abs=0)


def test_integer_levels_scale_like_full_scale_values():
    # The meter is linear: integers in LSBs read 2**(b-1) times their full-scale values, so the
    # writer can meter its integers and divide once (power-of-two scaling is exact in floating point).
    x = signals()["24-bit integer levels"]
    assert metered(x).peak / 2 ** 23 == metered(x / 2 ** 23).peak


def test_docstring_examples():
    # the fs/4 example in TruePeakMeter's docstring runs as a test
    result = doctest.testmod(truepeak, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0 and result.failed == 0
