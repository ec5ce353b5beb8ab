"""BS.1770-4 loudness against the Recommendation's statements and pyloudnorm."""

import doctest
import math

import numpy as np
import pytest

import audition.loudness
from audition.errors import BadParameter
from audition.loudness import LoudnessMeter, gain_to_match_db, integrated_lkfs, k_filter


def sine(rate_hz, seconds, f_hz=1000.0, dbfs_peak=0.0):
    t = np.arange(int(round(rate_hz * seconds))) / rate_hz
    return 10.0 ** (dbfs_peak / 20.0) * np.sin(2.0 * np.pi * f_hz * t)


def in_channel(x, channels, index):
    out = np.zeros((len(x), channels))
    out[:, index] = x
    return out


# ---------------------------------------------------------------------------
# Synthetic clips (seeded), each a multiple of 100 ms long so that pyloudnorm's
# block count (it rounds) and ours (complete blocks only) agree.
# ---------------------------------------------------------------------------


def clip_noise_stereo(rate):
    return np.random.default_rng(1770).normal(0.0, 0.1, (rate * 6, 2))


def clip_bursts_with_silence(rate):
    # 1 kHz bursts (0.5 s on, 0.5 s of digital silence), then 1 s at -60 dBFS, which the
    # relative gate drops, then 1 s of silence, which the absolute gate drops.
    x = sine(rate, 8.0, 1000.0, -12.0)
    t = np.arange(len(x)) / rate
    x[(t % 1.0) >= 0.5] = 0.0
    x[(t >= 6.0) & (t < 7.0)] = sine(rate, 1.0, 440.0, -60.0)
    x[t >= 7.0] = 0.0
    return x


def clip_stereo_unbalanced(rate):
    # Loud low-passed noise on the left, a quiet 3 kHz tone on the right.
    rng = np.random.default_rng(468)
    left = np.convolve(rng.normal(0.0, 0.3, rate * 4), np.ones(8) / 8, mode="same")
    return np.column_stack([left, sine(rate, 4.0, 3000.0, -30.0)])


def clip_five_channel(rate):
    # L R C Ls Rs with different levels, so the 1.41 surround weights matter.
    rng = np.random.default_rng(61672)
    levels = np.array([0.1, 0.05, 0.08, 0.2, 0.02])
    return rng.normal(0.0, 1.0, (rate * 3, 5)) * levels


CLIPS = {
    "noise_stereo": clip_noise_stereo,
    "bursts_with_silence": clip_bursts_with_silence,
    "stereo_unbalanced": clip_stereo_unbalanced,
    "five_channel": clip_five_channel,
}


# ---------------------------------------------------------------------------
# The Recommendation's own statements
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("rate_hz", [48000, 44100, 96000])
@pytest.mark.parametrize("channels, index", [(1, 0), (2, 0), (2, 1), (5, 2), (6, 0)])
@pytest.mark.parametrize("dbfs_peak, expected", [(0.0, -3.01), (-20.0, -23.01)])
def test_sine_in_one_front_channel(rate_hz, channels, index, dbfs_peak, expected):
    # ITU-R BS.1770-4, Annex 1: "a 0 dB FS 1 kHz sine wave applied to the left,
    # centre, or right channel input will indicate a loudness of -3.01 LKFS"; the
    # measure scales with level, so -20 dB FS reads -23.01. The Recommendation states
    # no tolerance here; 0.02 LU covers the 0.007 LU by which its own 48 kHz table misses
    # -3.01 (it reads -3.004) and the 0.005 LU of bilinear warping at 96 kHz (-2.999).
    x = in_channel(sine(rate_hz, 2.0, 1000.0, dbfs_peak), channels, index)
    assert integrated_lkfs(x, rate_hz) == pytest.approx(expected, abs=0.02)


# ITU-R BS.1770-4 Annex 1, Table 1 (stage 1, the high shelf) and Table 2 (stage 2, the
# high-pass), the coefficients at 48 kHz as printed (a0 = 1). Checked digit by digit against
# tests/test_weighting.py, which names where its copy was checked.
BS1770_TABLE_48K = {
    "shelf": ([1.53512485958697, -2.69169618940638, 1.19839281085285], [1.0, -1.69065929318241, 0.73248077421585]),
    "highpass": ([1.0, -2.0, 1.0], [1.0, -1.99004745483398, 0.99007225036621]),
}


