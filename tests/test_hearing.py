"""The hearing model: threshold in quiet, critical-band rate, ISO 532-1 loudness, the hiss heard.

Each check names the source it is held against. mosqito (a test dependency, in the `test`
extra) is the reference library for ISO 532-1; its entry points that take one-third-octave
levels are the two private steps of its stationary method, ``_main_loudness`` (core loudness)
and ``_calc_slopes`` (slopes, total and specific loudness): its public functions take a
signal or a fine spectrum and run their own filter bank first.
"""

from __future__ import annotations

import doctest

import numpy as np
import pytest
from mosqito.sq_metrics.loudness.loudness_zwst._calc_slopes import _calc_slopes
from mosqito.sq_metrics.loudness.loudness_zwst._main_loudness import _main_loudness

import audition.hearing.heard
import audition.hearing.threshold
import audition.hearing.zwicker
from audition.errors import BadParameter
from audition.hearing import (
    BARK_GRID,
    THIRD_OCTAVE_HZ,
    bark,
    hiss_heard,
    loudness,
    threshold_db_spl,
)
from audition.hearing.heard import BAND_BARK, JND_DB, power_sum_db
from audition.hearing.zwicker import core_loudness, specific_loudness

F = THIRD_OCTAVE_HZ
I_1K = int(np.flatnonzero(F == 1000.0)[0])
EMPTY = -60.0  # an empty band for mosqito, as in its own test of ISO 532-1 test signal 1


# ---------------------------------------------------------------------------------------------
# Threshold in quiet (Terhardt 1979) and critical-band rate (Zwicker and Terhardt 1980)
# ---------------------------------------------------------------------------------------------

def test_threshold_at_1khz_is_terhardts_value():
    # Terhardt (1979), Hearing Research 1:155-182: A(1 kHz) = 3.64 - 6.5 e^(-0.6 * 2.3^2) + 1e-3
    # = 3.37 dB, the formula as published, evaluated by hand.
    assert threshold_db_spl(1000.0) == pytest.approx(3.64 - 6.5 * np.exp(-0.6 * 2.3 ** 2) + 1e-3, abs=1e-12)
    assert threshold_db_spl(1000.0) == pytest.approx(3.37, abs=0.005)


# ISO 226:2003, threshold of hearing Tf (dB SPL), free field, 100 Hz ... 6.3 kHz: values recalled
# from memory, not read from the standard.
ISO_226_2003_TF_FROM_MEMORY = {
    100: 26.5, 125: 22.1, 160: 17.9, 200: 14.4, 250: 11.4, 315: 8.6, 400: 6.2, 500: 4.4,
    630: 3.0, 800: 2.2, 1000: 2.4, 1250: 3.5, 1600: 1.7, 2000: -1.3, 2500: -4.2, 3150: -6.0,
    4000: -5.4, 5000: -1.5, 6300: 6.0,
}


@pytest.mark.parametrize("f_hz, tf_db", sorted(ISO_226_2003_TF_FROM_MEMORY.items()))
def test_threshold_agrees_with_iso_226_2003_within_4_db(f_hz, tf_db):
    # ISO 226:2003 Tf column (from memory). Terhardt's formula is a fit to the older threshold
    # data that ISO 226:2003 revised, so it is held to 4 dB: less than the spread of individual
    # thresholds among otologically normal young adults (a standard deviation of about 5 dB,
    # from memory, ISO 28961:2012).
    assert threshold_db_spl(f_hz) == pytest.approx(tf_db, abs=4.0)


def test_threshold_shape():
    # Terhardt (1979): the ear-canal dip near 3-4 kHz is the minimum of the curve, and it rises
    # steeply below 100 Hz and above 10 kHz (the f^-0.8 and f^4 terms).
    f = np.geomspace(20.0, 16000.0, 2000)
    a = threshold_db_spl(f)
    assert 3000.0 < f[np.argmin(a)] < 4000.0
    assert a[0] > 60.0 and a[-1] > 60.0
    assert a.shape == f.shape


