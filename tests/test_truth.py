"""The survey and the planner against ground truth: synthesised clips whose stems are known.

Truth is computed here, independently of the survey: the programme stem and the
hiss stem are filtered separately with scipy.signal.sosfilt (reference library)
and their spectra estimated with scipy.signal.welch (reference library).
"""

import math
from functools import lru_cache

import numpy as np
import pytest
from scipy import signal

import heardtruth
from audition import design, plan, synth
from audition.survey import bands, onepass
from audition.weighting import power_gain

NPERSEG = 8192


@lru_cache(maxsize=None)
def clip(hiss_dbfs=-50.0, top_hz=5000.0, hiss="tape", seed=3, programme="broadband"):
    return synth.synthesise(seconds=12.0, rate_hz=44100, channels=1, hiss_dbfs=hiss_dbfs, hiss=hiss,
                            lead_in_seconds=1.5, seed=seed, programme_top_hz=top_hz, programme=programme)


@lru_cache(maxsize=None)
def surveyed(*key):
    """The streaming survey every command plans and predicts with."""
    c = clip(*key)
    return onepass.survey_array(c.mix, c.rate_hz)


def floored_per_bin(s):
    """The naive programme estimate, outside minus noise floored bin by bin, to compare against."""
    return np.maximum(s.outside_psd - s.noise_psd, 0.0)


def welch(x, rate):
    return signal.welch(x[:, 0], fs=rate, nperseg=NPERSEG)


@lru_cache(maxsize=None)
def truth_psds(*key):
    """Programme stem PSD over the programme (after the lead-in) and hiss stem PSD."""
    c = clip(*key)
    start = int(c.lead_in_seconds * c.rate_hz)
    f, pp = welch(c.programme[start:], c.rate_hz)
    _, pn = welch(c.hiss, c.rate_hz)
    return f, pp, pn


def true_effect(key, d, weighting):
    """SNR gain and treble loss computed by filtering the stems separately (reference: sosfilt, welch)."""
    c = clip(*key)
    start = int(c.lead_in_seconds * c.rate_hz)
    f, pp, pn = truth_psds(*key)
    _, pp2 = welch(signal.sosfilt(d.sos, c.programme, axis=0)[start:], c.rate_hz)
    _, pn2 = welch(signal.sosfilt(d.sos, c.hiss, axis=0), c.rate_hz)
    w = power_gain(weighting, f)
    gain = 10 * math.log10((np.sum(pp2 * w) / np.sum(pn2 * w)) / (np.sum(pp * w) / np.sum(pn * w)))
    t = f >= 2000
    loss = 10 * math.log10(np.sum(pp[t]) / np.sum(pp2[t]))  # monotone filters only: lost = before - after
    return gain, loss


KEYS = [(-50.0, 5000.0, "tape"), (-42.0, 3500.0, "white"), (-58.0, 7000.0, "pink")]


@pytest.mark.parametrize("key", KEYS)
def test_noise_level_matches_hiss_stem(key):
    # Ground truth: the survey's noise RMS within 0.5 dB of the hiss stem's RMS (the survey issue's tolerance).
    c = clip(*key)
    s = surveyed(*key)
    stem_dbfs = 20 * math.log10(np.sqrt(np.mean(c.hiss**2)))
    assert s.noise_rms_dbfs == pytest.approx(stem_dbfs, abs=0.5)


@pytest.mark.parametrize("key", KEYS)
@pytest.mark.parametrize("f0,q,order,alignment", [(6000.0, 0.7071, 2, None), (4000.0, 0.5, 2, None),
                                                  (8000.0, None, 4, "butterworth"), (3000.0, None, 4, "bessel")])
def test_prediction_matches_filtered_stems(key, f0, q, order, alignment):
    # Ground truth from the stems filtered separately: predicted SNR gain and treble loss within 0.5 dB.
    from audition import measure

    s = surveyed(*key)
    d = design.lowpass(f0, 44100, q=q, order=order, alignment=alignment)
    p = measure.predict(s.freqs_hz, s.programme_psd, s.noise_psd, d)
    for weighting in ("flat", "a", "itu468"):
        gain, loss = true_effect(key, d, weighting)
        assert p.snr_gain_db[weighting] == pytest.approx(gain, abs=0.5), weighting
    assert p.treble_loss_db == pytest.approx(loss, abs=0.5)