def test_the_meter_k_weights_with_the_tabulated_48k_filter():
    # The loudness path itself (k_filter and LoudnessMeter), not only the coefficient
    # table: its impulse response equals the two tabulated stages run by
    # scipy.signal.lfilter (reference library), and a 1 kHz sine read by the meter equals
    # eq. (2)-(4) applied by hand to the tabulated filter's output.
    from scipy.signal import lfilter

    impulse = np.zeros(4800)
    impulse[0] = 1.0
    expected = impulse
    for b, a in BS1770_TABLE_48K.values():
        expected = lfilter(b, a, expected)
    got, _ = k_filter(impulse, 48000)
    np.testing.assert_allclose(got[:, 0], expected, rtol=0, atol=1e-14)

    x = sine(48000, 2.0, 1000.0, -20.0)
    y = x
    for b, a in BS1770_TABLE_48K.values():
        y = lfilter(b, a, y)
    z = np.array([np.mean(y[j * 4800:j * 4800 + 19200] ** 2) for j in range(17)])  # eq. (3), 400 ms, 75 % overlap
    by_hand = -0.691 + 10 * np.log10(np.mean(z))  # eq. (4)/(7); every block passes both gates
    assert integrated_lkfs(x, 48000) == pytest.approx(by_hand, abs=1e-9)
    assert by_hand == pytest.approx(-23.01, abs=0.01)  # the Recommendation's -3.01 LKFS at 0 dB FS, less 20 dB


def test_surround_channels_weigh_1_41():
    # ITU-R BS.1770-4 Table 3: G = 1.41 (+1.49 dB) for the surround channels Ls, Rs.
    x = sine(48000, 2.0)
    front = integrated_lkfs(in_channel(x, 5, 0), 48000)
    for index in (3, 4):
        assert integrated_lkfs(in_channel(x, 5, index), 48000) - front == pytest.approx(10 * math.log10(1.41),
                                                                                         abs=1e-9)


def test_lfe_is_not_counted_in_six_channels():
    # ITU-R BS.1770-4: the LFE channel is not included (default order L R C LFE Ls Rs).
    assert integrated_lkfs(in_channel(sine(48000, 2.0), 6, 3), 48000) == -math.inf


def test_channel_powers_add():
    # ITU-R BS.1770-4 eq. (4): the same sine in L and R reads 10·log10(2) = 3.01 LU louder.
    x = sine(48000, 2.0)
    one = integrated_lkfs(in_channel(x, 2, 0), 48000)
    assert integrated_lkfs(np.column_stack([x, x]), 48000) - one == pytest.approx(10 * math.log10(2), abs=1e-9)


# ---------------------------------------------------------------------------
# Against pyloudnorm (reference library)
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("rate_hz", [48000, 44100])
@pytest.mark.parametrize("clip", list(CLIPS))
def test_integrated_loudness_agrees_with_pyloudnorm(clip, rate_hz):
    # pyloudnorm.Meter with filter_class="DeMan", its implementation of the BS.1770
    # filter itself (its default "K-weighting" class is an RBJ approximation that reads
    # about 0.04 LU lower on noise). Within 0.1 LU; at 48 kHz both run the tabulated
    # filter and agree to rounding. At 44.1 kHz the derived high-pass differs in
    # passband gain by 0.004 dB (see audition.weighting.k_weighting_sos).
    import pyloudnorm

    x = CLIPS[clip](rate_hz)
    ours = integrated_lkfs(x, rate_hz)
    theirs = pyloudnorm.Meter(rate_hz, filter_class="DeMan").integrated_loudness(x)
    assert ours == pytest.approx(theirs, abs=0.1)
    if rate_hz == 48000:
        assert ours == pytest.approx(theirs, abs=1e-6)


def test_blockwise_loudness_agrees_with_pyloudnorm():
    # pyloudnorm.Meter.blockwise_loudness: eq. (4) per 400 ms block, every 100 ms.
    import pyloudnorm

    x = clip_bursts_with_silence(48000)
    meter = LoudnessMeter(48000, 1)
    meter.feed(x)
    reference = pyloudnorm.Meter(48000, filter_class="DeMan")
    reference.integrated_loudness(x)
    theirs = np.array(reference.blockwise_loudness)
    ours = meter.block_loudness_lkfs()
    assert ours.shape == theirs.shape
    finite = np.isfinite(theirs)
    assert np.array_equal(finite, np.isfinite(ours))
    np.testing.assert_allclose(ours[finite], theirs[finite], rtol=0, atol=1e-6)


def test_the_burst_clip_exercises_both_gates():
    # Guard on the test data itself: the pyloudnorm comparison of "bursts_with_silence"
    # only checks the gates if some blocks fall below each of them.
    meter = LoudnessMeter(48000, 1)
    meter.feed(clip_bursts_with_silence(48000))
    p_j = meter.block_powers()
    l_j = meter.block_loudness_lkfs()
    above_absolute = l_j > -70.0  # ITU-R BS.1770-4 eq. (5)
    gamma_r = -0.691 + 10 * np.log10(np.mean(p_j[above_absolute])) - 10.0  # eq. (6)
    assert np.sum(~above_absolute) >= 5
    assert np.sum(above_absolute & (l_j <= gamma_r)) >= 5
    ungated = -0.691 + 10 * np.log10(np.mean(p_j))
    assert meter.result() - ungated > 1.0