def test_bark_at_1khz():
    # Zwicker & Terhardt (1980) JASA 68(5), eq. 1 evaluated by hand: 13 atan(0.76) +
    # 3.5 atan((1/7.5)^2) = 8.447 + 0.062 = 8.51 Bark.
    assert bark(1000.0) == pytest.approx(13 * np.arctan(0.76) + 3.5 * np.arctan((1 / 7.5) ** 2), abs=1e-12)
    assert bark(1000.0) == pytest.approx(8.51, abs=0.005)


# Upper edges of Zwicker's 24 critical bands (Hz), E. Zwicker (1961), JASA 33(2): 248; recalled
# from memory. Band k ends at k Bark.
ZWICKER_1961_EDGES_FROM_MEMORY = [100, 200, 300, 400, 510, 630, 770, 920, 1080, 1270, 1480, 1720,
                                  2000, 2320, 2700, 3150, 3700, 4400, 5300, 6400, 7700, 9500,
                                  12000, 15500]


def test_bark_follows_zwickers_critical_band_table():
    # Zwicker & Terhardt (1980) present eq. 1 as a fit to Zwicker's (1961) table within about
    # +-0.2 Bark (from memory); held to 0.25 Bark at every tabulated edge.
    z = bark(np.array(ZWICKER_1961_EDGES_FROM_MEMORY, dtype=float))
    np.testing.assert_allclose(z, np.arange(1, 25), atol=0.25)


def test_bark_puts_each_band_in_the_iso_532_1_critical_band_it_feeds():
    # ISO 532-1:2017 Annex A: the bands 315 Hz ... 12.5 kHz are the critical bands 4 ... 20,
    # whose upper limits (ZUP, Bark) are 3.5, 4.4, ..., 23.6. The two sources must agree on
    # which band lies where.
    zup = np.array([0.9, 1.8, 2.8, 3.5, 4.4, 5.4, 6.6, 7.9, 9.2, 10.6, 12.3, 13.8, 15.2, 16.7,
                    18.1, 19.3, 20.6, 21.8, 22.7, 23.6])
    for band in range(11, 28):
        cb = band - 8
        assert zup[cb - 1] < bark(F[band]) <= zup[cb], F[band]
    # and the low groups 25-80 Hz, 100-160 Hz, 200-250 Hz
    assert np.all(bark(F[:6]) <= zup[0])
    assert np.all((zup[0] < bark(F[6:9])) & (bark(F[6:9]) <= zup[1]))
    assert np.all((zup[1] < bark(F[9:11])) & (bark(F[9:11]) <= zup[2]))


@pytest.mark.parametrize("func", [threshold_db_spl, bark])
@pytest.mark.parametrize("bad", [0.0, -100.0, np.nan, np.inf])
def test_formulas_refuse_frequencies_without_a_value(func, bad):
    # Both formulas hold for f > 0 only (f^-0.8 at 0 Hz); a bad value is a BadParameter.
    with pytest.raises(BadParameter, match="f_hz"):
        func(bad)


# ---------------------------------------------------------------------------------------------
# ISO 532-1:2017 loudness against mosqito (reference library)
# ---------------------------------------------------------------------------------------------

def _spectra():
    """Named one-third-octave spectra, 30 ... 90 dB: pink-ish, white-ish, single bands, random."""
    rng = np.random.default_rng(20170532)
    octaves = np.log2(F / 1000.0)
    spectra = {}
    for level in (30.0, 50.0, 70.0, 90.0):
        spectra[f"pink {level:g} dB"] = np.full(28, level)                       # equal band levels
        spectra[f"white {level:g} dB"] = level + 3.0 * octaves                   # +3 dB per octave
        spectra[f"falling {level:g} dB"] = level - 3.0 * np.maximum(octaves, 0)  # programme-like
        for band in (4, 12, I_1K, 22, 27):
            single = np.full(28, EMPTY)
            single[band] = level
            spectra[f"{F[band]:g} Hz alone at {level:g} dB"] = single
    for k in range(24):
        spectra[f"random {k}"] = rng.uniform(20.0, 90.0, 28)
    return spectra