@pytest.mark.parametrize("key", KEYS)
def test_crossover_within_a_third_octave_of_truth(key):
    # Truth: the lowest 1/3-octave band above which the programme stem's band level stays below
    # the hiss stem's (IEC 61260-1 bands, computed here from the stems' welch PSDs).
    f, pp, pn = truth_psds(*key)
    c, bp = bands.band_levels(f, np.stack([pp, pn]), 3)
    below = bp[0] < bp[1]
    true_xo = None
    for i in range(len(c)):
        if below[i:].all():
            true_xo = c[i]
            break
    s = surveyed(*key)
    assert true_xo is not None and s.crossover_hz is not None
    assert abs(math.log2(s.crossover_hz / true_xo)) <= 1 / 3 + 1e-9


def peak_db(d, f):
    return 10 * math.log10(np.max(np.abs(d.digital_response(f)) ** 2))


@pytest.mark.parametrize("key", KEYS)
def test_refined_programme_estimate_tracks_the_stem_where_the_floor_hides_it(key):
    # Truth: the programme stem's power above the crossover (IEC 61260-1 1/3-octave bands of the
    # stem's scipy welch PSD), scaled to the estimate's level over 200 Hz - 2 kHz, where the programme
    # stands far above the hiss (the survey averages the programme's loud segments only, the stem
    # every frame after the lead-in). The bin-by-bin floored estimate reads up to 8 dB too much
    # there (hiss scatter kept by the floor); the band-averaged one must lie within 3 dB of truth
    # and never further from it than the floored one.
    f, pp, pn = truth_psds(*key)
    s = surveyed(*key)
    c, bp = bands.band_levels(f, np.stack([pp, floored_per_bin(s), s.programme_psd]), 3)
    low = (c >= 200) & (c <= 2000)
    truth = bp[0] * (bp[1, low].sum() / bp[0, low].sum())
    high = c >= s.crossover_hz
    err_raw, err_ref = (abs(10 * math.log10(b[high].sum() / truth[high].sum())) for b in (bp[1], bp[2]))
    assert err_ref <= 3.0
    assert err_ref <= err_raw + 1e-9
    # Below the crossover the two agree: the refinement only acts where the hiss dominates.
    np.testing.assert_allclose(bp[2, low], bp[1, low], rtol=0.05)


# --- the planner against truth from the stems (tests/heardtruth.py) ---------------------------------------

def truth_bands(*key):
    c = clip(*key)
    start = int(c.lead_in_seconds * c.rate_hz)
    return heardtruth.audible_bands(c.programme[start:], c.hiss, c.rate_hz)


def true_treble_loss(key, d):
    c = clip(*key)
    return heardtruth.true_treble_loss(c.programme, c.hiss, d.sos, c.rate_hz, int(c.lead_in_seconds * c.rate_hz))


DARK_KEYS = [(-50.0, 5000.0, "tape", 3, "dark"), (-44.0, 3500.0, "white", 5, "dark"),
             (-52.0, 8000.0, "tape", 7, "dark"), (-48.0, 6000.0, "pink", 9, "dark")]


@pytest.mark.parametrize("key,budget", [(k, b) for b in (0.5, 1.0, 2.0) for k in KEYS + DARK_KEYS[:1]])
def test_chosen_filter_true_treble_loss_within_budget(key, budget):
    # The planner issue's check: the choice's treble loss measured from the clean programme and the hiss
    # separately (above) is within the budget plus 0.3 dB.
    s = surveyed(*key)
    pl = plan.plan(s.hearing_bands, budget_db=budget, crossover_hz=s.crossover_hz)
    if pl.choice is None:
        assert pl.no_filter_reason
        return
    assert true_treble_loss(key, pl.choice.design) <= budget + 0.3


@pytest.mark.parametrize("key", DARK_KEYS)
def test_cutoff_lands_near_where_the_programme_sinks_into_the_hiss(key):
    # Where the programme sinks into the hiss at f_c (the truth above: the band above the last one where
    # the programme's loud moments stand above the hiss), the choice's -3 dB point lies in 0.7 f_c .. 1.6 f_c.
    # The first two clips get a filter; the last two (f_c at 12.5 and 10 kHz) get "no filter".
    centres, _, _, _, above = truth_bands(*key)
    f_c = centres[np.flatnonzero(above)[-1] + 1]
    s = surveyed(*key)
    pl = plan.plan(s.hearing_bands, crossover_hz=s.crossover_hz)
    # where the answer is "no filter" (a crossover high in the treble leaves little heard hiss to take), the
    # best compromise it names must still sit there
    c = pl.choice or pl.best_compromise
    assert c is not None, pl.no_filter_reason
    f3 = c.design.minus3db_hz()
    assert 0.7 * f_c <= f3 <= 1.6 * f_c, (f3, f_c, c.label)