# ---------------------------------------------------------------------------
# Streaming
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("rate_hz", [48000, 44100, 8000])
def test_streaming_over_odd_block_sizes_equals_one_shot(rate_hz):
    # Invariant (split-chunk equality): state carried across blocks gives the one-pass result.
    x = np.column_stack([clip_bursts_with_silence(rate_hz)[: rate_hz * 5],
                         np.random.default_rng(7).normal(0, 0.05, rate_hz * 5)])
    sizes = [1, 2, 3, 997, rate_hz // 10 - 1, rate_hz // 10 + 1, 12345, 0, 40001]
    meter = LoudnessMeter(rate_hz, 2)
    start, k = 0, 0
    while start < len(x):
        meter.feed(x[start:start + sizes[k % len(sizes)]])
        start += sizes[k % len(sizes)]
        k += 1
    one_shot = integrated_lkfs(x, rate_hz)
    assert meter.frames == len(x)
    assert abs(meter.result() - one_shot) < 1e-9
    whole = LoudnessMeter(rate_hz, 2)
    whole.feed(x)
    np.testing.assert_allclose(meter.block_powers(), whole.block_powers(), rtol=1e-12, atol=0)


def test_partial_results_equal_the_loudness_of_what_was_fed():
    # Invariant: result() after feeding a prefix is the loudness of that prefix.
    x = clip_noise_stereo(48000)
    meter = LoudnessMeter(48000, 2)
    meter.feed(x[:100000])
    assert abs(meter.result() - integrated_lkfs(x[:100000], 48000)) < 1e-9
    meter.feed(x[100000:])
    assert abs(meter.result() - integrated_lkfs(x, 48000)) < 1e-9


def test_k_filter_chunks_with_explicit_state_equal_scipy_one_pass():
    # Reference library: scipy.signal.sosfilt over the whole signal with the same sections.
    from scipy.signal import sosfilt

    from audition.weighting import k_weighting_sos

    x = np.random.default_rng(3).normal(0, 0.1, (30011, 2))
    expected = sosfilt(k_weighting_sos(44100), x, axis=0)
    pieces, zi = [], None
    for lo, hi in [(0, 1), (1, 4410), (4410, 17000), (17000, 30011)]:
        y, zi = k_filter(x[lo:hi], 44100, zi)
        pieces.append(y)
    np.testing.assert_allclose(np.concatenate(pieces), expected, rtol=0, atol=1e-15)


# ---------------------------------------------------------------------------
# Matching, edges and errors
# ---------------------------------------------------------------------------


def test_gain_to_match_reaches_the_target():
    # Derivable: BS.1770 loudness is homogeneous (the gates move with the level), so
    # applying target - source dB lands exactly on the target.
    x = clip_stereo_unbalanced(48000)
    source = integrated_lkfs(x, 48000)
    gain = gain_to_match_db(source, -23.0)
    assert integrated_lkfs(x * 10.0 ** (gain / 20.0), 48000) == pytest.approx(-23.0, abs=1e-9)


@pytest.mark.parametrize("source, target", [(-math.inf, -23.0), (-20.0, math.nan), ("-20", -23.0)])
def test_gain_to_match_refuses_what_has_no_loudness(source, target):
    with pytest.raises(BadParameter, match="need a finite loudness"):
        gain_to_match_db(source, target)


@pytest.mark.parametrize("x", [np.zeros((48000, 2)), sine(48000, 0.399)])
def test_silence_and_too_short_read_minus_infinity(x):
    # ITU-R BS.1770-4: no complete 400 ms block above the -70 LKFS gate, nothing to average.
    assert integrated_lkfs(x, 48000) == -math.inf


def test_explicit_channel_weights_are_used():
    # ITU-R BS.1770-4 eq. (4): weights scale the channel powers; G = 2 adds 3.01 LU.
    x = in_channel(sine(48000, 2.0), 4, 1)
    plain = integrated_lkfs(x, 48000, channel_weights=[1, 1, 1, 1])
    doubled = integrated_lkfs(x, 48000, channel_weights=[1, 2, 1, 1])
    assert doubled - plain == pytest.approx(10 * math.log10(2), abs=1e-9)


@pytest.mark.parametrize("call, match", [
    (lambda: integrated_lkfs(np.zeros((48000, 4)), 48000), "channels=4"),
    (lambda: integrated_lkfs(np.zeros((48000, 2)), 48000, channel_weights=[1.0]), "channel_weights="),
    (lambda: integrated_lkfs(np.zeros((48000, 2)), 48000, channel_weights=[1.0, -1.0]), "channel_weights="),
    (lambda: integrated_lkfs(np.full(48000, np.nan), 48000), "NaN"),
    (lambda: integrated_lkfs(np.zeros((10, 2, 2)), 48000), "shape="),
    (lambda: integrated_lkfs(np.zeros(48000), 1000), "rate="),
    (lambda: LoudnessMeter(48000, 2).feed(np.zeros((100, 3))), "3 channels, expected 2"),
    (lambda: LoudnessMeter(48000, 0), "channels=0"),
    (lambda: k_filter(np.zeros((10, 2)), 48000, zi=np.zeros((2, 2))), "zi shape="),
])
def test_user_errors_are_one_line_bad_parameters(call, match):
    with pytest.raises(BadParameter, match=match) as err:
        call()
    assert "\n" not in str(err.value)


def test_docstring_examples():
    result = doctest.testmod(audition.loudness, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0 and result.failed == 0