SPECTRA = _spectra()
# mosqito's range search for the low-frequency weighting stops at the seventh range (it never
# applies the eighth range's reductions), so above the seventh range limits, 100 ... 118 dB in
# the bands 25 ... 250 Hz, it departs from the standard's program. The spectra stay below.
assert all(s[:11].max() <= 100.0 for s in SPECTRA.values())
LEVELS = np.array(list(SPECTRA.values())).T                                  # (28, n)


@pytest.fixture(scope="module", params=["free", "diffuse"])
def against_mosqito(request):
    field = request.param
    core_ref = _main_loudness(LEVELS.copy(), field)
    total_ref, specific_ref = _calc_slopes(core_ref.copy())
    total, specific = loudness(LEVELS, field)
    return field, core_ref, total_ref, specific_ref, total, specific


def test_core_loudness_matches_mosqito(against_mosqito):
    # mosqito _main_loudness (ISO 532-1:2017 A.3 steps, from its C program): the core loudness
    # involves no rounding and no slope walk, so the transcribed tables must give the same
    # values to the last digits.
    field, core_ref, *_ = against_mosqito
    np.testing.assert_allclose(core_loudness(LEVELS, field), core_ref, rtol=1e-12, atol=1e-12)


def test_total_loudness_matches_mosqito(against_mosqito):
    # mosqito _calc_slopes. It rounds the total as the standard's program prints it (0.001 sone
    # up to 16 sone, 0.01 sone above), hence that half-step; and where a slope crosses a range
    # limit and reaches the band's core loudness between two 0.1-Bark points its walk does not
    # stop there (see the specific-loudness test), which moves the total by a few hundredths of
    # a per cent: 0.1 % is allowed for it.
    _, _, total_ref, _, total, _ = against_mosqito
    half_step = np.where(total_ref <= 16.0, 0.0005, 0.005)
    assert np.all(np.abs(total - total_ref) <= half_step + 1e-3 * total_ref + 1e-9)


def test_specific_loudness_matches_mosqito(against_mosqito):
    # mosqito _calc_slopes, at the 240 points 0.1 ... 24 Bark. Everywhere within the standard's
    # own compliance tolerance for stationary signals (ISO 532-1:2017, 5.1: 5 % or
    # 0.1 sone/Bark, whichever is larger); and the same values (1e-9) at 99 % of the points at
    # least. The rest is mosqito's: where a slope crosses an RNS limit and then reaches the
    # band's core loudness before the next 0.1-Bark point, mosqito keeps falling past the core
    # loudness, which the standard's walk never does (next test).
    _, _, _, specific_ref, _, specific = against_mosqito
    difference = np.abs(specific - specific_ref)
    assert np.all(difference <= np.maximum(0.05 * specific_ref, 0.1))
    assert np.mean(difference <= 1e-9) >= 0.99


def test_pattern_never_lies_below_the_core_loudness_of_its_band():
    # ISO 532-1:2017 A.3: a slope stops falling at the core loudness of the band it reaches, and
    # a band without a slope is its core loudness. So N'(z) >= N'c of the band that owns z.
    core = core_loudness(LEVELS)
    _, specific = specific_loudness(core)
    zup = np.rint(np.array([0.9, 1.8, 2.8, 3.5, 4.4, 5.4, 6.6, 7.9, 9.2, 10.6, 12.3, 13.8, 15.2,
                            16.7, 18.1, 19.3, 20.6, 21.8, 22.7, 23.6, 24.0]) * 10).astype(int)
    owner = np.searchsorted(zup, np.arange(1, 241))   # a band owns its upper edge point
    # (1e-9: the shared interpolation axis of the slope columns rounds at about 1e-12)
    assert np.all(specific >= core[owner] - 1e-9)
    # and equals it where the pattern rises into a band (the band's core loudness is at least
    # the pattern arriving from below: no slope to ride on)
    for b in range(1, 21):
        first, last_below = zup[b - 1], zup[b - 1] - 1
        where = core[b] >= specific[last_below]
        assert where.any()
        np.testing.assert_allclose(specific[first, where], core[b, where], rtol=1e-9, atol=1e-9)