def test_choice_within_two_percent_of_an_exhaustive_search():
    # Exhaustive: every shape of orders 2 and 4 on a grid twice as fine (1/48 octave), every f0 within the
    # budget, the hiss heard evaluated on every frame (no grouping). The planner's choice, evaluated
    # exactly, leaves no more than 2 % more heard hiss than the best found (plus a 0.005-sone floor).
    from audition.plan import audible, shapes

    key = DARK_KEYS[0]
    s = surveyed(*key)
    b = s.hearing_bands
    pl = plan.plan(b, orders=(2, 4))
    assert pl.choice is not None
    sh = shapes.shapes((2, 4))
    over = shapes.overshoot_pct(sh)
    sh = [x for x, o in zip(sh, over)
          if x.peak_db() <= plan.DEFAULT_MAX_PEAK_DB + 1e-9 and o <= plan.DEFAULT_MAX_OVERSHOOT_PCT + 1e-9]
    f0s = shapes.f0_grid(44100, points_per_octave=48)
    pts, w_p, w_n = b.grid()
    h2 = shapes.power_grid(sh, f0s, pts, 44100)
    g_p, g_n = audible.band_gains(h2, w_p), audible.band_gains(h2, w_n)
    loss, _ = audible.treble_loss(g_p, audible.audible_bands(b, 100.0, 0.0, 2000.0), b.centres_hz)
    ok = np.argwhere(loss <= 1.0 + 1e-9)
    prog = b.programme_frames
    after = audible.heard_after_columns(b, prog, np.full(len(prog), 1 / len(prog)),
                                        np.stack([g_p[i, j] for i, j in ok]), np.stack([g_n[i, j] for i, j in ok]),
                                        100.0)
    assert pl.choice.hiss_heard.after_sone <= after.min() * 1.02 + 0.005


def test_no_filter_when_the_hiss_is_not_heard():
    # At a quiet listening level the hiss stays under the threshold of hearing: "no filter", with the reason.
    s = surveyed(*KEYS[0])
    pl = plan.plan(s.hearing_bands, listening_level_db=45.0)
    assert pl.choice is None and "not heard" in pl.no_filter_reason


def test_bright_programme_gets_no_filter_or_one_within_the_budget():
    # The broadband programme (treble bursts to 16 kHz) over quiet hiss: it stands above the hiss to the top.
    key = (-72.0, 16000.0, "white", 11)
    s = surveyed(*key)
    pl = plan.plan(s.hearing_bands, crossover_hz=s.crossover_hz)
    assert pl.choice is None or true_treble_loss(key, pl.choice.design) <= 1.0 + 0.3
    pj = pl.to_dict()
    assert ("choice" in pj) and ("no_filter_reason" in pj)


@pytest.mark.parametrize("key", KEYS[:2])
def test_looser_budget_never_leaves_more_hiss(key):
    s = surveyed(*key)
    after = []
    for budget in (0.5, 1.0, 2.0, 4.0):
        pl = plan.plan(s.hearing_bands, budget_db=budget)
        best = pl.choice or pl.best_compromise
        after.append(best.hiss_heard.after_sone if best else math.inf)
    # equal within the 2 % near-tie rule (which may pick a lower order for a little less)
    assert all(b <= a * 1.02 + 1e-9 for a, b in zip(after, after[1:])), after


def test_search_holds_the_alignments():
    # Alignment definitions: fourth-order Butterworth sections Q = 0.5412 and 1.3066 (active-filter handbook
    # tables, from memory); Bessel sections as in the table checked in test_design.py.
    from audition.plan import shapes

    sh = shapes.shapes((2, 4))
    assert any(x.order == 2 and abs(x.q - 1 / math.sqrt(2)) < 1e-12 for x in sh)
    bw4 = [x for x in sh if x.order == 4 and x.alignment == "butterworth"][0]
    assert [round(q, 4) for _, q in bw4.sections] == [0.5412, 1.3066]
    be4 = [x for x in sh if x.order == 4 and x.alignment == "bessel"][0]
    assert [round(q, 2) for _, q in be4.sections] == [0.52, 0.81]


def test_quiet_hiss_warns():
    s = surveyed(-100.0, 5000.0, "tape", 3)
    assert any("very low" in w for w in plan.noise_warnings(s))


def test_hum_warns():
    # Hum, not hiss: a 50 Hz line and harmonics in the noise.
    c = clip(*KEYS[0])
    t = np.arange(len(c.mix)) / c.rate_hz
    hum = 0.003 * (np.sin(2 * np.pi * 50 * t) + 0.5 * np.sin(2 * np.pi * 150 * t))
    s = onepass.survey_array(c.mix + hum[:, None], c.rate_hz, noise_spans=[(0.1, 1.4)])
    assert any(w.startswith("hum") for w in plan.noise_warnings(s))
    assert not any(w.startswith("hum") for w in plan.noise_warnings(surveyed(*KEYS[0])))