# ---------------------------------------------------------------------------------------------
# ISO 532-1:2017 Annex B and the definition of the sone
# ---------------------------------------------------------------------------------------------

def test_iso_532_1_annex_b2_test_signal_1():
    # ISO 532-1:2017 Annex B.2, test signal 1, given as one-third-octave levels, N = 83.296 sone
    # (levels and value as carried in the ISO 532-1 validation suites of MoSQITo and SQAT).
    # The input is exact, so the tolerance is not the standard's 5 % but 0.002 sone: the
    # annex's value has three decimals, and the standard's program integrates 0.0001 Bark
    # more of the lowest band (it adds 0.0001 to ZUP), about 0.0005 sone here.
    levels = np.array([-60, -60, 78, 79, 89, 72, 80, 89, 75, 87, 85, 79, 86, 80, 71, 70, 72, 71,
                       72, 74, 69, 65, 67, 77, 68, 58, 45, 30], dtype=float)
    total, specific = loudness(levels)
    assert total == pytest.approx(83.296, abs=0.002)
    assert specific.shape == (240,)


def tone_band_levels(f_hz, level_db):
    """A pure tone's levels in the 28 bands, through one-third-octave band-pass filters.

    Each band is a third-order Butterworth band-pass (base-10 exact mid-bands 1000 * 10^(k/10),
    edges at 10^(+-0.05) times the mid-band): |H|^2 = 1 / (1 + ((f/fm - fm/f) / B)^6),
    B = 10^0.05 - 10^-0.05. That is the common realisation of IEC 61260-1 class 1 filters
    (common practice), and the filters of ISO 532-1 Annex A.2 are sixth-order band-passes of
    this kind (from memory). A tone's loudness depends on its levels in the neighbouring bands:
    the same tone in its own band alone reads about 7 % less at 1 kHz, 40 dB.
    """
    fm = 1000.0 * 10.0 ** (np.arange(-16, 12) / 10.0)
    x = (f_hz / fm - fm / f_hz) / (10.0 ** 0.05 - 10.0 ** -0.05)
    return level_db - 10.0 * np.log10(1.0 + x ** 6)


@pytest.mark.parametrize("name, f_hz, level_db, expected_sone", [
    ("test signal 2", 250.0, 80.0, 14.655),
    ("test signal 3", 1000.0, 60.0, 4.019),
    ("test signal 4", 4000.0, 40.0, 1.549),
])
def test_iso_532_1_annex_b3_tones(name, f_hz, level_db, expected_sone):
    # ISO 532-1:2017 Annex B.3, stationary test signals 2-4 (pure tones; the values as carried in
    # SQAT's ISO 532-1 validation script and MoSQITo's tests). The annex gives sound files; here
    # the tone's band levels come from the Butterworth model of the filter bank above, so the
    # check is held to the standard's compliance tolerance for total loudness, 5 % (ISO 532-1
    # 5.1). Test signal 5 (pink noise) is left out: its band levels depend on the annex's
    # noise file, which is not at hand.
    assert loudness(tone_band_levels(f_hz, level_db))[0] == pytest.approx(expected_sone, rel=0.05)


def test_one_sone_is_a_1khz_tone_at_40_db():
    # The definition of the sone (ISO 532-1:2017, clause 3, terms and definitions): a 1 kHz tone
    # at 40 dB SPL in a frontal free field is 1 sone. Held to the standard's 5 % compliance
    # tolerance, with the tone's band levels from the filter-bank model above.
    assert loudness(tone_band_levels(1000.0, 40.0))[0] == pytest.approx(1.0, rel=0.05)


def test_loudness_doubles_per_10_db_above_40_db():
    # The sone scale: above 40 phon the loudness of a 1 kHz tone doubles for every 10 dB
    # (Stevens' power law with exponent 0.3 on intensity gives 10^0.3 = 1.995 per 10 dB);
    # held to 5 %.
    totals = loudness(np.stack([tone_band_levels(1000.0, lv) for lv in (40, 50, 60, 70, 80)], axis=1))[0]
    np.testing.assert_allclose(totals[1:] / totals[:-1], 2.0, rtol=0.05)


# ---------------------------------------------------------------------------------------------
# ISO 532-1 implementation: vectorisation, fields, silence, errors
# ---------------------------------------------------------------------------------------------

def test_columns_are_independent_spectra():
    # A (28, n) call is n one-spectrum calls (the definition of the batch; no external source).
    totals, specifics = loudness(LEVELS[:, :7])
    for k in range(7):
        total, specific = loudness(LEVELS[:, k])
        assert isinstance(total, float)
        assert totals[k] == pytest.approx(total, rel=1e-12)
        np.testing.assert_allclose(specifics[:, k], specific, rtol=1e-12, atol=1e-15)


def test_silence_is_zero_and_loudness_grows_with_level():
    # ISO 532-1: below the threshold in quiet the core loudness is 0; N' grows with the level
    # in every band (the core-loudness formula is increasing in L_E).
    silent = np.full((28, 1), -np.inf)
    total, specific = loudness(silent)
    assert total[0] == 0.0 and np.all(specific == 0.0)
    quieter, louder = loudness(np.stack([LEVELS[:, 30], LEVELS[:, 30] + 0.5], axis=1))[0]
    assert louder > quieter
    assert BARK_GRID[0] == pytest.approx(0.1) and BARK_GRID[-1] == pytest.approx(24.0)


@pytest.mark.parametrize("f_hz, ddf_db", [(2000.0, -1.4), (8000.0, 4.0)])
def test_diffuse_field_adds_the_standards_level_difference(f_hz, ddf_db):
    # ISO 532-1:2017 A.3: in a diffuse field the level difference DDF is added to the
    # critical-band level before the core loudness; DDF = -1.4 dB for the critical band of the
    # 2 kHz band and +4 dB for that of the 8 kHz band (the standard's table). Above 250 Hz
    # nothing else differs, so a lone band in a diffuse field is as loud as the same band
    # DDF louder in a free field.
    diffuse, free = np.full(28, -np.inf), np.full(28, -np.inf)
    diffuse[F == f_hz] = 60.0
    free[F == f_hz] = 60.0 + ddf_db
    assert loudness(diffuse, field="diffuse")[0] == pytest.approx(loudness(free, field="free")[0], rel=1e-12)


@pytest.mark.parametrize("levels, match", [
    (np.zeros(27), "shape"),
    (np.zeros((28, 2, 2)), "shape"),
    (np.full(28, np.nan), "NaN"),
    (np.full(28, np.inf), "NaN or \\+inf"),
    (np.full(28, 201.0), "at most 200"),
])
def test_loudness_refuses_bad_levels(levels, match):
    with pytest.raises(BadParameter, match=match):
        loudness(levels)


def test_loudness_refuses_an_unknown_field():
    with pytest.raises(BadParameter, match="field"):
        loudness(np.zeros(28), field="headphones")


@pytest.mark.parametrize("module", [audition.hearing.zwicker, audition.hearing.threshold,
                                    audition.hearing.heard], ids=lambda m: m.__name__)
def test_docstring_examples(module):
    # Docstring examples run as tests (house rule: the documentation cannot drift).
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0


# ---------------------------------------------------------------------------------------------
# The hiss heard over a programme
# ---------------------------------------------------------------------------------------------

HISS = 35.0 - 1.0 * np.log2(F / 1000.0)     # a hiss spectrum, band levels in dB SPL


def test_power_sum():
    # Powers of uncorrelated sounds add: 60 dB (+) 60 dB = 63.01 dB, x (+) -inf = x
    # (definition of the decibel; common practice).
    assert power_sum_db(60.0, 60.0) == pytest.approx(60.0 + 10 * np.log10(2.0), abs=1e-12)
    assert power_sum_db(47.0, -np.inf) == pytest.approx(47.0, abs=1e-12)
    assert power_sum_db(-np.inf, -np.inf) == -np.inf


def test_hiss_alone_in_a_pause_is_heard_whole():
    # ISO 532-1 as defined: with no programme, N(-inf (+) H) - N(-inf) = N(H), the hiss's own
    # loudness; audible in every band where its own specific loudness is above zero.
    result = hiss_heard(np.full(28, -np.inf), HISS)
    own_total, own_specific = loudness(HISS)
    assert result.heard_sone == pytest.approx(own_total, rel=1e-12)
    assert result.programme_sone == 0.0
    grid = np.clip(np.rint(BAND_BARK * 10).astype(int) - 1, 0, 239)
    np.testing.assert_array_equal(result.audible, own_specific[grid] > 0)
    assert result.audible.sum() >= 20


def test_programme_40_db_above_the_hiss_masks_it():
    # Power sum: 40 dB below, the hiss raises each band by 10 lg(1 + 1e-4) = 0.0004 dB, far
    # under the 1 dB taken as just noticeable (from memory: 0.5-1 dB for broadband noise,
    # Zwicker & Fastl). So no band is audible, and the loudness added is under 1 % of the
    # hiss's own.
    result = hiss_heard(HISS + 40.0, HISS)
    assert not result.audible.any()
    assert 0.0 <= result.heard_sone < 0.01 * loudness(HISS)[0]


def test_programme_in_the_low_bands_leaves_the_high_band_hiss_audible():
    # ISO 532-1 masking slopes reach only a few Bark above a sound: a programme at 70 dB up to
    # 500 Hz (4.7 Bark) masks the hiss there but not at 2 kHz and above (13 Bark and up), where
    # the programme has no specific loudness and the hiss is above the threshold in quiet.
    programme = np.where(F <= 500.0, 70.0, -np.inf)
    result = hiss_heard(programme, HISS)
    assert not result.audible[F <= 500.0].any()
    assert result.audible[F >= 2000.0].all()
    assert 0.0 < result.heard_sone < loudness(HISS)[0]


@pytest.mark.parametrize("hiss_below_db, audible", [(0.0, True), (10.0, False)])
def test_audibility_uses_the_1_db_criterion(hiss_below_db, audible):
    # Power sum: a hiss level with the programme raises each band by 3.01 dB (> 1 dB, audible);
    # 10 dB below, by 0.41 dB (< 1 dB, not audible). JND_DB = 1 dB (from memory: the
    # just-noticeable level difference of broadband noise is about 0.5-1 dB, Zwicker & Fastl).
    assert JND_DB == 1.0
    programme = np.full(28, 60.0)
    result = hiss_heard(programme, programme - hiss_below_db)
    assert np.all(result.audible == audible)


def test_heard_is_vectorised_over_frames_and_candidates():
    # One (28, n) call is n one-column calls (definition of the batch); a (28,) hiss applies to
    # every column; a (28, n) hiss goes column by column.
    programme = LEVELS[:, :6]
    hisses = np.stack([HISS - 10.0 * k for k in range(6)], axis=1)
    shared = hiss_heard(programme, HISS)
    each = hiss_heard(programme, hisses)
    assert shared.heard_sone.shape == (6,) and shared.audible.shape == (28, 6)
    for k in range(6):
        one = hiss_heard(programme[:, k], hisses[:, k])
        assert isinstance(one.heard_sone, float) and one.audible.shape == (28,)
        assert each.heard_sone[k] == pytest.approx(one.heard_sone, rel=1e-12, abs=1e-12)
        np.testing.assert_array_equal(each.audible[:, k], one.audible)
        np.testing.assert_allclose(each.rise_sone_per_bark[:, k], one.rise_sone_per_bark, rtol=1e-12, atol=1e-12)
    np.testing.assert_array_equal(shared.audible[:, 0], each.audible[:, 0])
    # and a quieter hiss is never heard more: the model is monotone in the hiss level
    assert np.all(np.diff(hiss_heard(np.repeat(programme[:, :1], 6, axis=1), hisses).heard_sone) <= 1e-12)


def test_heard_refuses_mismatched_columns():
    with pytest.raises(BadParameter, match="columns"):
        hiss_heard(np.zeros((28, 3)), np.zeros((28, 2)))
    with pytest.raises(BadParameter, match="hiss_db_spl"):
        hiss_heard(np.zeros(28), np.zeros(12))
